"""The throughput bound against the verifier's interference rule.

The spacing :mod:`solver.quiet` claims the interference rule asks of a victim is never more than
the gap :func:`solver.verify_plan` really needs beside some neighbour: a real neighbour of another
demand placed just inside the claimed gap makes the victim fail its interference check, and
:class:`solver.verify.PairCheck` (the planner's stricter pair rule) never finds a smaller gap.

On amplifier-limited and interference-limited instances (Rapp p = 2 at 4–6 dB back-off; fixed
high-Es/N0 links with high-order modulations, tight margins and unequal levels), the bound a
plan states is never below the exhaustive referee's best plan of the same admission (property
5 of ``test_referee.py`` on these instances), and the relaxation at the referee's own
admission is never below the referee's value.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, replace

import numpy as np
import pytest
from hypothesis import HealthCheck, example, given, seed, settings
from hypothesis import strategies as st
from referee import Refereed, admission_key, admission_value, referee

from solver import (
    Amplifier,
    AmplifierModel,
    Block,
    Carrier,
    Demand,
    Modulation,
    Objective,
    Plan,
    Problem,
    Transmitter,
    solve,
    verify_plan,
)
from solver.candidates import bound_candidates, every_family, least_symbol_rates
from solver.geometry import free_segments
from solver.judge import _items
from solver.packing import admission_weights
from solver.packing.arrangement import FINE, fine_slot
from solver.packing.families import Family
from solver.packing.spacing import throughput_bound
from solver.quiet import QuietEnvelope, _allowed, _filter, _needed_gap, _Piece, envelopes
from solver.quiet import spacing_per_half as quiet_spacing
from solver.verify import PairCheck, ViolationKind

pytestmark = pytest.mark.slow

ROLLOFFS = (0.1, 0.25)
HIGH_ORDER = (Modulation.QAM64, Modulation.QAM256)
FEW_HIGH = (Modulation.QPSK, Modulation.QAM64)


def _rapp(backoff_db: float) -> Transmitter:
    amplifier = Amplifier(AmplifierModel.RAPP, 2.0, backoff_db)
    return Transmitter(filter_span_symbols=12, rolloffs=ROLLOFFS, amplifier=amplifier)


# ---------------------------------------------------------------- the spacing claimed


LOUD = Problem(
    block=Block(400e6, 402e6, raster_hz=25e3),
    demands=tuple(
        Demand(
            id=f"d{i}",
            min_rate_bps=rate,
            target_rate_bps=3 * rate,
            esn0_db=24.0,
            margin_db=1.0,
            modulations=HIGH_ORDER,
            relative_level_db=level,
        )
        for i, (rate, level) in enumerate(((1e6, 0.0), (0.6e6, 12.0), (1.2e6, 24.0)))
    ),
    leakage_limit_db=25.0,
    transmitter=_rapp(4.0),
)
"""Three fixed high-Es/N0 links at 0, +12 and +24 dB relative level through a Rapp amplifier at
4 dB back-off: the quieter carriers' small allowance (256QAM a dB or two above its threshold)
is used up by a louder neighbour's spectral regrowth unless it keeps its distance."""


def _carrier(family: Family, half: float, centre_hz: float) -> Carrier:
    config = family.config_at(half / family.hi_half)
    return Carrier(config=config, center_hz=centre_hz, guard_below_hz=0.0, guard_above_hz=0.0)


def _victim_fails(problem: Problem, victim: Carrier, other: Carrier, gap_hz: float) -> bool:
    """Whether the victim fails its interference check with ``other`` just above it."""
    width = other.config.allocated_bandwidth_hz
    placed = replace(other, center_hz=victim.upper_edge_hz + gap_hz + width / 2)
    found = verify_plan(problem, [victim, placed]).violations
    return any(
        v.kind is ViolationKind.INTERFERENCE and v.demand_id == victim.demand_id for v in found
    )


@dataclass(frozen=True)
class _Pair:
    victim: Carrier
    other: Carrier
    family: Family
    half: float
    claimed_hz: float


def _pairs(problem: Problem, count: int, rng: np.random.Generator) -> list[_Pair]:
    """Random victims (a bound family on the fine grid at a random width) and neighbours (any
    configuration of another demand, at its narrowest or a random width), with the gap claimed
    at the victim's width."""
    rates = {d.id: least_symbol_rates(problem, d) for d in problem.demands}
    quiet = envelopes(problem, rates)
    pairs = []
    for _ in range(count):
        a, b = rng.choice(len(problem.demands), size=2, replace=False)
        va, vb = problem.demands[a], problem.demands[b]
        bound_families = bound_candidates(problem, va)
        family = fine_slot(bound_families[rng.integers(len(bound_families))], va, 1).family
        half = float(rng.integers(family.lo_half, family.hi_half + 1))
        others = every_family(problem, vb)
        other_family = others[rng.integers(len(others))]
        narrowest = rng.random() < 0.5  # the quietest neighbours are the narrowest
        top = other_family.lo_half if narrowest else other_family.hi_half
        other_half = float(rng.integers(other_family.lo_half, top + 1))
        claimed = _claimed_hz(problem, family, half, quiet[va.id])
        victim = _carrier(family, half, 401e6)
        pairs.append(_Pair(victim, _carrier(other_family, other_half, 0.0), family, half, claimed))
    return pairs


