"""What more spectrum is worth: hand-worked cases, an independent LP's dual values, properties
over random requests, and the achieved figures of real plans."""

from __future__ import annotations

import math
import threading

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize

from solver import Block, Demand, Exclusion, Objective, Problem, Transmitter, solve
from solver.candidates import every_family
from solver.physics.bounds import shannon_nyquist_bound
from solver.spectrum_value import (
    SpectrumGain,
    ValueMethod,
    bound_gain,
    marginal_rate,
    spectrum_value,
    step_hz,
)

MHZ = 1e6
UNCAPPED = 1e15


def _fixed(name: str, esn0_db: float, target: float = UNCAPPED, margin: float = 0.0) -> Demand:
    return Demand(name, 0.0, target, esn0_db=esn0_db, margin_db=margin)


def _power(name: str, cn0_dbhz: float, target: float = UNCAPPED, margin: float = 0.0) -> Demand:
    return Demand(name, 0.0, target, cn0_dbhz=cn0_dbhz, margin_db=margin)


# ------------------------------------------------------------------ hand-worked cases


def test_one_fixed_demand_uncapped_gains_log2_11_per_hz() -> None:
    # Shannon 1949, C = B·log2(1 + SNR): at 10 dB (SNR 10) one more MHz carries
    # 1e6·log2(11) = 3 459 431.6 bit/s; the width constraint's dual is log2(11) bit/s per Hz.
    demand = _fixed("a", 10.0)
    assert marginal_rate(5 * MHZ, [demand]) == pytest.approx(math.log2(11.0), rel=1e-12)
    gain, how = bound_gain(5 * MHZ, 1 * MHZ, [demand])
    assert how is ValueMethod.RELAXATION_DUAL
    assert gain == pytest.approx(3_459_431.6, abs=0.1)
    # The dual is exact here: a re-solve at 6 MHz differs by the same (1e-9 relative).
    again = shannon_nyquist_bound(6 * MHZ, [demand]).total_bps
    assert again - shannon_nyquist_bound(5 * MHZ, [demand]).total_bps == pytest.approx(
        gain, rel=1e-9
    )


def test_a_demand_at_its_target_gains_nothing() -> None:
    # 1 Mb/s at 10 dB needs 1e6/log2(11) = 0.289 MHz, far less than 5 MHz: already met, so
    # λ = 0 and more spectrum adds exactly 0.
    demand = _fixed("a", 10.0, target=1e6)
    assert marginal_rate(5 * MHZ, [demand]) == 0.0
    assert bound_gain(5 * MHZ, 1 * MHZ, [demand]) == (0.0, ValueMethod.RELAXATION_DUAL)


def test_two_fixed_demands_water_fill_on_the_better_slope() -> None:
    # a: SNR 3 (4.771 dB) → log2(4) = 2 bit/s/Hz, target 10 Mb/s → full at 5 MHz.
    # b: SNR 1 (0 dB)     → log2(2) = 1 bit/s/Hz, uncapped.
    a = _fixed("a", 10 * math.log10(3.0), target=10e6)
    b = _fixed("b", 0.0)
    # W = 3 MHz: all of it to a (2 > 1), λ = 2; a has 2 MHz of room ≥ the 1 MHz step, so the
    # dual is exact: gain = 2 bit/s/Hz × 1 MHz = 2 Mb/s.
    assert marginal_rate(3 * MHZ, [a, b]) == pytest.approx(2.0, rel=1e-12)
    gain, how = bound_gain(3 * MHZ, 1 * MHZ, [a, b])
    assert (how, gain) == (ValueMethod.RELAXATION_DUAL, pytest.approx(2e6, rel=1e-12))
    # W = 4.5 MHz: a has only 0.5 MHz of room, so the active set changes within the step.
    # By hand: 0.5 MHz more to a (+1 Mb/s, then at its target), 0.5 MHz to b (+0.5 Mb/s)
    # = 1.5 Mb/s, less than λ·step = 2 Mb/s: the bound is re-solved.
    gain, how = bound_gain(4.5 * MHZ, 1 * MHZ, [a, b])
    assert (how, gain) == (ValueMethod.RELAXATION_RESOLVE, pytest.approx(1.5e6, rel=1e-9))
    # W = 6 MHz: a at target (5 MHz), b has 1 MHz at λ = 1: gain 1 Mb/s, exact.
    gain, how = bound_gain(6 * MHZ, 1 * MHZ, [a, b])
    assert (how, gain) == (ValueMethod.RELAXATION_DUAL, pytest.approx(1e6, rel=1e-12))


