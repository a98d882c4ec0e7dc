"""Plans and pictures for the picture tests (tests/test_render*.py).

Plans here are built directly from the solver's dataclasses: a renderer needs placed carriers,
not an optimiser, so these are legitimate inputs.  All data are invented.
"""

from __future__ import annotations

import itertools
import xml.etree.ElementTree as ET
from collections.abc import Sequence
from fractions import Fraction

from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.text import Text

from solver import verify_plan
from solver.model import (
    Block,
    Carrier,
    CarrierConfig,
    Demand,
    Exclusion,
    Modulation,
    Plan,
    PlanSummary,
    Problem,
    SolveStats,
    SolveStatus,
    Transmitter,
    Unserved,
)

BLOCK_START_HZ = 7_125e6
BLOCK_STOP_HZ = 7_145e6
EXCLUSION = Exclusion(7_133.0e6, 7_134.5e6, "Neighbour link, keep clear")
SVG_NS = "{http://www.w3.org/2000/svg}"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature: ISO/IEC 15948:2004 §5.2 (W3C PNG spec)
GUARD_FRACTION = 0.12  # invented test data: guard as a fraction of the allocated width
LINEAR_SPAN_SYMBOLS = 32  # long filter: truncation effects well below the tolerances used


def make_carrier(
    demand_id: str,
    center_hz: float,
    symbol_rate_baud: float,
    rolloff: float = 0.2,
    modulation: Modulation = Modulation.QPSK,
) -> Carrier:
    """A placed carrier with invented but self-consistent figures."""
    allocated_hz = symbol_rate_baud * (1 + rolloff)
    guard_hz = GUARD_FRACTION * allocated_hz
    config = CarrierConfig(
        demand_id=demand_id,
        modulation=modulation,
        code_rate=Fraction(3, 4),
        rolloff=rolloff,
        symbol_rate_baud=symbol_rate_baud,
        bits_per_symbol=2,
        allocated_bandwidth_hz=allocated_hz,
        occupied_bandwidth_hz=0.95 * allocated_hz,
        guard_hz=guard_hz,
        edge_guard_hz=guard_hz,
        throughput_bps=symbol_rate_baud * 2 * 0.75 * 0.98,
        esn0_db=12.0,
        required_esn0_db=7.0,
    )
    return Carrier(config, center_hz, guard_hz, guard_hz)


def try_tile(rates_baud: Sequence[float], block: Block, prefix: str) -> list[Carrier] | None:
    """Carriers packed from the block start, hopping over exclusions, each with its guard;
    ``None`` when they do not fit the block."""
    carriers: list[Carrier] = []
    cursor_hz = block.start_hz
    for index, rate in enumerate(rates_baud):
        allocated_hz = rate * 1.2
        guard_hz = GUARD_FRACTION * allocated_hz
        low_hz = cursor_hz + guard_hz
        for exclusion in block.exclusions:
            top_hz = low_hz + allocated_hz + guard_hz
            if low_hz < exclusion.stop_hz + guard_hz and top_hz > exclusion.start_hz:
                low_hz = exclusion.stop_hz + guard_hz
        carriers.append(make_carrier(f"{prefix}-{index}", low_hz + allocated_hz / 2, rate))
        cursor_hz = low_hz + allocated_hz + guard_hz
    return carriers if cursor_hz <= block.stop_hz else None


def tile(rates_baud: Sequence[float], block: Block, prefix: str = "link") -> list[Carrier]:
    carriers = try_tile(rates_baud, block, prefix)
    if carriers is None:
        raise ValueError(f"test data {rates_baud} does not fit the block")
    return carriers