def _claimed_hz(problem: Problem, family: Family, half: float, quiet: QuietEnvelope) -> float:
    """The gap above a victim of ``family`` at exactly ``half`` that the envelope claims."""
    demand = next(d for d in problem.demands if d.id == family.config.demand_id)
    level = 10.0 ** (demand.relative_level_db / 10.0)
    rate = family.config.symbol_rate_baud * half / family.hi_half
    filt = _filter(family.key, "above") if family.key is not None else None
    assert filt is not None
    piece = _Piece(rate, _allowed(family, demand, half, level, filt.signal))
    return float(_needed_gap(quiet, filt, "above", [piece])[0]) * rate


@functools.cache
def _loud_pairs() -> list[_Pair]:
    return _pairs(LOUD, 120, np.random.default_rng(20_251_202))


def test_the_loud_instance_claims_spacing() -> None:
    """Premise of the next tests: the instance has victims with spacing to claim."""
    claimed = [p for p in _loud_pairs() if p.claimed_hz > 0]
    assert len(claimed) >= 10


def test_a_neighbour_inside_the_claimed_gap_fails_the_victim() -> None:
    """Whatever the neighbour, just inside the claimed gap the verifier fails the victim."""
    for pair in _loud_pairs():
        if pair.claimed_hz > 0:
            inside = pair.claimed_hz * (1 - 1e-3)
            assert _victim_fails(LOUD, pair.victim, pair.other, inside), pair


def test_the_pair_rule_never_needs_less_than_claimed() -> None:
    """PairCheck (each neighbour within half the allowance) needs at least the claimed gap."""
    check = PairCheck(LOUD)
    unit = LOUD.block.raster_hz / FINE
    for pair in _loud_pairs():
        upper = math.ceil(pair.claimed_hz / unit) + 1
        found = check.gap_units(pair.victim, pair.other, upper, unit)
        assert found * unit >= pair.claimed_hz * (1 - 1e-9), pair


FIXED_WIDTHS = replace(
    LOUD, demands=tuple(replace(d, target_rate_bps=d.min_rate_bps * 1.05) for d in LOUD.demands)
)
"""The same links with targets 5 % above their minimum rates: each family spans few widths, so
the spacing it needs at its narrowest is still needed at its widest."""


@functools.cache
def _fixed_pairs() -> list[_Pair]:
    return _pairs(FIXED_WIDTHS, 120, np.random.default_rng(20_251_203))


def _spacing_hz(problem: Problem, pair: _Pair) -> float:
    """The spacing per half-width unit the bound counts above the victim, at its width."""
    rates = {d.id: least_symbol_rates(problem, d) for d in problem.demands}
    demand = next(d for d in problem.demands if d.id == pair.victim.demand_id)
    level = 10.0 ** (demand.relative_level_db / 10.0)
    quiet = envelopes(problem, rates)[demand.id]
    _, above = quiet_spacing(pair.family, demand, quiet, level)
    return above * pair.half * pair.family.raster_hz


def test_the_spacing_per_half_width_holds_at_every_width() -> None:
    """The spacing per half-width unit the bound counts (the least over every width the family
    can take), at the victim's own width, leaves a real neighbour just inside it failing the
    victim."""
    counted = [(p, _spacing_hz(FIXED_WIDTHS, p)) for p in _fixed_pairs()]
    counted = [(p, hz) for p, hz in counted if hz > 0]
    assert len(counted) >= 10  # premise: the instance has spacing to count
    for pair, spacing_hz in counted:
        assert _victim_fails(FIXED_WIDTHS, pair.victim, pair.other, spacing_hz * (1 - 1e-3)), pair


# ---------------------------------------------------------------- against the referee


@st.composite
def _demand(draw: st.DrawFn, index: int, width_hz: float) -> Demand:
    fixed = draw(st.booleans())
    minimum = draw(st.sampled_from((0.25, 0.4, 0.6))) * width_hz
    return Demand(
        id=f"d{index}",
        min_rate_bps=minimum,
        target_rate_bps=minimum * draw(st.sampled_from((1.5, 2.5, 4.0))),
        priority=draw(st.integers(1, 3)),
        esn0_db=draw(st.sampled_from((18.0, 22.0, 26.0))) if fixed else None,
        cn0_dbhz=None if fixed else draw(st.sampled_from((70.0, 74.0, 78.0))),
        margin_db=draw(st.sampled_from((1.0, 3.0))),
        modulations=draw(st.sampled_from((FEW_HIGH, HIGH_ORDER))),
        relative_level_db=draw(st.sampled_from((0.0, 0.0, 6.0, 12.0))),
    )


