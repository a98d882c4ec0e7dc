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
from collections.abc import Sequence

import numpy as np
import pytest
from commpy.filters import rrcosfilter
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle
from matplotlib.text import Text
from PIL import Image
from render_support import (
    BLOCK_START_HZ,
    BLOCK_STOP_HZ,
    EXCLUSION,
    LINEAR_SPAN_SYMBOLS,
    PNG_MAGIC,
    axes_named,
    default_block,
    label_boxes,
    make_carrier,
    make_plan,
    make_problem,
    overlapping,
    svg_texts,
    texts_by_gid,
    tile,
    try_tile,
    verified,
)

from service.picture_layout import Footprint, footprints
from service.render import (
    STYLE,
    build_spectrum_figure,
    carrier_psd_db,
    emission_profile_source,
    render_spectrum,
)
from solver import CAUTIONS, verify_plan
from solver.model import (
    Block,
    Carrier,
    Exclusion,
    Plan,
    Problem,
    Transmitter,
    Unserved,
    UnservedReason,
)

TEN_RATES_BAUD = [32e3, 1.2e6, 2.5e6, 64e3, 2.5e6, 500e3, 32e3, 2e6, 250e3, 1e6]


@pytest.fixture(scope="module")
def ten() -> tuple[Plan, Problem]:
    block = default_block()
    carriers = tile(TEN_RATES_BAUD, block)
    levels = [0.0, -3.0] * 5
    unserved = [Unserved("late-link", UnservedReason.NO_SPECTRUM, "no room")]
    problem = make_problem(carriers, block, levels)
    return make_plan(verified(carriers, problem), unserved), problem


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
    # the title names total throughput (Mbit/s, the command's word) and the efficiency
    total_mbps = plan.summary.total_throughput_bps / 1e6
    assert f"{total_mbps:.4g} Mbit/s total" in joined
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
        assert image.size == (1300, 800)  # 13 x 8 inches at 100 dpi


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
    assert axes_named(figure, "gaps").get_xlabel() == "Frequency (kHz)"
    left, right = axes_named(figure, "spectrum").get_xlim()
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
        for line in axes_named(figure, "spectrum").get_lines()
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


# --- leakage: figures beside the gaps, not lines on the PSD axis -----------------------------

GAP_RATES_BAUD = [1e6, 2e6, 500e3, 1e6, 250e3, 2e6, 1e6]


def expected_gap_texts(carriers: Sequence[Carrier], problem: Problem) -> list[str]:
    """What the picture must write under each gap, worked out here from the verified carriers:
    the block edges and the exclusion (which lies between two of the tiled carriers) are held
    to the edge limit, every other pair of neighbours to the leakage limit, and a pair shows
    the worse (smaller) of its two carriers' ratios."""
    edge, limit = problem.edge_limit_db, problem.leakage_limit_db
    ordered = sorted(carriers, key=lambda c: c.center_hz)
    texts = [f"{ordered[0].leakage_ratio_below_db:.1f} ≥ {edge:g} dB"]
    for a, b in itertools.pairwise(ordered):
        if a.upper_edge_hz <= EXCLUSION.start_hz and b.lower_edge_hz >= EXCLUSION.stop_hz:
            texts += [
                f"{a.leakage_ratio_above_db:.1f} ≥ {edge:g} dB",
                f"{b.leakage_ratio_below_db:.1f} ≥ {edge:g} dB",
            ]
        else:
            worse = min(a.leakage_ratio_above_db, b.leakage_ratio_below_db)
            texts.append(f"{worse:.1f} ≥ {limit:g} dB")
    return [*texts, f"{ordered[-1].leakage_ratio_above_db:.1f} ≥ {edge:g} dB"]


