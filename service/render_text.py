"""Texts along the spectrum picture's frequency axis: one per carrier above the spectrum (and
each carrier's bar, drawn at a least width so that a narrow carrier stays visible), one per gap
below it.  Every text is tied to its place by a leader line; when horizontal texts would need
too many rows they turn upright, then shrink, then drop their details (never the name), then
take two rows.

Placement is measured, not guessed: each attempt draws the texts, asks the renderer for their
sizes and keeps the first arrangement in which no two overlap and every row fits the strip.
"""

from __future__ import annotations

import logging
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Literal

from matplotlib.axes import Axes
from matplotlib.backend_bases import RendererBase
from matplotlib.patches import Rectangle
from matplotlib.text import Text

from service.picture_layout import Footprint, Placed, footprints, spread_or_rows, tiers
from service.render_style import STYLE, Colour

__all__ = ["Strip", "TextItem", "draw_bars", "least_width_footprints", "place_texts"]

logger = logging.getLogger(__name__)

Form = Literal[0, 1, 2, 3]
"""0: horizontal; 1: upright, one line per detail; 2: upright, the details on one line;
3: upright, in brief (the name, and what changed)."""


@dataclass(frozen=True)
class TextItem:
    """One text and the place (axis data units) it belongs to."""

    anchor: float
    forms: tuple[str, str, str, str]
    """The text in each :data:`Form`."""
    gid: str
    colour: str = "black"
    edge: Colour | str | None = None
    """The box's edge colour (None: no box)."""
    dashed: bool = False
    bold: bool = False


@dataclass(frozen=True)
class Strip:
    """A band of the figure holding texts: above the spectrum (texts grow up from its bars)
    or below it (texts hang down from its top)."""

    ax: Axes
    upward: bool
    start: float
    """Where leader lines start (axes fraction): the bars' top, or the strip's top."""
    max_tiers: int
    gap_px: float
    font_pt: float
    brief_font_pt: float


@dataclass(frozen=True)
class _Attempt:
    form: Form
    size: float
    rows: int
    """0: horizontal tiers (up to the strip's ``max_tiers``); else upright, that many rows."""


def _attempts(strip: Strip) -> Iterator[_Attempt]:
    yield _Attempt(0, strip.font_pt, 0)
    for form in (1, 2):
        size = strip.font_pt
        while size >= STYLE.min_font_pt:
            yield _Attempt(form, size, 1)
            size -= STYLE.font_step_pt
    size = strip.brief_font_pt
    while size >= STYLE.min_font_pt:
        yield _Attempt(3, size, 1)
        size -= STYLE.font_step_pt
    for rows in (2, 3):
        yield _Attempt(3, STYLE.min_font_pt, rows)


def _new_text(strip: Strip, item: TextItem, attempt: _Attempt) -> Text:
    box = None
    if item.edge is not None:
        box = {
            "boxstyle": "round,pad=0.25",
            "facecolor": "white",
            "edgecolor": item.edge,
            "lw": 1.2,
            "ls": "--" if item.dashed else "-",
        }
    text = strip.ax.text(
        item.anchor,
        strip.start,
        item.forms[attempt.form],
        fontsize=attempt.size,
        ha="center",
        va="bottom" if strip.upward else "top",
        rotation=0 if attempt.form == 0 else 90,
        linespacing=1.15,
        color=item.colour,
        fontweight="bold" if item.bold else "normal",
        bbox=box,
        zorder=5,
    )
    text.set_gid(item.gid)
    return text


def _arrange(
    strip: Strip, attempt: _Attempt, anchors: Sequence[float], widths: Sequence[float]
) -> list[Placed] | None:
    lo, hi = strip.ax.get_xlim()
    renderer = _renderer(strip.ax)
    gap = strip.gap_px * (hi - lo) / strip.ax.get_window_extent(renderer).width
    if attempt.rows == 0:
        return tiers(anchors, widths, lo, hi, gap, strip.max_tiers)
    return spread_or_rows(anchors, widths, lo, hi, gap, rows=attempt.rows)


def _renderer(ax: Axes) -> RendererBase:
    renderer: RendererBase = ax.figure.canvas.get_renderer()  # type: ignore[attr-defined]
    return renderer


def place_texts(strip: Strip, items: Sequence[TextItem]) -> None:
    """Draw ``items`` (ascending anchors) in ``strip`` without overlaps, with leader lines.

    When nothing fits, the last attempt is drawn anyway (overlapping) and a warning logged.
    """
    if items:
        texts, placed, height = _first_fit(strip, items)
        _finish(strip, texts, placed, height)


