"""Pruning the bound's families never lowers the throughput bound.

``bound_candidates`` drops a configuration family when another carries at least as much per
hertz over a range reaching at least as high and needs no more edge or leakage guard per bit.
Any plan using a dropped family can then use the one that beat it instead, in no more spectrum
by every count the relaxation makes, so the relaxation over the kept families must reach what
it reaches over every link-closing family (``every_family``) at each admission weight.  The
instances are random single- and two-demand problems (linear and Rapp p = 2 transmitters,
C/N0- and Es/N0-limited demands, rasters from 1 kHz to 50 kHz).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

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
from solver.candidates import bound_candidates, every_family
from solver.geometry import free_segments
from solver.judge import _items
from solver.packing import admission_weights
from solver.packing.arrangement import FINE
from solver.packing.families import Family
from solver.packing.spacing import throughput_bound

Families = Callable[[Problem, Demand], Sequence[Family]]

MODULATIONS = (
    (Modulation.QPSK, Modulation.QAM64),
    (Modulation.QAM64, Modulation.QAM256),
    (Modulation.QPSK,),
    (),
)
ROLLOFFS = ((0.05, 0.1, 0.2, 0.35), (0.1, 0.25), (0.2, 0.35))


def _transmitter(rolloffs: tuple[float, ...], backoff_db: float | None) -> Transmitter:
    amplifier = None if backoff_db is None else Amplifier(AmplifierModel.RAPP, 2.0, backoff_db)
    return Transmitter(filter_span_symbols=12, rolloffs=rolloffs, amplifier=amplifier)


def _problem(
    width_hz: float,
    raster_hz: float,
    demands: tuple[Demand, ...],
    leakage_db: float,
    transmitter: Transmitter,
) -> Problem:
    return Problem(
        block=Block(400e6, 400e6 + width_hz, raster_hz=raster_hz),
        demands=demands,
        leakage_limit_db=leakage_db,
        transmitter=transmitter,
        objective=Objective.MAX_THROUGHPUT,
        time_limit_s=2.0,
        num_workers=1,
    )


@st.composite
def _demand(draw: st.DrawFn, index: int, width_hz: float) -> Demand:
    fixed = draw(st.booleans())
    minimum = draw(st.floats(0.05, 0.6)) * width_hz
    return Demand(
        id=f"d{index}",
        min_rate_bps=minimum,
        target_rate_bps=minimum * draw(st.sampled_from((1.0, 1.3, 2.0, 4.0, 20.0))),
        priority=draw(st.integers(1, 3)),
        esn0_db=draw(st.floats(2.0, 28.0)) if fixed else None,
        cn0_dbhz=None if fixed else draw(st.floats(55.0, 80.0)),
        margin_db=draw(st.sampled_from((0.5, 1.0, 3.0))),
        modulations=draw(st.sampled_from(MODULATIONS)),
        relative_level_db=draw(st.sampled_from((0.0, 6.0))),
    )


@st.composite
def instances(draw: st.DrawFn) -> Problem:
    """One or two demands in a 0.5–5 MHz block on a 1–50 kHz raster."""
    width = draw(st.sampled_from((0.5e6, 1e6, 2e6, 5e6)))
    count = draw(st.integers(1, 2))
    transmitter = _transmitter(
        draw(st.sampled_from(ROLLOFFS)), draw(st.sampled_from((None, 3.0, 5.0)))
    )
    return _problem(
        width,
        draw(st.sampled_from((1e3, 5e3, 12.5e3, 25e3, 50e3))),
        tuple(draw(_demand(i, width)) for i in range(count)),
        draw(st.sampled_from((25.0, 30.0, 33.3))),
        transmitter,
    )


RAPP_5DB = _transmitter((0.2, 0.35), 5.0)

ROUNDED_TIE = _problem(
    0.5e6,
    12.5e3,
    (
        Demand(
            "d0",
            280e3,
            1120e3,
            2,
            esn0_db=2.5,
            margin_db=0.5,
            modulations=MODULATIONS[0],
            relative_level_db=6.0,
        ),
        Demand("d1", 245.8e3, 245.8e3, 2, cn0_dbhz=63.2, margin_db=3.0, modulations=MODULATIONS[2]),
    ),
    30.0,
    RAPP_5DB,
)
"""Found by this property: d1's QPSK 9/10 (1.470 bit/s/Hz) and QPSK 8/9 (1.452 bit/s/Hz), both
at α = 0.2, carry its target in the same even raster slot, so they looked equally efficient per
raster-rounded width and 9/10 was dropped; the relaxation over the kept families said 1.0225 M
weighted, over every family 1.0327 M."""

CAPPED_AT_TARGET = _problem(
    0.5e6,
    25e3,
    (
        Demand("d0", 66.64e3, 66.64e3, 1, cn0_dbhz=63.0, margin_db=3.0, relative_level_db=6.0),
        Demand("d1", 147.15e3, 2943e3, 3, cn0_dbhz=69.92, margin_db=0.5),
    ),
    33.3,
    RAPP_5DB,
)
"""Found by this property: the relaxation valued each family per half-width unit at its target
over the fine grid's rounded-up top, so a carrier of d0 at its exact width counted as carrying
less than its target, by a share that depends on how each family's top rounds; dropping one
family then lowered the relaxation (4.4056 M weighted kept, 4.4111 M over every family)."""

GUARD_ON_GRID = _problem(
    0.5e6,
    25e3,
    (Demand("d0", 186.35e3, 3727e3, 2, cn0_dbhz=67.85, margin_db=1.0, modulations=MODULATIONS[1]),),
    33.3,
    _transmitter((0.2, 0.35), 3.0),
)
"""Found by this property: a family whose fine-grid top was rounded up counted its guards per
rounded half-width unit, less than its carriers keep; 256QAM 4/5 at α = 0.35 then looked
better to the relaxation than the α = 0.2 family that beats it on every exact count (1.9546 M
weighted kept, 1.9589 M over every family)."""


def _bound(problem: Problem, families: Families, admitted: int) -> float:
    chosen = {d.id: families(problem, d) for d in problem.demands}
    segments = free_segments(problem, [])
    items = _items(problem, segments, chosen)
    lengths = [FINE * s.length for s in segments]
    return throughput_bound(items, lengths, admission_weights(problem.demands), admitted)


@settings(
    max_examples=250,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
@given(problem=instances())
@example(problem=ROUNDED_TIE)
@example(problem=CAPPED_AT_TARGET)
@example(problem=GUARD_ON_GRID)
def test_pruned_families_bound_as_high_as_every_family(problem: Problem) -> None:
    """At every admission weight one demand or all of them give, the relaxation over
    ``bound_candidates`` is at least the relaxation over ``every_family`` (1e-9 relative)."""
    weights = admission_weights(problem.demands)
    for admitted in sorted({0, sum(weights), *weights}):
        full = _bound(problem, every_family, admitted)
        if full == -math.inf:
            continue
        pruned = _bound(problem, bound_candidates, admitted)
        assert pruned >= full - 1e-9 * max(abs(full), 1.0), (
            f"admission {admitted}: kept families bound {pruned:.9g}, every family {full:.9g}"
        )
