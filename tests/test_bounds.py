"""Shannon–Nyquist bound: closed forms, properties, and an independent optimiser check."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize

from solver.model import Demand
from solver.physics.bounds import capacity_bound, shannon_capacity_bps, shannon_nyquist_bound

UNCAPPED = 1e15


def _power(i: int, cn0_dbhz: float, target: float = UNCAPPED, margin: float = 0.0) -> Demand:
    return Demand(f"p{i}", 0.0, target, cn0_dbhz=cn0_dbhz, margin_db=margin)


def _fixed(i: int, esn0_db: float, target: float = UNCAPPED, margin: float = 0.0) -> Demand:
    return Demand(f"f{i}", 0.0, target, esn0_db=esn0_db, margin_db=margin)


def test_shannon_capacity() -> None:
    # Shannon 1949: C = B·log2(1 + S/N); 1 MHz at 0 dB → 1 Mb/s; at 30 dB → 9.967 Mb/s.
    assert shannon_capacity_bps(1e6, 0.0) == pytest.approx(1e6)
    assert shannon_capacity_bps(1e6, 30.0) == pytest.approx(1e6 * math.log2(1001.0))


def test_single_power_limited_demand_takes_the_block() -> None:
    # One demand, no cap: the whole width at SNR = P/W (Shannon).  1e-9 relative.
    result = shannon_nyquist_bound(2e6, [_power(0, 66.0, margin=3.0)])
    power = 10**6.3
    assert result.widths_hz[0] == pytest.approx(2e6, rel=1e-9)
    assert result.total_bps == pytest.approx(2e6 * math.log2(1 + power / 2e6), rel=1e-9)


def test_identical_demands_split_equally() -> None:
    result = shannon_nyquist_bound(3e6, [_power(i, 70.0) for i in range(3)])
    np.testing.assert_allclose(result.widths_hz, [1e6] * 3, rtol=1e-8)


def test_fixed_demands_fill_best_slope_first() -> None:
    # Linear rates: the block goes to the highest log2(1 + γ) first, up to its target.
    best, worse = _fixed(0, 20.0, target=1e6), _fixed(1, 5.0)
    result = shannon_nyquist_bound(1e6, [worse, best])
    slope_best = math.log2(1 + 100.0)
    assert result.widths_hz[1] == pytest.approx(1e6 / slope_best, rel=1e-12)
    assert result.rates_bps[1] == pytest.approx(1e6, rel=1e-12)
    assert sum(result.widths_hz) == pytest.approx(1e6, rel=1e-12)


def test_everyone_capped_leaves_width_unused() -> None:
    demands = [_power(0, 70.0, target=1e5), _fixed(1, 10.0, target=2e5)]
    result = shannon_nyquist_bound(1e8, demands)
    assert result.total_bps == pytest.approx(3e5, rel=1e-9)
    assert sum(result.widths_hz) < 1e8


def test_margin_is_taken_off_the_snr() -> None:
    plain = shannon_nyquist_bound(1e6, [_fixed(0, 13.0)]).total_bps
    with_margin = shannon_nyquist_bound(1e6, [_fixed(0, 16.0, margin=3.0)]).total_bps
    assert with_margin == pytest.approx(plain, rel=1e-12)


def test_invalid_input_is_named() -> None:
    with pytest.raises(ValueError, match="usable_width_hz"):
        shannon_nyquist_bound(-1.0, [])
    with pytest.raises(ValueError, match="exactly one"):
        shannon_nyquist_bound(1e6, [Demand("x", 0.0, 1e6)])


def test_capacity_of_one_fixed_demand_by_hand() -> None:
    # Shannon 1948, C = B·log2(1 + SNR): 1 MHz at Es/N0 = 10 dB (SNR 10) → 1e6·log2(11)
    # = 3,459,431.6 bit/s.  Uncapped it takes the whole block; capped at 1e5 bit/s it carries
    # 1e5 in 1e5/log2(11) = 28,906.5 Hz.  1e-12 relative (floating point only).
    demand = _fixed(0, 10.0, target=1e5)
    uncapped = capacity_bound(1e6, [demand])
    assert uncapped.total_bps == pytest.approx(1e6 * math.log2(11.0), rel=1e-12)
    assert uncapped.widths_hz == pytest.approx((1e6,), rel=1e-12)
    capped = shannon_nyquist_bound(1e6, [demand])
    assert capped.total_bps == pytest.approx(1e5, rel=1e-12)
    assert capped.widths_hz[0] == pytest.approx(1e5 / math.log2(11.0), rel=1e-12)


def test_capacity_of_a_power_limited_demand_tends_to_p_log2_e() -> None:
    # C/N0 = 60 dBHz → P/N0 = 1e6 Hz.  In 1 MHz the SNR is 1: C = 1e6·log2 2 = 1e6 bit/s.
    # As B → ∞, B·log2(1 + P/B) → P·log2 e = 1,442,695.04 bit/s (the wideband limit, any
    # comms textbook, e.g. Proakis & Salehi, Digital Communications, 5th ed., §6.5); at
    # B = 1e12 Hz the shortfall is about P·log2 e·P/(2B) = 0.72 bit/s (series of ln(1 + x)).
    demand = _power(0, 60.0, target=1e5)
    assert capacity_bound(1e6, [demand]).total_bps == pytest.approx(1e6, rel=1e-12)
    wide = capacity_bound(1e12, [demand]).total_bps
    assert wide == pytest.approx(1e6 * math.log2(math.e) * (1 - 0.5e-6), rel=1e-9)
    assert wide < 1e6 * math.log2(math.e)


def test_uncapped_fixed_demands_of_the_best_slope_take_all_width() -> None:
    # Two fixed demands at 20 dB tie on the best slope log2(101); one at 5 dB gets nothing.
    # By hand: C = W·log2(101) = 2e6 × 6.65821 = 13,316,422 bit/s, half the block each.
    demands = [_fixed(0, 5.0), _fixed(1, 20.0), _fixed(2, 20.0)]
    result = capacity_bound(2e6, demands)
    assert result.total_bps == pytest.approx(2e6 * math.log2(101.0), rel=1e-12)
    assert result.widths_hz == pytest.approx((0.0, 1e6, 1e6), rel=1e-12)


def test_capacity_with_power_limited_and_fixed_demands_meets_kkt() -> None:
    # One fixed demand at 10 dB (slope s = log2 11) and one power-limited demand with
    # P/N0 = 1e6 Hz share 1 MHz uncapped.  KKT: the power-limited width B is where its marginal
    # rate d/dB[B·log2(1 + P/B)] = log2(1 + x) − x/((1 + x)·ln 2), x = P/B, equals s; the
    # fixed demand takes the rest.  Solved here independently with scipy's brentq on x.
    slope = math.log2(11.0)
    x = optimize.brentq(lambda v: math.log2(1 + v) - v / ((1 + v) * math.log(2)) - slope, 1, 1e3)
    width_p = 1e6 / x
    expected = (1e6 - width_p) * slope + width_p * math.log2(1 + x)
    result = capacity_bound(1e6, [_fixed(0, 10.0, target=1.0), _power(1, 60.0, target=1.0)])
    assert result.widths_hz[1] == pytest.approx(width_p, rel=1e-9)
    assert result.total_bps == pytest.approx(expected, rel=1e-12)


def test_capacity_of_nothing_is_zero() -> None:
    assert capacity_bound(0.0, [_fixed(0, 10.0), _power(1, 70.0)]).total_bps == 0.0
    assert capacity_bound(1e6, []).total_bps == 0.0


demand_strategy = st.one_of(
    st.builds(
        _power,
        st.integers(0, 9),
        st.floats(50.0, 85.0),
        st.floats(1e4, 5e7),
        st.floats(0.0, 4.0),
    ),
    st.builds(
        _fixed,
        st.integers(0, 9),
        st.floats(-5.0, 25.0),
        st.floats(1e4, 5e7),
        st.floats(0.0, 4.0),
    ),
)


@given(st.lists(demand_strategy, min_size=1, max_size=6), st.floats(1e4, 5e7))
@settings(max_examples=60, deadline=None)
def test_bound_properties(demands: list[Demand], width_hz: float) -> None:
    result = shannon_nyquist_bound(width_hz, demands)
    assert sum(result.widths_hz) <= width_hz * (1 + 1e-9)
    assert result.total_bps <= sum(d.target_rate_bps for d in demands) * (1 + 1e-12)
    for demand, rate in zip(demands, result.rates_bps, strict=True):
        assert 0.0 <= rate <= demand.target_rate_bps * (1 + 1e-12)
    # Pooled single channel: power-limited demands have fixed power, so by concavity their
    # total can never beat W·log2(1 + ΣP/W) (Shannon); fixed demands at most W·log2(1 + γ_max).
    powers = [10 ** ((d.cn0_dbhz - d.margin_db) / 10) for d in demands if d.cn0_dbhz is not None]
    snrs = [10 ** ((d.esn0_db - d.margin_db) / 10) for d in demands if d.esn0_db is not None]
    pooled = width_hz * math.log2(1 + sum(powers) / width_hz) if powers else 0.0
    fixed = width_hz * math.log2(1 + max(snrs)) if snrs else 0.0
    assert result.total_bps <= (pooled + fixed) * (1 + 1e-9)
    # Capacity (uncapped) ≥ target-capped ≥ 0, and target-capped ≤ requested (Σ targets).
    capacity = capacity_bound(width_hz, demands)
    assert sum(capacity.widths_hz) <= width_hz * (1 + 1e-9)
    assert math.isfinite(capacity.total_bps)
    assert capacity.total_bps >= result.total_bps * (1 - 1e-12) >= 0.0
    assert capacity.total_bps <= (pooled + fixed) * (1 + 1e-9)


def _objective(widths: np.ndarray, demands: list[Demand], capped: bool = True) -> float:
    total = 0.0
    for demand, width in zip(demands, np.maximum(widths, 1e-12), strict=True):
        if demand.cn0_dbhz is not None:
            power = 10 ** ((demand.cn0_dbhz - demand.margin_db) / 10)
            rate = width * math.log2(1 + power / width)
        else:
            esn0_db = 0.0 if demand.esn0_db is None else demand.esn0_db
            rate = width * math.log2(1 + 10 ** ((esn0_db - demand.margin_db) / 10))
        total += min(rate, demand.target_rate_bps) if capped else rate
    return total


def test_independent_optimiser_never_does_better() -> None:
    # Cross-check with a generic solver (scipy SLSQP, several seeded random starts) on random
    # instances: it must not find a feasible split with more than 1e-7 more total rate.
    rng = np.random.default_rng(11)
    for _ in range(12):
        count = int(rng.integers(2, 5))
        demands = [
            _power(i, float(rng.uniform(60, 80)), float(rng.uniform(1e5, 2e7)))
            if rng.random() < 0.5
            else _fixed(i, float(rng.uniform(-3, 20)), float(rng.uniform(1e5, 2e7)))
            for i in range(count)
        ]
        width = float(rng.uniform(1e5, 1e7))
        ours = shannon_nyquist_bound(width, demands).total_bps
        for _ in range(4):
            start = rng.dirichlet(np.ones(count)) * width
            found = optimize.minimize(
                lambda b, ds=demands: -_objective(b, ds) / 1e6,
                start,
                bounds=[(0.0, width)] * count,
                constraints=[{"type": "ineq", "fun": lambda b, w=width: (w - b.sum()) / w}],
                method="SLSQP",
                options={"ftol": 1e-12, "maxiter": 500},
            )
            if found.x.sum() <= width * (1 + 1e-9):
                assert _objective(found.x, demands) <= ours * (1 + 1e-7)
        assert ours >= _objective(np.full(count, width / count), demands) * (1 - 1e-12)


def test_independent_optimiser_never_beats_the_capacity_bound() -> None:
    # The same cross-check without caps (scipy SLSQP from seeded random starts).
    rng = np.random.default_rng(12)
    for _ in range(8):
        count = int(rng.integers(2, 5))
        demands = [
            _power(i, float(rng.uniform(60, 80)))
            if rng.random() < 0.5
            else _fixed(i, float(rng.uniform(-3, 20)))
            for i in range(count)
        ]
        width = float(rng.uniform(1e5, 1e7))
        ours = capacity_bound(width, demands).total_bps
        for _ in range(4):
            start = rng.dirichlet(np.ones(count)) * width
            found = optimize.minimize(
                lambda b, ds=demands: -_objective(b, ds, capped=False) / 1e6,
                start,
                bounds=[(0.0, width)] * count,
                constraints=[{"type": "ineq", "fun": lambda b, w=width: (w - b.sum()) / w}],
                method="SLSQP",
                options={"ftol": 1e-12, "maxiter": 500},
            )
            if found.x.sum() <= width * (1 + 1e-9):
                assert _objective(found.x, demands, capped=False) <= ours * (1 + 1e-7)
