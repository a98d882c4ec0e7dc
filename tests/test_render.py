"""Tests of the spectrum picture (service/render.py).

Plans here are built directly from the solver's dataclasses: a renderer needs placed carriers,
not an optimiser, so these are legitimate inputs.  The carrier shapes come from the solver's
emission profiles and are checked against published raised-cosine facts and an independent
library (scikit-commpy's RRC filter).
"""

from __future__ import annotations

import io
import itertools
import threading
import xml.etree.ElementTree as ET
from collections.abc import Sequence
from fractions import Fraction

import numpy as np
import pytest
from commpy.filters import rrcosfilter
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.text import Text
from PIL import Image

from service.render import (
    STYLE,
    build_spectrum_figure,
    carrier_psd_db,
    emission_profile_source,
    render_spectrum,
)
from solver import CAUTIONS
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
    UnservedReason,
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


TEN_RATES_BAUD = [32e3, 1.2e6, 2.5e6, 64e3, 2.5e6, 500e3, 32e3, 2e6, 250e3, 1e6]


@pytest.fixture(scope="module")
def ten() -> tuple[Plan, Problem]:
    block = default_block()
    carriers = tile(TEN_RATES_BAUD, block)
    levels = [0.0, -3.0] * 5
    unserved = [Unserved("late-link", UnservedReason.NO_SPECTRUM, "no room")]
    return make_plan(carriers, unserved), make_problem(carriers, block, levels)


# --- the drawn carrier shape against published raised-cosine facts -------------------------


