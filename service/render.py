"""The spectrum picture of a plan, as SVG or PNG.

The picture shows the licensed block on a frequency axis, the exclusions (hatched, with their
note), the guard bands (shaded), every carrier's power spectral density in dB relative to the
reference level, the leakage limits drawn below the in-band level, and one label per carrier
(demand id, modulation and code rate, throughput).  The footer repeats the cautions of every
plan's notices (:data:`solver.CAUTIONS`).

Drawing uses matplotlib's object interface only (:class:`matplotlib.figure.Figure` on an Agg
canvas): no pyplot, no global figure state.  matplotlib does not promise thread safety, so the
whole build-and-save step runs under one module lock; a service may call
:func:`render_spectrum` from any thread.

Each carrier's shape comes from the solver's normalised emission profile (symbol rate 1): the
carrier at symbol rate Rs and centre fc is drawn as ``psd_at((f - fc) / Rs)``, scaled so that its
value at the centre equals the demand's ``relative_level_db`` (the carrier's PSD level relative
to the others).
"""

from __future__ import annotations

import io
import logging
import math
import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Final, Literal

import matplotlib as mpl
import numpy as np
import numpy.typing as npt
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Patch
from matplotlib.text import Text
from matplotlib.ticker import ScalarFormatter

from solver import (
    CAUTIONS,
    Carrier,
    Plan,
    Problem,
    carrier_emission_key,
    format_code_rate,
    get_profile,
)

