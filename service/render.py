"""The spectrum picture of a plan, as SVG or PNG.

From top to bottom the picture shows: the plan's name, status, throughput and use of the block
(and, for a replan, what changed since the earlier plan); one label per carrier (demand id,
MODCOD, throughput, and what changed), tied by a leader line to the carrier's bar, drawn at a
least width so that a narrow carrier and its guards stay visible; the power spectral density of
every carrier in dB relative to the reference level, with the licensed block, the exclusions
(hatched, with their note) and the guard bands (shaded) at their true widths; under every gap
between carriers, and between a carrier and a block edge or exclusion, the leakage ratio the
plan achieves there and the least the request permits (:mod:`service.picture_marks`); the
legend; and the cautions of every plan's notices (:data:`solver.CAUTIONS`).

The leakage limits are ratios (a carrier's power over what it puts into the neighbouring band),
so they appear as figures beside the gaps, never as levels on the PSD axis, where a carrier's
skirt may rise above a "limit line" while its integrated leakage meets the limit with room to
spare.  A replan's picture draws the earlier plan's bars in a row over this plan's: an
unchanged carrier's in grey, a moved or changed one's dashed in its colour (with a line to where
it went), a dropped one's dotted and hatched; each label says what changed.

Drawing uses matplotlib's object interface only (:class:`matplotlib.figure.Figure` on an Agg
canvas): no pyplot, no global figure state.  matplotlib does not promise thread safety, so the
whole build-and-save step runs under one module lock; a service may call
:func:`render_spectrum` from any thread.

Each carrier's shape comes from the solver's normalised emission profile (symbol rate 1): the
carrier at symbol rate Rs and centre fc is drawn as ``psd_at((f - fc) / Rs)``, scaled so that its
value at the centre equals the demand's ``relative_level_db`` (the carrier's PSD level relative
to the others).  Units follow :mod:`service.units`, as the command's table does.
"""

from __future__ import annotations

import io
import logging
import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Final, Literal, NamedTuple

import matplotlib as mpl
import numpy as np
import numpy.typing as npt
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import ScalarFormatter

from service.picture_marks import (
    CarrierChange,
    GapKind,
    LeakageGap,
    Verdict,
    changes_since,
    leakage_gaps,
    settings_before,
)
from service.render_notes import (
    change_words,
    draw_earlier_row,
    draw_legend,
    draw_texts,
    dropped_items,
)
from service.render_style import STYLE, Colour, carrier_colour
from service.render_text import Strip, TextItem, draw_bars, place_texts
from service.units import format_rate, frequency_unit
from solver import (
    Carrier,
    CurrentSetting,
    Plan,
    Problem,
    carrier_emission_key,
    format_code_rate,
    get_profile,
)

__all__ = [
    "STYLE",
    "DensityFn",
    "ImageFormat",
    "ProfileSource",
    "build_spectrum_figure",
    "carrier_psd_db",
    "emission_profile_source",
    "render_spectrum",
]

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]
DensityFn = Callable[[FloatArray], FloatArray]
"""Normalised PSD of a carrier at symbol rate 1, as a function of frequency in units of Rs."""
ProfileSource = Callable[[Carrier, Problem], DensityFn]
"""Gives the normalised PSD for one carrier of a problem."""
ImageFormat = Literal["svg", "png"]

_LOCK: Final = threading.Lock()


class _Axes(NamedTuple):
    """The label strip (top), the spectrum, and the gap strip with the frequency axis."""

    strip: Axes
    psd: Axes
    gaps: Axes


@dataclass(frozen=True)
class _Scene:
    """What one picture draws: the carriers by frequency, with their levels and colours."""

    plan: Plan
    problem: Problem
    carriers: list[Carrier]
    levels: list[float]
    colours: list[Colour]
    before: dict[str, CurrentSetting] | None
    """Each demand's earlier setting (None: no earlier plan to compare with)."""
    changes: list[CarrierChange] | None
    """What changed since (None: no earlier plan to compare with)."""
    scale_hz: float