def test_two_power_limited_demands_share_lambda_and_are_re_solved() -> None:
    # Both C/N0 = 60 dBHz (P = 1e6 Hz), no margin, W = 2 MHz: by symmetry 1 MHz each, x = P/B
    # = 1, so λ = log2(1 + x) − x/((1 + x)·ln 2) = 1 − 1/(2 ln 2) = 0.278652 bit/s per Hz.
    p, q = _power("p", 60.0), _power("q", 60.0)
    assert marginal_rate(2 * MHZ, [p, q]) == pytest.approx(1 - 1 / (2 * math.log(2)), rel=1e-9)
    # The marginal falls as the width grows, so the dual is not exact: re-solved.  By hand,
    # W = 3 MHz gives 1.5 MHz each at SNR 2/3: 3e6·log2(5/3) = 2 210 897.8 bit/s, against
    # 2e6·log2(2) = 2e6 at 2 MHz → gain 210 897.8 bit/s (below λ·step = 278 652: concavity).
    gain, how = bound_gain(2 * MHZ, 1 * MHZ, [p, q])
    assert how is ValueMethod.RELAXATION_RESOLVE
    assert gain == pytest.approx(3e6 * math.log2(5 / 3) - 2e6, rel=1e-9)
    assert gain < (1 - 1 / (2 * math.log(2))) * MHZ


def test_step_is_a_whole_number_of_raster_steps() -> None:
    assert step_hz(Block(0.0, 1e7, raster_hz=10e3)) == 1e6
    assert step_hz(Block(0.0, 1e7, raster_hz=300e3)) == 900e3  # round(3.33) = 3 steps
    assert step_hz(Block(0.0, 1e7, raster_hz=3e6)) == 3e6  # never less than one step


# ------------------------------------------------------------------ an independent LP


fixed_strategy = st.builds(
    lambda n, esn0, target: _fixed(f"f{n}", esn0, target),
    st.integers(0, 1_000),
    st.floats(-5.0, 30.0),
    st.one_of(st.just(UNCAPPED), st.floats(1e5, 5e7)),
)


@settings(max_examples=60, deadline=None)
@given(st.lists(fixed_strategy, min_size=1, max_size=6), st.floats(1e5, 3e7))
def test_fixed_demands_match_the_duals_of_an_independent_lp(
    demands: list[Demand], width_hz: float
) -> None:
    """With fixed Es/N0 only the bound is a linear programme: max Σ sᵢBᵢ, Σ Bᵢ ≤ W,
    0 ≤ Bᵢ ≤ Tᵢ/sᵢ.  HiGHS (scipy.optimize.linprog) returns the width row's dual value
    (``ineqlin.marginals``), which must equal λ⁺ where the LP's λ is unique (the right
    derivative: HiGHS may return any value in [λ⁻, λ⁺] at a breakpoint, so compare there
    only when W sits strictly inside a linear piece)."""
    slopes = [math.log2(1 + 10 ** (float(d.esn0_db or 0.0) / 10)) for d in demands]
    caps = [d.target_rate_bps / s for d, s in zip(demands, slopes, strict=True)]
    lp = optimize.linprog(
        [-s for s in slopes],
        A_ub=[[1.0] * len(demands)],
        b_ub=[width_hz],
        bounds=list(zip([0.0] * len(caps), caps, strict=True)),
        method="highs",
    )
    assert lp.status == 0
    assert shannon_nyquist_bound(width_hz, demands).total_bps == pytest.approx(-lp.fun, rel=1e-9)
    lam = marginal_rate(width_hz, demands)
    below = marginal_rate(width_hz * (1 - 1e-6), demands)
    if math.isclose(below, lam, rel_tol=1e-9):  # not at a breakpoint: λ is unique
        assert -lp.ineqlin.marginals[0] == pytest.approx(lam, rel=1e-9, abs=1e-12)
    gain, how = bound_gain(width_hz, 1 * MHZ, demands)
    if how is ValueMethod.RELAXATION_DUAL:
        assert gain == pytest.approx(lam * MHZ, rel=1e-12)