__all__ = [
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
Colour = tuple[float, float, float, float]

_LOCK: Final = threading.Lock()
_MHZ: Final = 1e6
_KHZ: Final = 1e3
_MBPS: Final = 1e6


@dataclass(frozen=True)
class _Style:
    """Sizes and colours of the picture (figure fractions unless a unit is named)."""

    width_in: float = 13.0
    height_in: float = 7.2
    dpi: int = 100
    left: float = 0.065
    width: float = 0.915
    psd_bottom: float = 0.20
    psd_height: float = 0.45
    strip_height: float = 0.21
    view_margin: float = 0.02
    headroom_db: float = 6.0
    below_limit_db: float = 25.0
    floor_db: float = -110.0
    global_samples: int = 3000
    carrier_samples: int = 801
    carrier_view_rs: float = 3.0
    label_font_pt: float = 8.5
    max_title_chars: int = 110
    min_rotated_font_pt: float = 6.0
    font_step_pt: float = 0.5
    label_gap_px: float = 6.0
    max_tiers: int = 3
    tier_base: float = 0.07
    guard_colour: str = "#f4c04e"
    exclusion_colour: str = "#d0d0d0"
    outside_colour: str = "#9e9e9e"
    limit_colour: str = "#c62828"
    edge_limit_colour: str = "#6a1b9a"
    sum_colour: str = "#37474f"
    palette: str = "tab10"
    detailed_carriers: int = 60
    crowd_samples: int = 20000


STYLE: Final = _Style()


@dataclass(frozen=True)
class _Label:
    """One carrier label: where its carrier is, and where the text goes (display units)."""

    centre: float
    position: float
    tier: int


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
    profile_source: ProfileSource | None = None,
) -> bytes:
    """Draw the plan's spectrum and return the image bytes (SVG text or PNG).

    ``profile_source`` gives each carrier's normalised PSD; by default the solver's emission
    profiles (:func:`emission_profile_source`).  Raises ``ValueError`` for an unknown format or
    a block without width.
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
        figure = build_spectrum_figure(plan, problem, profile_source=profile_source)
        metadata = {"Date": None} if fmt == "svg" else {"Software": None}
        figure.savefig(buffer, format=fmt, dpi=STYLE.dpi, metadata=metadata)
    logger.debug("rendered %s for plan %r: %d bytes", fmt, plan.name, buffer.tell())
    return buffer.getvalue()


def build_spectrum_figure(
    plan: Plan, problem: Problem, *, profile_source: ProfileSource | None = None
) -> Figure:
    """Build the spectrum picture as a matplotlib Figure on an Agg canvas (not yet saved).

    Carrier labels are Text artists with gid ``label-<demand id>``; carrier curves are lines
    with gid ``carrier-<demand id>``.
    """
    block = problem.block
    if not block.stop_hz > block.start_hz:
        raise ValueError(
            f"block stop_hz={block.stop_hz} must be above start_hz={block.start_hz} to draw it"
        )
    source = emission_profile_source if profile_source is None else profile_source
    scale_hz, unit = (_MHZ, "MHz") if block.width_hz >= _MHZ else (_KHZ, "kHz")
    figure = Figure(figsize=(STYLE.width_in, STYLE.height_in), dpi=STYLE.dpi)
    FigureCanvasAgg(figure)
    psd_ax, strip_ax = _make_axes(figure, problem, scale_hz, unit)
    carriers = sorted(plan.carriers, key=lambda c: c.center_hz)
    levels = _levels_db(carriers, problem)
    reference_db = max(levels, default=0.0)
    bottom_db = _draw_limits(psd_ax, problem, reference_db)
    psd_ax.set_ylim(bottom_db, max(levels, default=0.0) + STYLE.headroom_db)
    _draw_exclusions(psd_ax, problem, scale_hz)
    if len(carriers) > STYLE.detailed_carriers:
        densities = [source(carrier, problem) for carrier in carriers]
        _draw_crowd(psd_ax, strip_ax, carriers, levels, densities, scale_hz)
    elif carriers:
        _draw_guards(psd_ax, carriers, scale_hz)
        densities = [source(carrier, problem) for carrier in carriers]
        _draw_carriers(psd_ax, carriers, levels, densities, scale_hz)
        _draw_labels(figure, strip_ax, carriers, scale_hz)
    else:
        strip_ax.text(
            0.5,
            0.3,
            "No carriers in this plan",
            transform=strip_ax.transAxes,
            ha="center",
            va="center",
            fontsize=13,
            color="#555555",
        )
    _draw_texts(figure, plan, problem, scale_hz, unit)
    _draw_legend(figure, psd_ax)
    return figure


def _make_axes(figure: Figure, problem: Problem, scale_hz: float, unit: str) -> tuple[Axes, Axes]:
    """The PSD axes and, directly above it, the label strip (shared frequency axis)."""
    s = STYLE
    psd_ax = figure.add_axes((s.left, s.psd_bottom, s.width, s.psd_height))
    strip_ax = figure.add_axes(
        (s.left, s.psd_bottom + s.psd_height, s.width, s.strip_height), sharex=psd_ax
    )
    strip_ax.set_ylim(0.0, 1.0)
    strip_ax.set_axis_off()
    block = problem.block
    margin_hz = s.view_margin * block.width_hz
    view = (block.start_hz - margin_hz, block.stop_hz + margin_hz)
    psd_ax.set_xlim(view[0] / scale_hz, view[1] / scale_hz)
    for lo, hi in ((view[0], block.start_hz), (block.stop_hz, view[1])):
        psd_ax.axvspan(lo / scale_hz, hi / scale_hz, color=s.outside_colour, alpha=0.45, lw=0)
    formatter = ScalarFormatter(useOffset=False)
    formatter.set_scientific(False)
    psd_ax.xaxis.set_major_formatter(formatter)
    psd_ax.set_xlabel(f"Frequency ({unit})")
    psd_ax.set_ylabel("PSD relative to reference level (dB)")
    psd_ax.grid(alpha=0.3)
    return psd_ax, strip_ax


def _levels_db(carriers: Sequence[Carrier], problem: Problem) -> list[float]:
    """Each carrier's PSD level (dB) from its demand; 0 dB when the demand is unknown."""
    by_id = {d.id: d.relative_level_db for d in problem.demands}
    missing = [c.demand_id for c in carriers if c.demand_id not in by_id]
    if missing:
        logger.warning("carriers without a demand in the problem, drawn at 0 dB: %s", missing)
    return [by_id.get(c.demand_id, 0.0) for c in carriers]