def test_every_gap_shows_the_verifiers_ratio_beside_the_least_permitted() -> None:
    # A leakage limit is a ratio of powers (ACLR-type, 3GPP TS 36.104 §6.6.2), so the picture
    # writes it under each gap with the ratio the verifier measured there; a plan the
    # verifier passes shows "≥" everywhere and nothing red.
    block = default_block(edge_limit_db=40.0)
    carriers = tile(GAP_RATES_BAUD, block)
    problem = make_problem(carriers, block, leakage_limit_db=30.0)
    checked = verified(carriers, problem)
    figure = build_spectrum_figure(make_plan(checked), problem)
    gaps = texts_by_gid(figure, "gap-")
    drawn = [gaps[f"gap-{i}"] for i in range(len(gaps))]
    assert drawn == expected_gap_texts(checked, problem)
    assert len(drawn) == len(checked) + 2  # one pair split by the exclusion: 2 more edges
    for text in drawn:  # achieved ≥ permitted, as the verifier said
        achieved, sign, permitted, _ = text.split()
        assert sign == "≥" and float(achieved) >= float(permitted)
    colours = {t.get_color() for t in figure.findobj(Text) if str(t.get_gid()).startswith("gap")}
    assert STYLE.fail_colour not in colours
    spectrum = axes_named(figure, "spectrum")
    flat = [line for line in spectrum.get_lines() if np.ptp(line.get_ydata()) == 0]
    assert flat == []  # no level line drawn as if it were the limit
    svg = svg_texts(render_spectrum(make_plan(checked), problem, "svg"))
    assert all(text in svg for text in drawn)


def test_a_gap_figure_agrees_with_aclr_from_commpy_taps() -> None:
    # Independent check of the figure shown: the adjacent-channel leakage ratio (own nominal
    # band over an adjacent band of the same width, 3GPP TS 38.104 §6.6.3) of a 12-symbol RRC
    # carrier, α = 0.2, 0.1 Rs beyond its edge, integrated from |FFT|² of scikit-commpy's
    # rrcosfilter taps: 48.99 dB.  Tolerance 0.5 dB: the two truncate the filter one tap apart
    # (measured difference 0.20 dB at this gap).
    rate_baud, rolloff, gap_rs, sps = 1e6, 0.2, 0.1, 32
    _, taps = rrcosfilter(12 * sps, rolloff, 1.0, sps)
    n_fft = 1 << 18
    psd = np.fft.fftshift(np.abs(np.fft.fft(taps, n_fft)) ** 2)
    f_rs = np.fft.fftshift(np.fft.fftfreq(n_fft, 1.0 / sps))
    width = 1 + rolloff
    own = psd[np.abs(f_rs) <= width / 2].sum()
    adjacent = psd[(f_rs >= width / 2 + gap_rs) & (f_rs <= width / 2 + gap_rs + width)].sum()
    reference_db = 10 * np.log10(own / adjacent)
    low_centre = 7_134.0e6
    high_centre = low_centre + width * rate_baud + gap_rs * rate_baud
    pair = [
        make_carrier("low", low_centre, rate_baud),
        make_carrier("high", high_centre, rate_baud),
    ]
    block = Block(BLOCK_START_HZ, BLOCK_STOP_HZ, 5e3, (), 40.0)
    problem = make_problem(pair, block)
    figure = build_spectrum_figure(make_plan(verified(pair, problem)), problem)
    between = texts_by_gid(figure, "gap-")["gap-1"]  # gap-0: lower block edge
    assert between.endswith("≥ 30 dB")
    assert float(between.split()[0]) == pytest.approx(reference_db, abs=0.5)


def test_a_failing_gap_is_shown_failing() -> None:
    # Two carriers edge to edge under a 60 dB limit: the verifier rejects the plan, and the
    # picture must say so under that gap (a "<", in the failure colour), not hide it.
    block = Block(BLOCK_START_HZ, BLOCK_STOP_HZ, 5e3, (), 40.0)
    pair = [make_carrier("low", 7_134e6, 1e6), make_carrier("high", 7_134e6 + 1.2e6, 1e6)]
    problem = make_problem(pair, block, leakage_limit_db=60.0)
    check = verify_plan(problem, pair)
    assert not check.passed
    figure = build_spectrum_figure(make_plan(check.carriers), problem)
    (text,) = [t for t in figure.findobj(Text) if t.get_gid() == "gap-1"]
    assert " < 60 dB" in text.get_text()
    assert text.get_color() == STYLE.fail_colour


# --- fifty carriers, each named -----------------------------------------------------------

FIFTY_BLOCK = Block(7_100e6, 7_150e6, 5e3, (Exclusion(7_130e6, 7_131e6, "radar"),), 40.0)