# ------------------------------------------------------------------ properties


any_demand = st.builds(
    lambda n, fixed, level, target, margin: (
        _fixed(f"f{n}", level - 60.0, target, margin)
        if fixed
        else _power(f"p{n}", level, target, margin)
    ),
    st.integers(0, 1_000),
    st.booleans(),
    st.floats(50.0, 90.0),  # C/N0 dBHz, or Es/N0 = level − 60 dB in [−10, 30]
    st.one_of(st.just(UNCAPPED), st.floats(1e5, 2e8)),
    st.floats(0.0, 3.0),
)


def _pooled_snr_in(width_hz: float, demands: list[Demand]) -> float:
    """γ* for the bound below: the best fixed demand's SNR plus every power-limited demand's
    C/N0 spread over ``width_hz`` (for one C/N0 demand alone: the Es/N0 it would have in
    that width), all after their margins."""
    fixed = [
        10 ** ((float(d.esn0_db) - d.margin_db) / 10) for d in demands if d.esn0_db is not None
    ]
    powers = [10 ** ((d.cn0_dbhz - d.margin_db) / 10) for d in demands if d.cn0_dbhz is not None]
    return max(fixed, default=0.0) + sum(powers) / width_hz


@settings(max_examples=80, deadline=None)
@given(
    st.lists(any_demand, min_size=1, max_size=6),
    # widths below 1 Hz are left out: at a subnormal width (2e-309 Hz) the bound's own
    # B·log2(1 + P/B) overflows to the target (reported; the bound is not this module's)
    st.one_of(st.just(0.0), st.floats(1.0, 5e7)),
)
def test_marginal_throughput_is_never_negative_nor_above_shannon(
    demands: list[Demand], width_hz: float
) -> None:
    """For any request, the bound's gain g from one more MHz satisfies 0 ≤ g and

    * g ≤ λ⁺ · 1 MHz (the bound is concave in the width: Boyd & Vandenberghe §3.1.3), and
    * g ≤ 1 MHz · log2(1 + γ*), the Shannon capacity of the extra MHz at the "best demand's
      Es/N0", γ* (:func:`_pooled_snr_in` over 1 MHz).  Why: the bound V(W) is concave with
      V(0) = 0, so V(W + Δ) − V(W) ≤ V(Δ); every rate is Bᵢ·log2(1 + Qᵢ/Bᵢ) with Qᵢ = Pᵢ
      (C/N0 stated) or γᵢBᵢ (Es/N0 stated), jointly concave in (Bᵢ, Qᵢ), so over ΣBᵢ = Δ,
      V(Δ) ≤ Δ·log2(1 + ΣQᵢ/Δ) ≤ Δ·log2(1 + max γᵢ + ΣPᵢ/Δ).  With several C/N0 demands the
      pooling is needed: spread thin, they carry more than any one of them alone.
    """
    gain, how = bound_gain(width_hz, 1 * MHZ, demands)
    assert gain >= 0.0
    lam = marginal_rate(width_hz, demands)
    assert gain <= lam * MHZ * (1 + 1e-9) + 1e-6
    shannon = MHZ * math.log2(1 + _pooled_snr_in(MHZ, demands))
    assert gain <= shannon * (1 + 1e-9)
    if how is ValueMethod.RELAXATION_DUAL:  # exact: a re-solve agrees
        resolved = (
            shannon_nyquist_bound(width_hz + MHZ, demands).total_bps
            - shannon_nyquist_bound(width_hz, demands).total_bps
        )
        assert gain == pytest.approx(resolved, rel=1e-7, abs=1e-3)


@settings(max_examples=40, deadline=None)
@given(
    st.lists(any_demand, min_size=1, max_size=5),
    st.floats(1e5, 3e7),
    st.floats(0.0, 5e6),
)
def test_removing_an_exclusion_never_loses(
    demands: list[Demand], usable_hz: float, freed_hz: float
) -> None:
    """The bound gain of an exclusion's width is never negative and grows with the width."""
    gain, _ = bound_gain(usable_hz, freed_hz, demands)
    more, _ = bound_gain(usable_hz, freed_hz * 1.5 + 1e3, demands)
    assert 0.0 <= gain <= more * (1 + 1e-9) + 1e-6


