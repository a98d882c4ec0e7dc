"""The throughput bound on instances where the verifier's interference rule binds.

On amplifier-limited and interference-limited instances (Rapp p = 2 at 4–6 dB back-off; fixed
high-Es/N0 links with high-order modulations, tight margins and unequal levels), the bound a
plan states is never below the exhaustive referee's best plan of the same admission (property
5 of ``test_referee.py`` on these instances), and the relaxation at the referee's own
admission is never below the referee's value.
"""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, example, given, seed, settings
from hypothesis import strategies as st
from referee import admission_key, admission_value
from refereed import outcome

from solver import (
    Amplifier,
    AmplifierModel,
    Block,
    Demand,
    Modulation,
    Objective,
    Problem,
    Transmitter,
)
from solver.candidates import bound_candidates
from solver.geometry import free_segments
from solver.judge import _items
from solver.packing import admission_weights
from solver.packing.arrangement import FINE
from solver.packing.spacing import throughput_bound

pytestmark = pytest.mark.slow

ROLLOFFS = (0.1, 0.25)
HIGH_ORDER = (Modulation.QAM64, Modulation.QAM256)
FEW_HIGH = (Modulation.QPSK, Modulation.QAM64)


def _rapp(backoff_db: float) -> Transmitter:
    amplifier = Amplifier(AmplifierModel.RAPP, 2.0, backoff_db)
    return Transmitter(filter_span_symbols=12, rolloffs=ROLLOFFS, amplifier=amplifier)


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
    out = outcome(problem)
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
    found = outcome(problem).found
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