def emission_profile_source(carrier: Carrier, problem: Problem) -> DensityFn:
    """Normalised PSD of ``carrier`` from the solver's cached emission profiles."""
    return get_profile(carrier_emission_key(problem, carrier.config)).psd_at


def carrier_psd_db(
    carrier: Carrier, level_db: float, density: DensityFn, freqs_hz: FloatArray
) -> FloatArray:
    """PSD of one carrier in dB relative to the reference level, as drawn.

    Parameters
    ----------
    carrier : Carrier
        The placed carrier (centre in Hz, symbol rate in baud).
    level_db : float
        The carrier's in-band PSD level relative to the reference (dB); the curve equals this
        value at the carrier centre.
    density : DensityFn
        Normalised PSD at symbol rate 1 (frequency in units of the symbol rate).
    freqs_hz : ndarray
        Absolute frequencies (Hz).

    Returns
    -------
    ndarray
        PSD (dB) at ``freqs_hz``, never below -110 dB.
    """
    rate_baud = carrier.config.symbol_rate_baud
    if not rate_baud > 0:
        raise ValueError(f"carrier {carrier.demand_id!r}: symbol_rate_baud={rate_baud} must be > 0")
    peak = float(density(np.zeros(1))[0])
    if not peak > 0:
        raise ValueError(f"carrier {carrier.demand_id!r}: profile density at the centre is {peak}")
    relative = np.asarray(density((freqs_hz - carrier.center_hz) / rate_baud), dtype=float) / peak
    floor = 10 ** (STYLE.floor_db / 10)
    return level_db + 10 * np.log10(np.maximum(relative, floor))


def render_spectrum(
    plan: Plan,
    problem: Problem,
    fmt: ImageFormat,
    *,
    parent: Plan | None = None,
    profile_source: ProfileSource | None = None,
) -> bytes:
    """Draw the plan's spectrum and return the image bytes (SVG text or PNG).

    ``parent`` is the plan this one replans (its changes are marked; without it, changes
    from the request's ``current`` settings are).  ``profile_source`` gives each carrier's
    normalised PSD; by default the solver's emission profiles (:func:`emission_profile_source`).
    Raises ``ValueError`` for an unknown format or a block without width.
    """
    if fmt not in ("svg", "png"):
        raise ValueError(f"fmt={fmt!r} must be 'svg' or 'png'")
    buffer = io.BytesIO()
    with (
        _LOCK,
        mpl.rc_context(
            {"svg.fonttype": "none", "svg.hashsalt": "bandwright", "font.family": "DejaVu Sans"}
        ),
    ):
        figure = build_spectrum_figure(plan, problem, parent=parent, profile_source=profile_source)
        metadata = {"Date": None} if fmt == "svg" else {"Software": None}
        figure.savefig(buffer, format=fmt, dpi=STYLE.dpi, metadata=metadata)
    logger.debug("rendered %s for plan %r: %d bytes", fmt, plan.name, buffer.tell())
    return buffer.getvalue()