def _first_fit(strip: Strip, items: Sequence[TextItem]) -> tuple[list[Text], list[Placed], float]:
    """The texts of the first attempt that fits, where they go and the height of a row."""
    ax = strip.ax
    renderer = _renderer(ax)
    lo, hi = ax.get_xlim()
    box = ax.get_window_extent(renderer)
    per_px = (hi - lo) / box.width
    anchors = [item.anchor for item in items]
    room = 1 - strip.start if strip.upward else strip.start
    texts: list[Text] = []
    height = 0.0
    best: list[Placed] | None = None
    for attempt in _attempts(strip):
        for text in texts:
            text.remove()
        texts = [_new_text(strip, item, attempt) for item in items]
        extents = [t.get_window_extent(renderer) for t in texts]
        widths = [e.width * per_px for e in extents]
        pad_px = 2 * 0.25 * attempt.size * 1.4 + 2  # the box's padding and line, both sides
        height = (max(e.height for e in extents) + pad_px) / box.height
        best = placed = _arrange(strip, attempt, anchors, widths)  # of the texts drawn now
        if placed is None:
            continue
        if STYLE.tier_base + (1 + max(p.tier for p in placed)) * height <= room:
            return texts, placed, height
    logger.warning("%d texts do not fit their strip; some overflow it", len(items))
    return texts, best or [Placed(a, a, i % 2) for i, a in enumerate(anchors)], height


def _finish(strip: Strip, texts: Sequence[Text], placed: Sequence[Placed], height: float) -> None:
    """Move each text to its row and draw its leader line from its anchor.

    When some text had to move aside, the texts stand further from their anchors (as far as
    the strip allows, up to ``leader_room``) and each leader rises straight from its anchor
    before it bends towards its text, so that a crowd of leaders fans out rather than lying
    flat along the strip's edge.
    """
    ax = strip.ax
    lo, hi = ax.get_xlim()
    per_px = (hi - lo) / ax.get_window_extent(_renderer(ax)).width
    rows = 1 + max(label.tier for label in placed)
    room = 1 - strip.start if strip.upward else strip.start
    aside = any(abs(label.position - label.anchor) > per_px for label in placed)
    base = STYLE.tier_base
    if aside:
        base = max(base, min(STYLE.leader_room, room - rows * height))
    sign = 1.0 if strip.upward else -1.0
    for text, label in zip(texts, placed, strict=True):
        y = strip.start + sign * (base + label.tier * height)
        text.set_position((label.position, y))
        bend = strip.start + sign * STYLE.leader_rise * base
        ax.plot(
            [label.anchor, label.anchor, label.position],
            [strip.start, bend, y],
            color=STYLE.leader_colour,
            lw=0.6,
            zorder=4,
        )


def least_width_footprints(
    ax: Axes, spans: Sequence[tuple[float, float, float, float]]
) -> list[Footprint]:
    """:func:`~service.picture_layout.footprints` with the style's least widths in pixels."""
    lo, hi = ax.get_xlim()
    per_px = (hi - lo) / ax.get_window_extent(_renderer(ax)).width
    return footprints(spans, STYLE.min_band_px * per_px, STYLE.min_guard_px * per_px, lo, hi)


def draw_bars(
    ax: Axes,
    spans: Sequence[tuple[float, float, float, float]],
    colours: Sequence[Colour],
    gids: Sequence[str],
) -> list[Footprint]:
    """Each carrier's bar and guards at the bottom of the label strip, at least
    :attr:`~service.render_style.Style.min_band_px` and ``min_guard_px`` wide.

    Patches get gids ``band-<gid>``, ``guard-below-<gid>`` and ``guard-above-<gid>``; returns
    the footprints drawn (axis data units).
    """
    drawn = least_width_footprints(ax, spans)
    for footprint, colour, gid in zip(drawn, colours, gids, strict=True):
        parts = (
            ("guard-below", footprint.guard_below, STYLE.guard_colour),
            ("band", footprint.band, colour),
            ("guard-above", footprint.guard_above, STYLE.guard_colour),
        )
        for name, (x0, x1), face in parts:
            if x1 > x0:
                patch = Rectangle(
                    (x0, 0.0), x1 - x0, STYLE.band_row, facecolor=face, edgecolor="none", lw=0
                )
                patch.set_gid(f"{name}-{gid}")
                ax.add_patch(patch)
    return drawn