@st.composite
def instances(draw: st.DrawFn) -> Problem:
    """A 1–2 MHz block on a 25 or 50 kHz raster, 2–4 demands of high-order modulations at
    unequal levels, Rapp p = 2 at 4, 5 or 6 dB back-off or a linear transmitter."""
    width = draw(st.sampled_from((1e6, 2e6)))
    block = Block(400e6, 400e6 + width, raster_hz=draw(st.sampled_from((25e3, 50e3))))
    count = draw(st.integers(3, 4))
    backoff = draw(st.sampled_from((4.0, 5.0, 6.0, None)))
    transmitter = (
        Transmitter(filter_span_symbols=12, rolloffs=ROLLOFFS)
        if backoff is None
        else _rapp(backoff)
    )
    return Problem(
        block=block,
        demands=tuple(draw(_demand(i, width)) for i in range(count)),
        leakage_limit_db=draw(st.sampled_from((25.0, 30.0))),
        transmitter=transmitter,
        objective=Objective.MAX_THROUGHPUT,
        time_limit_s=2.0,
        num_workers=2,
    )


ROUNDED_TOP = Problem(
    block=Block(400e6, 402e6, raster_hz=50e3),
    demands=(
        Demand("d0", 300e3, 450e3, 2, esn0_db=18.0, margin_db=1.0, modulations=FEW_HIGH),
        Demand(
            "d1",
            500e3,
            750e3,
            2,
            esn0_db=26.0,
            margin_db=1.0,
            modulations=FEW_HIGH,
            relative_level_db=12.0,
        ),
        Demand("d2", 800e3, 1200e3, 3, esn0_db=26.0, margin_db=1.0, modulations=FEW_HIGH),
        Demand("d3", 500e3, 1250e3, 2, cn0_dbhz=74.0, margin_db=3.0, modulations=HIGH_ORDER),
    ),
    leakage_limit_db=30.0,
    transmitter=Transmitter(filter_span_symbols=12, rolloffs=ROLLOFFS),
    objective=Objective.MAX_THROUGHPUT,
    time_limit_s=2.0,
    num_workers=2,
)
"""Found by these properties: the referee serves all four at their targets (8.5 M weighted);
the relaxation said 8.352 M.  d3's 256QAM 3/5 closes its 3 dB margin up to 265.7 kBd (1.25 Mb/s,
its target), but on the fine grid the next step past 250 kBd (272.7 kBd) misses the margin, so
the family was counted only up to 1.176 Mb/s while it had pruned the families that reach the
target; the bound now counts each family up to the rate it really reaches."""


@dataclass(frozen=True)
class _Outcome:
    plan: Plan
    found: Refereed


@functools.lru_cache(maxsize=32)
def _outcome(problem: Problem) -> _Outcome:
    return _Outcome(solve(problem), referee(problem))


def _slack(problem: Problem) -> float:
    """0.1 % of Σ priority × target, as property 2 of test_referee.py allows (the planner's
    own rounding of throughput per half-width step stays well below it)."""
    return 1e-3 * sum(d.priority * d.target_rate_bps for d in problem.demands)


RUNS = settings(
    max_examples=40,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)


@RUNS
@seed(20_251_202)
@given(problem=instances())
@example(problem=ROUNDED_TOP)
def test_the_stated_bound_holds_for_the_referees_best(problem: Problem) -> None:
    """Property 5 on amplifier- and interference-limited instances."""
    out = _outcome(problem)
    served = [c.demand_id for c in out.plan.carriers]
    if not served or admission_key(problem, served) != out.found.best.admission:
        return
    assert out.plan.stats.best_bound >= out.found.best.value - _slack(problem), (
        f"bound {out.plan.stats.best_bound:.6g} below the referee's {out.found.best.value:.6g}"
    )


@RUNS
@seed(20_251_202)
@given(problem=instances())
@example(problem=ROUNDED_TOP)
def test_the_relaxation_holds_at_the_referees_admission(problem: Problem) -> None:
    """The relaxation, asked to serve at least the referee's admission weight, is never below
    the value of the referee's best plan (whatever the planner found)."""
    found = _outcome(problem).found
    families = {d.id: bound_candidates(problem, d) for d in problem.demands}
    segments = free_segments(problem, [])
    items = _items(problem, segments, families)
    lengths = [FINE * s.length for s in segments]
    weights = admission_weights(problem.demands)
    admitted = admission_value(problem, found.best.served)
    bound = throughput_bound(items, lengths, weights, admitted)
    assert bound >= found.best.value - _slack(problem), (
        f"relaxation {bound:.6g} below the referee's {found.best.value:.6g}"
    )