def build_spectrum_figure(
    plan: Plan,
    problem: Problem,
    *,
    parent: Plan | None = None,
    profile_source: ProfileSource | None = None,
) -> Figure:
    """Build the spectrum picture as a matplotlib Figure on an Agg canvas (not yet saved).

    The axes are labelled ``labels``, ``spectrum`` and ``gaps`` (top to bottom); artists carry
    gids a reader (or a test) can find: ``label-<id>`` (a carrier's label),
    ``carrier-<id>`` (its in-band curve), ``band-<id>``, ``guard-below-<id>`` and
    ``guard-above-<id>`` (its bar and guards), ``gap-<n>`` (the leakage figure of the n-th gap
    by frequency); for a replan ``earlier-<id>``, ``ghost-<id>`` and ``dropped-<id>`` (the
    earlier bar of an unchanged, a moved or changed, and a dropped carrier), ``shift-<id>``
    (the line from a moved carrier's earlier bar to its new one) and ``label-dropped-<id>``.
    """
    block = problem.block
    if not block.stop_hz > block.start_hz:
        raise ValueError(
            f"block stop_hz={block.stop_hz} must be above start_hz={block.start_hz} to draw it"
        )
    source = emission_profile_source if profile_source is None else profile_source
    word, scale_hz = frequency_unit(block.width_hz)
    figure = Figure(figsize=(STYLE.width_in, STYLE.height_in), dpi=STYLE.dpi)
    FigureCanvasAgg(figure)
    axes = _make_axes(figure, problem, scale_hz, word)
    carriers = sorted(plan.carriers, key=lambda c: c.center_hz)
    before = settings_before(problem, parent)
    scene = _Scene(
        plan,
        problem,
        carriers,
        _levels_db(carriers, problem),
        [carrier_colour(i) for i in range(len(carriers))],
        before,
        None if before is None else changes_since(carriers, before),
        scale_hz,
    )
    top_db = max(scene.levels, default=0.0)
    axes.psd.set_ylim(_bottom_db(problem, top_db), top_db + STYLE.headroom_db)
    _draw_exclusions(axes.psd, problem, scale_hz)
    gaps = leakage_gaps(problem, carriers)
    if len(carriers) > STYLE.detailed_carriers:
        _draw_crowd(axes, scene, [source(c, problem) for c in carriers])
        _draw_gap_summary(axes.gaps, gaps)
    elif carriers:
        _draw_guards(axes.psd, carriers, scale_hz)
        _draw_carriers(axes.psd, scene, [source(c, problem) for c in carriers])
        _draw_labels(axes.strip, scene)
        _draw_gaps(axes.gaps, gaps, scale_hz)
    else:
        _say(axes.strip, "No carriers in this plan")
    draw_texts(figure, plan, problem, scene.changes, word, scale_hz)
    draw_legend(figure, axes.psd, scene.changes)
    return figure


def _make_axes(figure: Figure, problem: Problem, scale_hz: float, word: str) -> _Axes:
    """The gap strip (bottom, with the frequency axis), the PSD axes over it, and the label
    strip over that, all sharing one frequency axis."""
    s = STYLE
    gaps = figure.add_axes((s.left, s.gap_bottom, s.width, s.gap_height))
    psd_bottom = s.gap_bottom + s.gap_height
    psd = figure.add_axes((s.left, psd_bottom, s.width, s.psd_height), sharex=gaps)
    strip = figure.add_axes(
        (s.left, psd_bottom + s.psd_height, s.width, s.strip_height), sharex=gaps
    )
    strip.set_ylim(0.0, 1.0)
    strip.set_axis_off()
    gaps.set_ylim(0.0, 1.0)
    gaps.set_yticks([])
    for side in ("left", "right", "top"):
        gaps.spines[side].set_visible(False)
    psd.tick_params(labelbottom=False)
    for ax, name in ((gaps, "gaps"), (psd, "spectrum"), (strip, "labels")):
        ax.set_label(name)
    block = problem.block
    margin_hz = s.view_margin * block.width_hz
    view = (block.start_hz - margin_hz, block.stop_hz + margin_hz)
    gaps.set_xlim(view[0] / scale_hz, view[1] / scale_hz)
    for lo, hi in ((view[0], block.start_hz), (block.stop_hz, view[1])):
        psd.axvspan(lo / scale_hz, hi / scale_hz, color=s.outside_colour, alpha=0.45, lw=0)
    formatter = ScalarFormatter(useOffset=False)
    formatter.set_scientific(False)
    gaps.xaxis.set_major_formatter(formatter)
    gaps.set_xlabel(f"Frequency ({word})")
    psd.set_ylabel("PSD relative to reference level (dB)")
    psd.grid(alpha=0.3)
    return _Axes(strip, psd, gaps)