@pytest.mark.parametrize(
    ("rolloff", "level_db", "width_rs"),
    [
        # x-dB widths of an RRC-shaped signal (PSD = raised cosine), in units of Rs:
        # check-values.md §6 table, computed from the raised-cosine spectrum of
        # Roddy, Satellite Communications 4th ed., Eq. (10.9)-(10.12).
        (0.35, -10.0, 1.2066),
        (0.20, -10.0, 1.1181),
        (0.35, -20.0, 1.3054),
        # -3 dB width equals Rs for every roll-off (check-values.md §6 "RRC split").
        (0.35, -3.0103, 1.0),
        (0.05, -3.0103, 1.0),
    ],
)
def test_drawn_width_matches_published_raised_cosine(
    rolloff: float, level_db: float, width_rs: float
) -> None:
    # Tolerance 0.5 %: the profile is a 32-symbol truncated RRC sampled on a 1/1024-Rs grid;
    # truncation moves these widths by < 0.1 % (measured), the grid by < 0.1 %.
    rate_baud = 2.5e6
    centre_hz = 7_130e6
    carrier = make_carrier("w", centre_hz, rate_baud, rolloff=rolloff)
    problem = make_problem([carrier], default_block())
    problem = Problem(problem.block, problem.demands, transmitter=Transmitter(LINEAR_SPAN_SYMBOLS))
    density = emission_profile_source(carrier, problem)
    relative_level_db = -4.0
    freqs_hz = centre_hz + np.linspace(-1.0, 1.0, 40_001) * rate_baud
    curve_db = carrier_psd_db(carrier, relative_level_db, density, freqs_hz)
    inside = freqs_hz[curve_db >= relative_level_db + level_db]
    measured_rs = (inside.max() - inside.min()) / rate_baud
    assert measured_rs == pytest.approx(width_rs, rel=5e-3)
    assert curve_db[len(freqs_hz) // 2] == pytest.approx(relative_level_db, abs=1e-9)


@pytest.mark.parametrize("rolloff", [0.2, 0.35])
def test_drawn_shape_matches_commpy_rrc(rolloff: float) -> None:
    # Independent library: |FFT|^2 of scikit-commpy's rrcosfilter taps (12-symbol span, the
    # same truncation as the transmitter).  Compared where the reference is above -30 dB;
    # tolerance 0.1 dB covers the one-tap difference in how the two truncate (measured
    # <= 0.05 dB).
    rate_baud, centre_hz, span, sps = 1e6, 7_140e6, 12, 16
    carrier = make_carrier("c", centre_hz, rate_baud, rolloff=rolloff)
    problem = make_problem([carrier], default_block())
    density = emission_profile_source(carrier, problem)
    _, taps = rrcosfilter(span * sps, rolloff, 1.0, sps)
    n_fft = 1 << 16
    spectrum = np.fft.fftshift(np.abs(np.fft.fft(taps, n_fft)) ** 2)
    f_rs = np.fft.fftshift(np.fft.fftfreq(n_fft, 1.0 / sps))
    spectrum /= np.interp(0.0, f_rs, spectrum)
    x_rs = np.linspace(-1.0, 1.0, 2001)
    reference_db = 10 * np.log10(np.maximum(np.interp(x_rs, f_rs, spectrum), 1e-12))
    drawn_db = carrier_psd_db(carrier, 0.0, density, centre_hz + x_rs * rate_baud)
    upper = reference_db > -30.0
    assert np.max(np.abs(drawn_db[upper] - reference_db[upper])) < 0.1


def test_limit_lines_sit_below_the_in_band_level() -> None:
    # A leakage (ACLR-type) limit is a ratio to the carrier's own power (3GPP TS 36.104 §6.6.2,
    # check-values.md §4), so it is drawn that many dB below the in-band level (common
    # practice on spectrum plots).  Reference level = highest carrier level, here +3 dB.
    block = default_block(edge_limit_db=45.0)
    carriers = tile([1e6, 2e6], block)
    problem = make_problem(carriers, block, levels_db=[3.0, -2.0], leakage_limit_db=33.0)
    figure = build_spectrum_figure(make_plan(carriers), problem)
    limit_lines = {
        str(line.get_label()).split(":")[0]: line.get_ydata()
        for line in figure.axes[0].get_lines()
        if "limit" in str(line.get_label())
    }
    assert set(limit_lines) == {"leakage limit", "edge/exclusion limit"}
    assert np.allclose(np.asarray(limit_lines["leakage limit"], dtype=float), 3.0 - 33.0)
    assert np.allclose(np.asarray(limit_lines["edge/exclusion limit"], dtype=float), 3.0 - 45.0)


# --- image formats ----------------------------------------------------------------------------


def test_svg_is_valid_and_names_every_carrier(ten: tuple[Plan, Problem]) -> None:
    plan, problem = ten
    texts = svg_texts(render_spectrum(plan, problem, "svg"))
    joined = "\n".join(texts)
    for carrier in plan.carriers:
        assert any(t.startswith(carrier.demand_id) for t in texts), carrier.demand_id
    assert plan.name in joined
    assert "optimal" in joined
    assert EXCLUSION.note in joined
    assert "late-link (no_spectrum)" in joined
    for caution in CAUTIONS:  # the footer says what every plan's notices say
        assert caution in texts
    assert "Frequency (MHz)" in joined
    # the title names total throughput (Mb/s) and the efficiency against both bounds
    total_mbps = plan.summary.total_throughput_bps / 1e6
    assert f"{total_mbps:.4g} Mb/s total" in joined
    assert "61% of the target-capped bound, 27% of capacity" in joined


def test_png_is_valid_with_expected_size(ten: tuple[Plan, Problem]) -> None:
    plan, problem = ten
    png = render_spectrum(plan, problem, "png")
    assert png.startswith(PNG_MAGIC)
    with Image.open(io.BytesIO(png)) as image:
        image.load()
        size = image.size
    assert size == (round(STYLE.width_in * STYLE.dpi), round(STYLE.height_in * STYLE.dpi))


def test_labels_of_ten_carriers_do_not_overlap(ten: tuple[Plan, Problem]) -> None:
    plan, problem = ten
    boxes = label_boxes(build_spectrum_figure(plan, problem))
    assert set(boxes) == {c.demand_id for c in plan.carriers}
    assert overlapping(boxes) == []


def test_empty_plan_renders_both_formats() -> None:
    block = default_block()
    plan, problem = make_plan([]), make_problem([], block)
    texts = svg_texts(render_spectrum(plan, problem, "svg"))
    assert "No carriers in this plan" in texts
    png = render_spectrum(plan, problem, "png")
    assert png.startswith(PNG_MAGIC)
    with Image.open(io.BytesIO(png)) as image:
        assert image.size == (1300, 720)


def test_crowded_plan_of_thirty_carriers() -> None:
    block = default_block()
    rates = [30e3, 150e3, 400e3] * 10
    carriers = tile(rates, block, prefix="rtu")
    plan, problem = make_plan(carriers), make_problem(carriers, block)
    figure = build_spectrum_figure(plan, problem)
    boxes = label_boxes(figure)
    assert len(boxes) == 30
    assert overlapping(boxes) == []
    texts = svg_texts(render_spectrum(plan, problem, "svg"))
    for carrier in carriers:
        assert any(t.startswith(f"{carrier.demand_id}\n") or t == carrier.demand_id for t in texts)


def test_narrow_block_uses_khz() -> None:
    block = Block(450.000e6, 450.200e6, 100.0)
    carriers = tile([9.6e3, 19.2e3, 4.8e3], block, prefix="tlm")
    plan, problem = make_plan(carriers), make_problem(carriers, block)
    figure = build_spectrum_figure(plan, problem)
    assert figure.axes[0].get_xlabel() == "Frequency (kHz)"
    left, right = figure.axes[0].get_xlim()
    assert left < 450_000.0 < 450_200.0 < right


def test_same_request_same_svg_bytes(ten: tuple[Plan, Problem]) -> None:
    plan, problem = ten
    assert render_spectrum(plan, problem, "svg") == render_spectrum(plan, problem, "svg")


def test_concurrent_renders_are_identical() -> None:
    block = default_block()
    carriers = tile([1e6, 2e6, 64e3], block)
    plan, problem = make_plan(carriers), make_problem(carriers, block)
    expected = render_spectrum(plan, problem, "png")
    results: list[bytes] = []

    def work() -> None:
        results.append(render_spectrum(plan, problem, "png"))

    threads = [threading.Thread(target=work) for _ in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert results == [expected] * 4


# --- argument checks ------------------------------------------------------------------------


def test_unknown_format_is_named() -> None:
    block = default_block()
    with pytest.raises(ValueError, match="fmt='jpeg'"):
        render_spectrum(make_plan([]), make_problem([], block), "jpeg")  # type: ignore[arg-type]


def test_block_without_width_is_named() -> None:
    block = Block(7_130e6, 7_130e6)
    with pytest.raises(ValueError, match=r"stop_hz=7130000000\.0"):
        render_spectrum(make_plan([]), make_problem([], block), "png")


def test_bad_symbol_rate_is_named() -> None:
    carrier = make_carrier("zero", 7_130e6, 0.0)
    with pytest.raises(ValueError, match=r"symbol_rate_baud=0\.0"):
        carrier_psd_db(carrier, 0.0, lambda f: np.ones_like(f), np.array([7_130e6]))


# --- property: labels never overlap -----------------------------------------------------------


@settings(max_examples=8, deadline=None)
@given(rates=st.lists(st.sampled_from([16e3, 64e3, 250e3, 1e6, 2.5e6]), min_size=0, max_size=24))
def test_property_every_carrier_labelled_without_overlap(rates: list[float]) -> None:
    block = default_block()
    carriers = try_tile(rates, block, prefix="p")
    assume(carriers is not None)
    assert carriers is not None
    figure = build_spectrum_figure(make_plan(carriers), make_problem(carriers, block))
    boxes = label_boxes(figure)
    assert set(boxes) == {c.demand_id for c in carriers}
    assert overlapping(boxes) == []
    drawn = {
        str(line.get_gid()).removeprefix("carrier-")
        for line in figure.axes[0].get_lines()
        if isinstance(line, Line2D) and str(line.get_gid()).startswith("carrier-")
    }
    assert drawn == {c.demand_id for c in carriers}


def test_a_plan_of_hundreds_of_carriers_gets_the_simplified_drawing() -> None:
    # Before: a plan of some 1,200 carriers took 242 s of a core to draw as SVG (19 MB), with
    # a curve, a fill and a label per carrier.  Above STYLE.detailed_carriers the picture is
    # the sum of all carriers with the bands and guards as bars, and no labels.
    block = default_block()
    carriers = tile([30e3, 20e3, 12e3] * 70, block, prefix="meter")
    plan, problem = make_plan(carriers), make_problem(carriers, block)
    assert len(carriers) > STYLE.detailed_carriers
    figure = build_spectrum_figure(plan, problem)
    assert label_boxes(figure) == {}
    svg = render_spectrum(plan, problem, "svg")
    assert any("simplified drawing" in t for t in svg_texts(svg))
    assert len(svg) < 2_000_000