def test_fifty_carriers_are_each_named_in_the_svg_without_overlap() -> None:
    # Colours repeat after twenty; the names must not.  Every demand id is an SVG text of its
    # own (the first line of its label), no two labels overlap, and every label stays inside
    # the picture.
    carriers = tile([30e3, 150e3, 400e3, 1e6, 1.5e6] * 10, FIFTY_BLOCK, prefix="site")
    assert len(carriers) == 50
    problem = make_problem(carriers, FIFTY_BLOCK)
    plan = make_plan(carriers)
    texts = svg_texts(render_spectrum(plan, problem, "svg"))
    missing = [c.demand_id for c in carriers if c.demand_id not in texts]
    assert missing == []
    figure = build_spectrum_figure(plan, problem)
    boxes = label_boxes(figure)
    assert set(boxes) == {c.demand_id for c in carriers}
    assert overlapping(boxes) == []
    height_px = STYLE.height_in * STYLE.dpi
    assert all(y0 >= 0 and y1 <= height_px for _, y0, _, y1 in boxes.values())


# --- narrow carriers keep a visible bar and guards -------------------------------------------


VISIBLE_BAND_PX = 3.0  # what "visible" means here: a bar and guards a reader can see
VISIBLE_GUARD_PX = 1.5


def patch_px(figure: Figure, gid: str) -> tuple[float, float]:
    """Left and right edge (pixels) of the patch with ``gid``."""
    (patch,) = [p for p in figure.findobj(Rectangle) if p.get_gid() == gid]
    box = patch.get_window_extent()
    return box.x0, box.x1


def test_a_narrow_carrier_gets_a_least_width_with_its_guards_beside_it() -> None:
    # 40 kbaud × 1.2 = 48 kHz allocated and 5.8 kHz guards in a 50 MHz block: about 1.1 px
    # and 0.13 px at true scale (1 px ≈ 43 kHz here), so the bar and guards take their least
    # widths; the 8 MHz carrier keeps its true width and place.
    narrow = make_carrier("telemetry", 7_115e6, 40e3)
    wide = make_carrier("backhaul", 7_140e6, 8e6 / 1.2)
    carriers = [narrow, wide]
    problem = make_problem(carriers, FIFTY_BLOCK)
    figure = build_spectrum_figure(make_plan(carriers), problem)
    below, band, above = (
        patch_px(figure, f"{part}-telemetry") for part in ("guard-below", "band", "guard-above")
    )
    assert band[1] - band[0] >= VISIBLE_BAND_PX
    assert below[1] - below[0] >= VISIBLE_GUARD_PX
    assert above[1] - above[0] >= VISIBLE_GUARD_PX
    assert below[1] == pytest.approx(band[0]) and band[1] == pytest.approx(above[0])
    strip = axes_named(figure, "labels")
    centre_px = strip.transData.transform((narrow.center_hz / 1e6, 0))[0]
    assert (band[0] + band[1]) / 2 == pytest.approx(centre_px, abs=0.5)  # where it is
    wide_band = patch_px(figure, "band-backhaul")
    true_px = [
        strip.transData.transform((f / 1e6, 0))[0] for f in (wide.lower_edge_hz, wide.upper_edge_hz)
    ]
    assert wide_band == pytest.approx(tuple(true_px), abs=0.5)
    svg = render_spectrum(make_plan(carriers), problem, "svg").decode()
    for part in ("guard-below", "band", "guard-above"):
        assert f'id="{part}-telemetry"' in svg


def test_footprints_by_hand() -> None:
    # Worked by hand: a band 1 wide (1…2) with guards of 1 each side, least widths band 4 and
    # guard 2: the band grows to 4 about its centre 1.5 → (−0.5, 3.5), guards (−2.5, −0.5) and
    # (3.5, 5.5).  A guard of zero stays zero.
    (one,) = footprints([(0.0, 1.0, 2.0, 3.0)], 4.0, 2.0, -100.0, 100.0)
    assert one == Footprint((-2.5, -0.5), (-0.5, 3.5), (3.5, 5.5))
    (bare,) = footprints([(10.0, 10.0, 11.0, 11.0)], 4.0, 2.0, -100.0, 100.0)
    assert bare == Footprint((8.5, 8.5), (8.5, 12.5), (12.5, 12.5))
    # Two touching narrow spans (0…1, 1…2, no guards): widened to 4 each, the second is
    # pushed right so that they touch again: (−1.5, 2.5) and (2.5, 6.5).
    first, second = footprints([(0, 0, 1, 1), (1, 1, 2, 2)], 4.0, 2.0, -100.0, 100.0)
    assert first.band == (-1.5, 2.5) and second.band == (2.5, 6.5)