def _levels_db(carriers: Sequence[Carrier], problem: Problem) -> list[float]:
    """Each carrier's PSD level (dB) from its demand; 0 dB when the demand is unknown."""
    by_id = {d.id: d.relative_level_db for d in problem.demands}
    missing = [c.demand_id for c in carriers if c.demand_id not in by_id]
    if missing:
        logger.warning("carriers without a demand in the problem, drawn at 0 dB: %s", missing)
    return [by_id.get(c.demand_id, 0.0) for c in carriers]


def _bottom_db(problem: Problem, top_db: float) -> float:
    """The bottom of the dB axis: deep enough to show the skirts down past the limits."""
    deepest_db = top_db - max(problem.leakage_limit_db, problem.edge_limit_db)
    return max(deepest_db - STYLE.below_limit_db, STYLE.floor_db)


def _say(ax: Axes, message: str) -> None:
    ax.text(
        0.5,
        0.3,
        message,
        transform=ax.transAxes,
        ha="center",
        va="center",
        fontsize=13,
        color="#555555",
    )


def _draw_exclusions(ax: Axes, problem: Problem, scale_hz: float) -> None:
    """Hatched exclusions, each labelled with its note (rotated when the span is narrow)."""
    renderer = ax.figure.canvas.get_renderer()  # type: ignore[attr-defined]
    for index, exclusion in enumerate(problem.block.exclusions):
        lo, hi = exclusion.start_hz / scale_hz, exclusion.stop_hz / scale_hz
        ax.axvspan(
            lo,
            hi,
            facecolor=STYLE.exclusion_colour,
            edgecolor="#6d6d6d",
            hatch="////",
            lw=0.8,
            zorder=1,
            label="exclusion" if index == 0 else None,
        )
        note = exclusion.note or "excluded"
        text = ax.text(
            (lo + hi) / 2,
            0.96,
            note,
            transform=ax.get_xaxis_transform(),
            ha="center",
            va="top",
            fontsize=8,
            zorder=6,
            bbox={"facecolor": "white", "edgecolor": "#6d6d6d", "alpha": 0.9},
        )
        span_px = abs(ax.transData.transform((hi, 0))[0] - ax.transData.transform((lo, 0))[0])
        if text.get_window_extent(renderer).width > span_px:
            text.set_rotation(90)


def _draw_guards(ax: Axes, carriers: Sequence[Carrier], scale_hz: float) -> None:
    """Shade every carrier's guard band below and above its allocated band."""
    for index, carrier in enumerate(carriers):
        spans = (
            (carrier.lower_edge_hz - carrier.guard_below_hz, carrier.lower_edge_hz),
            (carrier.upper_edge_hz, carrier.upper_edge_hz + carrier.guard_above_hz),
        )
        for number, (lo, hi) in enumerate(spans):
            if hi > lo:
                first = index == 0 and number == 0
                ax.axvspan(
                    lo / scale_hz,
                    hi / scale_hz,
                    color=STYLE.guard_colour,
                    alpha=0.45,
                    lw=0,
                    zorder=0,
                    label="guard band" if first else None,
                )


def _draw_carriers(ax: Axes, scene: _Scene, densities: Sequence[DensityFn]) -> None:
    """Each carrier's PSD (in-band part filled, skirts thin) and the sum of all carriers."""
    scale_hz = scene.scale_hz
    lo_hz, hi_hz = (x * scale_hz for x in ax.get_xlim())
    grids = [_carrier_grid(c, lo_hz, hi_hz) for c in scene.carriers]
    union_hz = np.unique(np.concatenate([np.linspace(lo_hz, hi_hz, STYLE.global_samples), *grids]))
    total = np.zeros_like(union_hz)
    bottom_db = ax.get_ylim()[0]
    for carrier, level, density, grid, colour in zip(
        scene.carriers, scene.levels, densities, grids, scene.colours, strict=True
    ):
        curve_db = carrier_psd_db(carrier, level, density, grid)
        band = (grid >= carrier.lower_edge_hz) & (grid <= carrier.upper_edge_hz)
        ax.plot(grid / scale_hz, curve_db, color=colour, lw=0.7, alpha=0.6, zorder=2)
        ax.fill_between(grid[band] / scale_hz, curve_db[band], bottom_db, color=colour, alpha=0.25)
        (line,) = ax.plot(grid[band] / scale_hz, curve_db[band], color=colour, lw=1.5, zorder=3)
        line.set_gid(f"carrier-{carrier.demand_id}")
        total += 10 ** (carrier_psd_db(carrier, level, density, union_hz) / 10)
    ax.plot(
        union_hz / scale_hz,
        10 * np.log10(total),
        color=STYLE.sum_colour,
        lw=0.8,
        zorder=4,
        label="sum of all carriers",
    )