def _draw_limits(ax: Axes, problem: Problem, reference_db: float) -> float:
    """Leakage limit lines below the in-band level; returns the bottom of the dB axis."""
    limit_db = problem.leakage_limit_db
    edge_db = problem.edge_limit_db
    ax.axhline(
        reference_db - limit_db,
        color=STYLE.limit_colour,
        ls="--",
        lw=1.3,
        label=f"leakage limit: {limit_db:g} dB below in-band level",
    )
    if not math.isclose(edge_db, limit_db):
        ax.axhline(
            reference_db - edge_db,
            color=STYLE.edge_limit_colour,
            ls="-.",
            lw=1.3,
            label=f"edge/exclusion limit: {edge_db:g} dB below",
        )
    deepest_db = reference_db - max(limit_db, edge_db) - STYLE.below_limit_db
    return max(deepest_db, STYLE.floor_db)


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


def _draw_carriers(
    ax: Axes,
    carriers: Sequence[Carrier],
    levels: Sequence[float],
    densities: Sequence[DensityFn],
    scale_hz: float,
) -> None:
    """Each carrier's PSD (in-band part filled, skirts thin) and the sum of all carriers."""
    lo_hz, hi_hz = (x * scale_hz for x in ax.get_xlim())
    grids = [_carrier_grid(c, lo_hz, hi_hz) for c in carriers]
    union_hz = np.unique(np.concatenate([np.linspace(lo_hz, hi_hz, STYLE.global_samples), *grids]))
    total = np.zeros_like(union_hz)
    bottom_db = ax.get_ylim()[0]
    colours = mpl.colormaps[STYLE.palette]
    for index, (carrier, level, density, grid) in enumerate(
        zip(carriers, levels, densities, grids, strict=True)
    ):
        colour = colours(index % colours.N)
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