def test_a_sliver_gets_no_rate_per_mhz() -> None:
    # Found by the API fuzz run: an exclusion 5e-324 Hz wide divided by zero.  Gain and
    # width are kept; the per-MHz figures are None under 1 Hz.
    gain = SpectrumGain(5e-324, 0.0, ValueMethod.RELAXATION_RESOLVE, 0.0, ValueMethod.PLAN_UPGRADE)
    assert (gain.bound_bps_per_mhz, gain.achieved_bps_per_mhz) == (None, None)
    assert SpectrumGain(2e6, 3e6, ValueMethod.RELAXATION_DUAL).bound_bps_per_mhz == 1.5e6


def test_a_negative_width_is_refused() -> None:
    with pytest.raises(ValueError, match="freed_hz"):
        bound_gain(1e6, -1.0, [_fixed("a", 10.0)])


# ------------------------------------------------------------------ real plans

TX = Transmitter(filter_span_symbols=12, rolloffs=(0.1, 0.2, 0.35))


def _plan_problem(objective: Objective = Objective.MAX_THROUGHPUT) -> Problem:
    """Two C/N0 demands wanting more than fits in 6 MHz with a 1 MHz exclusion inside."""
    block = Block(
        start_hz=2_000e6,
        stop_hz=2_006e6,
        raster_hz=10e3,
        exclusions=(Exclusion(2_003e6, 2_004e6, "radio astronomy guard (invented)"),),
    )
    demands = (
        Demand("alpha", 1e6, 20e6, cn0_dbhz=80.0, margin_db=2.0),
        Demand("bravo", 1e6, 20e6, cn0_dbhz=78.0, margin_db=2.0),
    )
    return Problem(
        block=block,
        demands=demands,
        transmitter=TX,
        objective=objective,
        time_limit_s=6.0,
        num_workers=1,
    )


def test_a_plan_reports_bound_and_achieved_figures() -> None:
    problem = _plan_problem()
    plan = solve(problem)
    value = plan.summary.spectrum_value
    assert value is not None and plan.carriers
    gains = [value.lower_edge, value.upper_edge, *(x.gain for x in value.exclusions)]
    assert [x.note for x in value.exclusions] == ["radio astronomy guard (invented)"]
    assert [g.freed_hz for g in gains] == [1e6, 1e6, 1e6]
    for g in gains:
        # Both demands are below target in 5 MHz usable at these C/N0s, so the bound gains,
        # by the pooled Shannon figure of the test above at most.
        powers = [10 ** ((d.cn0_dbhz - d.margin_db) / 10) for d in problem.demands if d.cn0_dbhz]
        assert 0.0 < g.bound_gain_bps <= MHZ * math.log2(1 + sum(powers) / MHZ)
        assert g.bound_method is ValueMethod.RELAXATION_RESOLVE  # power-limited: re-solved
        if g.achieved_gain_bps is not None:
            assert g.achieved_method is ValueMethod.PLAN_UPGRADE
            assert g.achieved_gain_bps >= 0.0
    # This small plan has time to spare: every achieved figure is computed, and more room
    # lets its below-target carriers grow.
    assert all(g.achieved_gain_bps is not None for g in gains), value.achieved_note
    assert any((g.achieved_gain_bps or 0.0) > 0.0 for g in gains)
    # The edge figures of the bound agree: the relaxation does not know where spectrum sits.
    assert value.lower_edge.bound_gain_bps == value.upper_edge.bound_gain_bps


def test_achieved_figures_are_left_out_where_they_do_not_apply() -> None:
    problem = _plan_problem(Objective.MIN_BANDWIDTH)
    plan = solve(problem)
    value = plan.summary.spectrum_value
    assert value is not None
    assert value.lower_edge.achieved_gain_bps is None
    assert "max_throughput" in value.achieved_note
    # A cancelled solve starts no achieved figure and returns promptly.
    throughput = _plan_problem()
    cancel = threading.Event()
    cancel.set()
    done = spectrum_value(throughput, plan.carriers, every_family, deadline=math.inf, cancel=cancel)
    assert done.upper_edge.achieved_gain_bps is None
    assert "cancelled" in done.achieved_note