def _draw_crowd(axes: _Axes, scene: _Scene, densities: Sequence[DensityFn]) -> None:
    """The simplified drawing of a plan with many carriers (seconds, not minutes): the sum of
    all carriers on one grid, each carrier's allocated band and guards as bars, no labels."""
    scale_hz = scene.scale_hz
    lo_hz, hi_hz = (x * scale_hz for x in axes.psd.get_xlim())
    grid = np.linspace(lo_hz, hi_hz, STYLE.crowd_samples)
    total = np.zeros_like(grid)
    for carrier, level, density in zip(scene.carriers, scene.levels, densities, strict=True):
        reach = STYLE.carrier_view_rs * carrier.config.symbol_rate_baud
        near = slice(*np.searchsorted(grid, (carrier.center_hz - reach, carrier.center_hz + reach)))
        total[near] += 10 ** (carrier_psd_db(carrier, level, density, grid[near]) / 10)
    floor = 10 ** (STYLE.floor_db / 10)
    axes.psd.plot(
        grid / scale_hz,
        10 * np.log10(np.maximum(total, floor)),
        color=STYLE.sum_colour,
        lw=0.6,
        zorder=4,
        label="sum of all carriers",
    )
    draw_bars(axes.strip, _spans(scene), scene.colours, [c.demand_id for c in scene.carriers])
    axes.strip.text(
        0.5,
        0.6,
        f"{len(scene.carriers)} carriers: simplified drawing (bands and guards as bars, no "
        f"labels, above {STYLE.detailed_carriers}); the plan's JSON lists every carrier",
        transform=axes.strip.transAxes,
        ha="center",
        va="center",
        fontsize=10,
        color="#555555",
    )


def _carrier_grid(carrier: Carrier, lo_hz: float, hi_hz: float) -> FloatArray:
    """Dense frequency grid (Hz) around one carrier, clipped to the view."""
    config = carrier.config
    half_hz = max(
        STYLE.carrier_view_rs * config.symbol_rate_baud,
        config.allocated_bandwidth_hz / 2 + max(carrier.guard_below_hz, carrier.guard_above_hz),
    )
    start = max(lo_hz, carrier.center_hz - half_hz)
    stop = min(hi_hz, carrier.center_hz + half_hz)
    return np.linspace(start, stop, STYLE.carrier_samples)


def _spans(scene: _Scene) -> list[tuple[float, float, float, float]]:
    """Each carrier's guards and band (axis units), for its bar."""
    scale = scene.scale_hz
    return [
        (
            (c.lower_edge_hz - c.guard_below_hz) / scale,
            c.lower_edge_hz / scale,
            c.upper_edge_hz / scale,
            (c.upper_edge_hz + c.guard_above_hz) / scale,
        )
        for c in scene.carriers
    ]