def make_plan(carriers: Sequence[Carrier], unserved: Sequence[Unserved] = ()) -> Plan:
    total_bps = sum(c.config.throughput_bps for c in carriers)
    used_hz = sum(c.config.allocated_bandwidth_hz for c in carriers)
    summary = PlanSummary(
        used_bandwidth_hz=used_hz,
        free_bandwidth_hz=2e7 - used_hz,
        largest_free_segment_hz=1e6,
        total_throughput_bps=total_bps,
        spectral_efficiency_bps_per_hz=1.5,
        capacity_bound_bps=2e8,
        target_capped_bound_bps=9e7,
        requested_rate_bps=1e8,
        efficiency_vs_capacity_bound=0.27,
        efficiency_vs_target_capped_bound=0.61,
        fraction_of_requested=0.55,
        retune_count=0,
    )
    stats = SolveStats(SolveStatus.OPTIMAL, total_bps, total_bps, 0.0, 0.4, 2, 1, "test")
    return Plan(
        "east-grid-test", SolveStatus.OPTIMAL, tuple(carriers), tuple(unserved), summary, stats, ()
    )


def make_problem(
    carriers: Sequence[Carrier],
    block: Block,
    levels_db: Sequence[float] | None = None,
    leakage_limit_db: float = 30.0,
) -> Problem:
    levels = [0.0] * len(carriers) if levels_db is None else list(levels_db)
    demands = tuple(
        Demand(c.demand_id, 1e3, 1e6, esn0_db=15.0, relative_level_db=level)
        for c, level in zip(carriers, levels, strict=True)
    )
    transmitter = Transmitter(filter_span_symbols=12)
    return Problem(block, demands, leakage_limit_db=leakage_limit_db, transmitter=transmitter)


def default_block(edge_limit_db: float | None = 40.0) -> Block:
    return Block(BLOCK_START_HZ, BLOCK_STOP_HZ, 5e3, (EXCLUSION,), edge_limit_db)


def svg_texts(svg: bytes) -> list[str]:
    root = ET.fromstring(svg)  # raises ParseError on malformed XML
    assert root.tag == f"{SVG_NS}svg"
    return ["".join(node.itertext()) for node in root.iter(f"{SVG_NS}text")]


def label_boxes(figure: Figure) -> dict[str, tuple[float, float, float, float]]:
    canvas = figure.canvas
    assert isinstance(canvas, FigureCanvasAgg)
    renderer = canvas.get_renderer()  # type: ignore[no-untyped-call]
    boxes = {}
    for text in figure.findobj(Text):
        gid = text.get_gid()
        if gid and gid.startswith("label-"):
            box = text.get_window_extent(renderer)
            boxes[gid.removeprefix("label-")] = (box.x0, box.y0, box.x1, box.y1)
    return boxes


def overlapping(boxes: dict[str, tuple[float, float, float, float]]) -> list[tuple[str, str]]:
    tolerance_px = 0.5  # anti-aliasing slack; a real overlap is several pixels
    pairs = []
    for (a, (ax0, ay0, ax1, ay1)), (b, (bx0, by0, bx1, by1)) in itertools.combinations(
        boxes.items(), 2
    ):
        x_overlap = min(ax1, bx1) - max(ax0, bx0)
        y_overlap = min(ay1, by1) - max(ay0, by0)
        if x_overlap > tolerance_px and y_overlap > tolerance_px:
            pairs.append((a, b))
    return pairs


def verified(carriers: Sequence[Carrier], problem: Problem) -> list[Carrier]:
    """The carriers with the verifier's figures (leakage ratios, C/I) filled in; the test data
    must pass verification."""
    check = verify_plan(problem, carriers)
    assert check.passed, [v.detail for v in check.violations]
    return list(check.carriers)


def texts_by_gid(figure: Figure, prefix: str) -> dict[str, str]:
    """Every Text artist whose gid starts with ``prefix``: gid → text."""
    return {
        str(t.get_gid()): t.get_text()
        for t in figure.findobj(Text)
        if str(t.get_gid()).startswith(prefix)
    }


def axes_named(figure: Figure, name: str) -> Axes:
    """The picture's axes labelled ``name`` (``labels``, ``spectrum`` or ``gaps``)."""
    (found,) = [ax for ax in figure.axes if ax.get_label() == name]
    return found
