"""The spectrum picture's words and marks around the carriers: the header lines, the legend,
the cautions footer, and a replan's marks (where a moved or changed carrier was, where a
dropped carrier was, and the words in the labels).  Part of :mod:`service.render`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle

from service.picture_layout import Footprint
from service.picture_marks import CarrierChange
from service.render_style import STYLE, Colour
from service.render_text import TextItem, least_width_footprints
from service.schemas import RetuneChange
from service.units import format_frequency, format_rate, format_shift
from solver import CAUTIONS, CurrentSetting, Plan, Problem, format_code_rate

__all__ = ["change_words", "draw_earlier_row", "draw_legend", "draw_texts", "dropped_items"]

_FULL_WORDS = {
    RetuneChange.ADDED: "added",
    RetuneChange.RECONFIGURED: "reconfigured",
    RetuneChange.DROPPED: "dropped",
}
_BRIEF_WORDS = {
    RetuneChange.ADDED: "added",
    RetuneChange.MOVED: "moved",
    RetuneChange.RECONFIGURED: "reconfigured",
    RetuneChange.MOVED_AND_RECONFIGURED: "moved, reconf.",
    RetuneChange.DROPPED: "dropped",
}
_COUNT_WORDS = _BRIEF_WORDS | {RetuneChange.MOVED_AND_RECONFIGURED: "moved and reconfigured"}
_EARLIER = "the earlier plan"
_UNCHANGED_COLOUR = "#9e9e9e"


def change_words(change: CarrierChange) -> tuple[str, str]:
    """What changed, in full (``moved +250 kHz``) and in brief (``moved``), in the words of
    ``GET /v1/plans/{id}/retunes``."""
    full = _FULL_WORDS.get(change.change)
    if full is None:  # moved, perhaps reconfigured too: say by how much
        full = f"moved {format_shift(change.shift_hz)}"
        if change.change is RetuneChange.MOVED_AND_RECONFIGURED:
            full += ", reconfigured"
    return full, _BRIEF_WORDS[change.change]


def dropped_items(changes: Sequence[CarrierChange], anchors: Mapping[str, float]) -> list[TextItem]:
    """A label over each dropped carrier's earlier bar (``anchors``: the bars' centres)."""
    items = []
    for change in changes:
        if change.change is RetuneChange.DROPPED and change.before is not None:
            before = change.before
            modcod = f"{before.modulation.value} {format_code_rate(before.code_rate)}"
            items.append(
                TextItem(
                    anchors[change.demand_id],
                    (
                        f"{change.demand_id}\ndropped\n(was {modcod})",
                        f"{change.demand_id}\ndropped\n(was {modcod})",
                        f"{change.demand_id}\ndropped (was {modcod})",
                        f"{change.demand_id}\ndropped",
                    ),
                    f"label-dropped-{change.demand_id}",
                    colour=STYLE.dropped_colour,
                    edge=STYLE.dropped_colour,
                    dashed=True,
                )
            )
    return items


def draw_earlier_row(
    ax: Axes,
    before: Mapping[str, CurrentSetting],
    changes: Sequence[CarrierChange],
    now: Mapping[str, tuple[float, Colour]],
    scale_hz: float,
) -> dict[str, float]:
    """The earlier plan's bars in a row over this plan's bars, tied to where they are now.

    Parameters
    ----------
    ax : Axes
        The label strip; this plan's bars fill ``0 … band_row``, the earlier row sits
        ``earlier_gap`` above them.
    before : mapping of demand id to CurrentSetting
        Every earlier carrier's setting.
    changes : sequence of CarrierChange
        What changed (:func:`service.picture_marks.changes_since`).
    now : mapping of demand id to (bar centre, colour)
        This plan's bars as drawn.
    scale_hz : float
        Hz per axis unit.

    Returns
    -------
    dict
        Each earlier bar's centre (axis units), by demand id.

    Notes
    -----
    An unchanged carrier's earlier bar is a grey outline; a moved or changed one's is dashed in
    its colour (gid ``ghost-<id>``), with a line to its new bar when it moved (``shift-<id>``);
    a dropped one's is dotted and hatched (``dropped-<id>``).
    """
    ids = sorted(before, key=lambda d: before[d].center_hz)
    spans = []
    for demand_id in ids:
        setting = before[demand_id]
        half = setting.symbol_rate_baud * (1 + setting.rolloff) / 2
        lo, hi = (setting.center_hz - half) / scale_hz, (setting.center_hz + half) / scale_hz
        spans.append((lo, lo, hi, hi))
    drawn = least_width_footprints(ax, spans)
    kinds = {change.demand_id: change.change for change in changes}
    for demand_id, footprint in zip(ids, drawn, strict=True):
        _draw_earlier_bar(ax, demand_id, footprint, kinds.get(demand_id), now)
    bottom = STYLE.band_row + STYLE.earlier_gap
    for y, word in ((STYLE.band_row / 2, "now"), (bottom + STYLE.band_row / 2, "earlier")):
        ax.text(-0.004, y, word, transform=ax.transAxes, ha="right", va="center", fontsize=8)
    return {d: f.centre for d, f in zip(ids, drawn, strict=True)}


_EARLIER_GIDS = {None: "earlier", RetuneChange.DROPPED: "dropped"}


def _draw_earlier_bar(
    ax: Axes,
    demand_id: str,
    footprint: Footprint,
    kind: RetuneChange | None,
    now: Mapping[str, tuple[float, Colour]],
) -> None:
    """One earlier bar, and the line to the new bar when the carrier moved."""
    bottom = STYLE.band_row + STYLE.earlier_gap
    x0, x1 = footprint.band
    edge, ls, hatch = _earlier_style(kind, now.get(demand_id, (0.0, _UNCHANGED_COLOUR))[1])
    bar = Rectangle(
        (x0, bottom), x1 - x0, STYLE.band_row, fill=False, lw=1.2, edgecolor=edge, ls=ls
    )
    if hatch is not None:
        bar.set_hatch(hatch)
    bar.set_gid(f"{_EARLIER_GIDS.get(kind, 'ghost')}-{demand_id}")
    ax.add_patch(bar)
    if kind in (RetuneChange.MOVED, RetuneChange.MOVED_AND_RECONFIGURED):
        centre, colour = now[demand_id]
        (line,) = ax.plot(
            [footprint.centre, centre], [bottom, STYLE.band_row], color=colour, lw=1.2
        )
        line.set_gid(f"shift-{demand_id}")


def _earlier_style(
    kind: RetuneChange | None, colour: Colour | str
) -> tuple[Colour | str, str, str | None]:
    """Edge colour, line style and hatch of an earlier bar."""
    if kind is None:
        return _UNCHANGED_COLOUR, "-", None
    if kind is RetuneChange.DROPPED:
        return STYLE.dropped_colour, ":", "xxxx"
    return colour, "--", None


def _change_line(changes: Sequence[CarrierChange]) -> str:
    """``since the earlier plan: 1 added, 1 moved, 1 dropped`` (or ``no changes``)."""
    counts = {kind: sum(c.change is kind for c in changes) for kind in _COUNT_WORDS}
    said = [f"{n} {_COUNT_WORDS[kind]}" for kind, n in counts.items() if n]
    if not said:
        return f"no changes since {_EARLIER}"
    return f"since {_EARLIER}: " + ", ".join(said)


def draw_texts(
    figure: Figure,
    plan: Plan,
    problem: Problem,
    changes: Sequence[CarrierChange] | None,
    word: str,
    scale_hz: float,
) -> None:
    """Title (name), headline (status, throughput, efficiency), block and usage line (and what
    changed since the earlier plan), footer (the cautions)."""
    summary = plan.summary
    capped, capacity = (
        summary.efficiency_vs_target_capped_bound,
        summary.efficiency_vs_capacity_bound,
    )
    bound = (
        f"{capped:.0%} of the target-capped bound, {capacity:.0%} of capacity"
        if math.isfinite(capped) and math.isfinite(capacity)
        else "no bound"
    )
    name = (
        plan.name
        if len(plan.name) <= STYLE.max_title_chars
        else plan.name[: STYLE.max_title_chars - 1] + "…"
    )
    figure.text(STYLE.left, 0.967, name, fontsize=14, fontweight="bold", va="center")
    headline = (
        f"Status: {plan.status.value}   ·   {format_rate(summary.total_throughput_bps, 4)} "
        f"total   ·   {bound}   ·   {len(plan.carriers)} carriers"
    )
    figure.text(STYLE.left, 0.935, headline, fontsize=11.5, va="center")
    block = problem.block
    parts = [
        f"Block {block.start_hz / scale_hz:.6g}–{block.stop_hz / scale_hz:.6g} {word}",
        f"used {format_frequency(summary.used_bandwidth_hz)}",
        f"largest free segment {format_frequency(summary.largest_free_segment_hz)}",
    ]
    if plan.unserved:
        names = ", ".join(f"{u.demand_id} ({u.reason.value})" for u in plan.unserved[:4])
        more = f" and {len(plan.unserved) - 4} more" if len(plan.unserved) > 4 else ""
        parts.append(f"unserved: {names}{more}")
    if changes is not None:
        parts.append(_change_line(changes))
    figure.text(STYLE.left, 0.905, "   ·   ".join(parts), fontsize=9.5, va="center")
    figure.text(
        STYLE.left,
        0.012,
        "\n".join(CAUTIONS),
        fontsize=8.5,
        style="italic",
        color="#444444",
        linespacing=1.3,
    )


def _legend_extras(changes: Sequence[CarrierChange] | None) -> list[Artist]:
    """Legend entries for what the axes' own labels do not name."""
    extras: list[Artist] = [
        Patch(facecolor=STYLE.outside_colour, alpha=0.45, label="outside the block"),
        Line2D(
            [],
            [],
            ls="none",
            marker="$≥$",
            ms=9,
            color=STYLE.gap_colour,
            label="under each gap: leakage ratio achieved ≥ least permitted (ACLR, dB)",
        ),
        Line2D(
            [],
            [],
            ls="none",
            marker="$≥$",
            ms=9,
            color=STYLE.edge_gap_colour,
            label="… towards a block edge or exclusion",
        ),
    ]
    if changes is None:
        return extras
    kinds = {change.change for change in changes}
    if kinds - {RetuneChange.ADDED, RetuneChange.DROPPED}:
        label = "earlier bar of a moved or changed carrier (row above this plan's)"
        extras.append(Patch(fill=False, ls="--", edgecolor="#555555", label=label))
    if RetuneChange.DROPPED in kinds:
        edge, ls, hatch = _earlier_style(RetuneChange.DROPPED, "")
        label = f"dropped since {_EARLIER}"
        extras.append(Patch(fill=False, edgecolor=edge, ls=ls, hatch=hatch, label=label))
    return extras


def draw_legend(figure: Figure, ax: Axes, changes: Sequence[CarrierChange] | None) -> None:
    """The legend, in rows between the frequency axis and the footer."""
    handles, _ = ax.get_legend_handles_labels()
    handles += _legend_extras(changes)
    figure.legend(
        handles=handles,
        loc="lower center",
        bbox_to_anchor=(0.5, 0.052),
        ncol=4,
        fontsize=8.5,
        frameon=False,
    )