def _label_forms(carrier: Carrier, change: CarrierChange | None) -> tuple[str, str, str, str]:
    """A carrier's label in each form (:data:`service.render_text.Form`): demand id, MODCOD,
    throughput, and what changed since the earlier plan."""
    config = carrier.config
    modcod = f"{config.modulation.value} {format_code_rate(config.code_rate)}"
    rate = format_rate(config.throughput_bps)
    full, brief = ("", "") if change is None else change_words(change)
    stacked = "\n".join(filter(None, (carrier.demand_id, modcod, rate, full)))
    return (
        stacked,
        stacked,
        carrier.demand_id + "\n" + " · ".join(filter(None, (modcod, rate, full))),
        "\n".join(filter(None, (carrier.demand_id, brief))),
    )


def _draw_labels(ax: Axes, scene: _Scene) -> None:
    """Every carrier's bar and label; for a replan, the earlier plan's bars over them and a
    label where each dropped carrier was."""
    ids = [c.demand_id for c in scene.carriers]
    drawn = draw_bars(ax, _spans(scene), scene.colours, ids)
    changes = {ch.demand_id: ch for ch in scene.changes or ()}
    items = [
        TextItem(
            footprint.centre,
            _label_forms(carrier, changes.get(carrier.demand_id)),
            f"label-{carrier.demand_id}",
            edge=colour,
            bold=carrier.demand_id in changes,
        )
        for carrier, footprint, colour in zip(scene.carriers, drawn, scene.colours, strict=True)
    ]
    start = STYLE.band_row
    if scene.before is not None:
        now = {d: (f.centre, c) for d, f, c in zip(ids, drawn, scene.colours, strict=True)}
        earlier = draw_earlier_row(ax, scene.before, scene.changes or [], now, scene.scale_hz)
        items += dropped_items(scene.changes or (), earlier)
        start += STYLE.earlier_gap + STYLE.band_row
    strip = Strip(
        ax,
        upward=True,
        start=start,
        max_tiers=STYLE.max_tiers,
        gap_px=STYLE.label_gap_px,
        font_pt=STYLE.label_font_pt,
        brief_font_pt=STYLE.id_font_pt,
    )
    place_texts(strip, sorted(items, key=lambda item: item.anchor))


def _gap_colour(gap: LeakageGap) -> str:
    if gap.verdict is Verdict.FAILS:
        return STYLE.fail_colour
    return STYLE.edge_gap_colour if gap.kind is GapKind.EDGE else STYLE.gap_colour


def _draw_gaps(ax: Axes, gaps: Sequence[LeakageGap], scale_hz: float) -> None:
    """Under every gap, the leakage ratio achieved there and the least permitted (dB)."""
    texts = [gap.text() for gap in gaps]
    items = [
        TextItem(
            gap.centre_hz / scale_hz,
            (text, text, text, text),
            f"gap-{index}",
            colour=_gap_colour(gap),
            bold=gap.verdict is Verdict.FAILS,
        )
        for index, (gap, text) in enumerate(zip(gaps, texts, strict=True))
    ]
    strip = Strip(
        ax,
        upward=False,
        start=1.0,
        max_tiers=STYLE.gap_max_tiers,
        gap_px=STYLE.gap_label_gap_px,
        font_pt=STYLE.gap_font_pt,
        brief_font_pt=STYLE.gap_font_pt,
    )
    place_texts(strip, items)


def _draw_gap_summary(ax: Axes, gaps: Sequence[LeakageGap]) -> None:
    """For the simplified drawing: one line on the gaps' leakage instead of one per gap."""
    failing = [g for g in gaps if g.verdict is Verdict.FAILS]
    known = [g for g in gaps if g.verdict is not Verdict.UNKNOWN]
    if not known:
        text = f"{len(gaps)} gaps; no verified leakage ratios in this plan"
    else:
        worst = min(known, key=lambda g: g.achieved_db - g.limit_db)
        what = "below their least" if failing else "at or above their least"
        count = len(failing) if failing else len(known)
        text = (
            f"leakage ratio: {count} of {len(gaps)} gaps {what} permitted; tightest "
            f"{worst.text()} ({' / '.join(worst.leakers)})"
        )
    colour = STYLE.fail_colour if failing else STYLE.gap_colour
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color=colour)