def _draw_crowd(
    ax: Axes,
    strip: Axes,
    carriers: Sequence[Carrier],
    levels: Sequence[float],
    densities: Sequence[DensityFn],
    scale_hz: float,
) -> None:
    """The simplified drawing of a plan with many carriers (seconds, not minutes): the sum of
    all carriers on one grid, each carrier's allocated band and guards as bars, no labels."""
    lo_hz, hi_hz = (x * scale_hz for x in ax.get_xlim())
    grid = np.linspace(lo_hz, hi_hz, STYLE.crowd_samples)
    total = np.zeros_like(grid)
    for carrier, level, density in zip(carriers, levels, densities, strict=True):
        reach = STYLE.carrier_view_rs * carrier.config.symbol_rate_baud
        near = slice(*np.searchsorted(grid, (carrier.center_hz - reach, carrier.center_hz + reach)))
        total[near] += 10 ** (carrier_psd_db(carrier, level, density, grid[near]) / 10)
    floor = 10 ** (STYLE.floor_db / 10)
    ax.plot(
        grid / scale_hz,
        10 * np.log10(np.maximum(total, floor)),
        color=STYLE.sum_colour,
        lw=0.6,
        zorder=4,
        label="sum of all carriers",
    )
    colours = mpl.colormaps[STYLE.palette]
    bands = [
        (c.lower_edge_hz / scale_hz, c.config.allocated_bandwidth_hz / scale_hz) for c in carriers
    ]
    strip.broken_barh(
        bands, (0.05, 0.25), facecolors=[colours(i % colours.N) for i in range(len(carriers))]
    )
    guards = [
        (lo / scale_hz, (hi - lo) / scale_hz)
        for c in carriers
        for lo, hi in (
            (c.lower_edge_hz - c.guard_below_hz, c.lower_edge_hz),
            (c.upper_edge_hz, c.upper_edge_hz + c.guard_above_hz),
        )
        if hi > lo
    ]
    strip.broken_barh(guards, (0.05, 0.25), facecolors=STYLE.guard_colour, alpha=0.6)
    strip.text(
        0.5,
        0.6,
        f"{len(carriers)} carriers: simplified drawing (bands and guards as bars, no labels, "
        f"above {STYLE.detailed_carriers}); the plan's JSON lists every carrier",
        transform=strip.transAxes,
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


def _label_text(carrier: Carrier, rotated: bool) -> str:
    """Demand id, modulation and code rate, throughput in Mb/s."""
    config = carrier.config
    modcod = f"{config.modulation.value} {format_code_rate(config.code_rate)}"
    rate = f"{config.throughput_bps / _MBPS:.3g} Mb/s"
    if rotated:
        return f"{carrier.demand_id}\n{modcod} · {rate}"
    return f"{carrier.demand_id}\n{modcod}\n{rate}"


def _draw_labels(figure: Figure, ax: Axes, carriers: Sequence[Carrier], scale_hz: float) -> None:
    """Carrier labels in the strip: horizontal in tiers, or rotated and spread when crowded."""
    renderer = figure.canvas.get_renderer()  # type: ignore[attr-defined]
    lo, hi = ax.get_xlim()
    per_px = (hi - lo) / ax.get_window_extent(renderer).width
    centres = [c.center_hz / scale_hz for c in carriers]
    gap = STYLE.label_gap_px * per_px
    colours = mpl.colormaps[STYLE.palette]
    edges = [colours(index % colours.N) for index in range(len(carriers))]
    texts = [
        _new_label(ax, c, e, rotated=False, size=STYLE.label_font_pt)
        for c, e in zip(carriers, edges, strict=True)
    ]
    widths = [t.get_window_extent(renderer).width * per_px for t in texts]
    placed = _tiers(centres, widths, lo, hi, gap, STYLE.max_tiers)
    rotated = placed is None
    size = STYLE.label_font_pt
    while placed is None:
        for text in texts:
            text.remove()
        texts = [
            _new_label(ax, c, e, rotated=True, size=size)
            for c, e in zip(carriers, edges, strict=True)
        ]
        widths = [t.get_window_extent(renderer).width * per_px for t in texts]
        placed = _spread_or_tiers(centres, widths, lo, hi, gap, size)
        size -= STYLE.font_step_pt
    tier_height = max(t.get_window_extent(renderer).height for t in texts) / (
        ax.get_window_extent(renderer).height
    )
    for text, label in zip(texts, placed, strict=True):
        y = STYLE.tier_base + label.tier * (tier_height + STYLE.tier_base / 2)
        text.set_position((label.position, y))
        ax.plot([label.centre, label.position], [0.0, y], color="#777777", lw=0.7)
    logger.debug("labels: %d carriers, rotated=%s", len(carriers), rotated)


def _new_label(ax: Axes, carrier: Carrier, edge: Colour, *, rotated: bool, size: float) -> Text:
    text = ax.text(
        carrier.center_hz,
        0.0,
        _label_text(carrier, rotated),
        fontsize=size,
        ha="center",
        va="bottom",
        rotation=90 if rotated else 0,
        linespacing=1.15,
        bbox={"boxstyle": "round,pad=0.25", "facecolor": "white", "edgecolor": edge, "lw": 1.2},
    )
    text.set_gid(f"label-{carrier.demand_id}")
    return text


def _spread_or_tiers(
    centres: Sequence[float], widths: Sequence[float], lo: float, hi: float, gap: float, size: float
) -> list[_Label] | None:
    """Rotated labels: one spread row; at the smallest font, two alternating spread rows."""
    row = _spread(centres, widths, lo, hi, gap)
    if row is not None:
        return [_Label(c, p, 0) for c, p in zip(centres, row, strict=True)]
    if size - STYLE.font_step_pt >= STYLE.min_rotated_font_pt:
        return None
    labels: list[_Label] = []
    for tier in (0, 1):
        picked = range(tier, len(centres), 2)
        row = _spread([centres[i] for i in picked], [widths[i] for i in picked], lo, hi, gap)
        positions = row if row is not None else [centres[i] for i in picked]
        labels += [_Label(centres[i], p, tier) for i, p in zip(picked, positions, strict=True)]
    if row is None:
        logger.warning("%d carrier labels do not fit; some overlap", len(centres))
    return sorted(labels, key=lambda label: label.centre)


def _tiers(
    centres: Sequence[float],
    widths: Sequence[float],
    lo: float,
    hi: float,
    gap: float,
    max_tiers: int,
) -> list[_Label] | None:
    """Greedy stacking of labels over their carriers; ``None`` if more tiers would be needed."""
    right_edges: list[float] = []
    labels: list[_Label] = []
    for centre, width in zip(centres, widths, strict=True):
        position = min(max(centre, lo + width / 2), hi - width / 2)
        free = [t for t, edge in enumerate(right_edges) if position - width / 2 >= edge + gap]
        if free:
            tier = free[0]
        elif len(right_edges) < max_tiers:
            tier = len(right_edges)
            right_edges.append(-math.inf)
        else:
            return None
        right_edges[tier] = position + width / 2
        labels.append(_Label(centre, position, tier))
    return labels


def _spread(
    centres: Sequence[float], widths: Sequence[float], lo: float, hi: float, gap: float
) -> list[float] | None:
    """Positions near ``centres`` (ascending) so that intervals of ``widths`` do not overlap.

    A forward pass pushes labels right, a backward pass pulls them back inside ``hi``; returns
    ``None`` when the labels cannot fit between ``lo`` and ``hi``.
    """
    positions: list[float] = []
    for index, (centre, width) in enumerate(zip(centres, widths, strict=True)):
        least = lo + width / 2
        if index:
            least = max(least, positions[-1] + (widths[index - 1] + width) / 2 + gap)
        positions.append(max(centre, least))
    for index in range(len(positions) - 1, -1, -1):
        most = hi - widths[index] / 2
        if index < len(positions) - 1:
            most = min(most, positions[index + 1] - (widths[index + 1] + widths[index]) / 2 - gap)
        positions[index] = min(positions[index], most)
    if positions and positions[0] - widths[0] / 2 < lo - gap / 2:
        return None
    return positions


def _draw_texts(figure: Figure, plan: Plan, problem: Problem, scale_hz: float, unit: str) -> None:
    """Title (name), headline (status, throughput, efficiency), block and usage line, footer."""
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
        f"Status: {plan.status.value}   ·   "
        f"{summary.total_throughput_bps / _MBPS:.4g} Mb/s total   ·   {bound}   ·   "
        f"{len(plan.carriers)} carriers"
    )
    figure.text(STYLE.left, 0.93, headline, fontsize=11.5, va="center")
    block = problem.block
    parts = [
        f"Block {block.start_hz / scale_hz:.6g}–{block.stop_hz / scale_hz:.6g} {unit}",
        f"used {summary.used_bandwidth_hz / scale_hz:.4g} {unit}",
        f"largest free segment {summary.largest_free_segment_hz / scale_hz:.4g} {unit}",
    ]
    if plan.unserved:
        names = ", ".join(f"{u.demand_id} ({u.reason.value})" for u in plan.unserved[:4])
        more = f" and {len(plan.unserved) - 4} more" if len(plan.unserved) > 4 else ""
        parts.append(f"unserved: {names}{more}")
    figure.text(STYLE.left, 0.897, "   ·   ".join(parts), fontsize=9.5, va="center")
    figure.text(
        STYLE.left,
        0.012,
        "\n".join(CAUTIONS),
        fontsize=8.5,
        style="italic",
        color="#444444",
        linespacing=1.3,
    )


def _draw_legend(figure: Figure, ax: Axes) -> None:
    """One legend row between the frequency axis and the footer."""
    handles, labels = ax.get_legend_handles_labels()
    handles.append(Patch(facecolor=STYLE.outside_colour, alpha=0.45, label="outside the block"))
    labels.append("outside the block")
    figure.legend(
        handles,
        labels,
        loc="lower center",
        bbox_to_anchor=(0.5, 0.06),
        ncol=len(labels),
        fontsize=8.5,
        frameon=False,
    )
