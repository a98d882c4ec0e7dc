"""Invented blocks for the packing benchmark, each built from a documented seed.

Every scenario is a :class:`solver.Problem` made with ``numpy.random.default_rng(seed)``; the
same name and seed give the same problem on any machine.  None describes a real network.

Shared settings (as in the 12/50/200 rows): filter span 12 symbols, no window, roll-offs
0.05–0.35, leakage limit 30 dB, edge limit 35 dB, coded thresholds for n = 16 200 bits at
BLER 1e-5 plus 1 dB implementation loss, 2 % framing overhead, 2 CP-SAT workers, solver seed 1.
Links: 60 % power-limited (C/N0 = 10·log10(minimum rate) + 8…24 dB), the rest fixed
(Es/N0 8…26 dB); margins 1…4 dB; targets 2…4 × the minimum rate.

Blocks are sized by the *minimum-rate need*: for each demand, the narrowest footprint
(allocated width Rs(1 + α) plus its guard) over every catalogue entry and roll-off at the
symbol rate that just carries its minimum rate and still closes its link with its margin
(:func:`solver.candidates.candidate_for`, the candidates' own guard rule); summed over the
demands and divided by the usable width (block less exclusions).  The guard rule belongs to
the solver and changes with it, so each scenario's block width at its documented seed is
pinned (``PINNED_WIDTH_HZ``, sized with the solver of commit 9409d7f): the same name and seed
give the same problem whatever solver is measured, and the benchmark reports the need that
solver sees.  Another seed is sized afresh with the solver at hand.

=============  ====  ==========================================================================
name           seed  what
=============  ====  ==========================================================================
base           7     the 12-demand row of ``packing.py`` (priorities 1–3, one exclusion)
oversub-1.5    11    30 demands, minimum 0.25–4 Mb/s log-uniform, priorities 1–8, one
                     exclusion; minimum-rate need 1.5 × the usable block
oversub-3      12    the same recipe with need 3 ×
amplifier-4    13    12 demands, minimum 0.5–3 Mb/s log-uniform, priorities 1–8, one exclusion,
                     Rapp p = 2 at 4 dB output back-off; block sized for a need of 1.0 × with a
                     linear transmitter
amplifier-5    13    the same demands and block at 5 dB back-off
amplifier-6    13    the same demands and block at 6 dB back-off
fragmented     14    16 demands, minimum 10 kb/s–20 Mb/s log-uniform, priorities 1–8, three
                     exclusions (2 % of the block each) cutting four free stretches of random
                     sizes (Dirichlet(1, 1, 1, 1)); raster 1 kHz; need 0.9 ×
=============  ====  ==========================================================================
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from solver import (
    Amplifier,
    AmplifierModel,
    Block,
    Coding,
    Demand,
    Exclusion,
    Objective,
    Problem,
    Transmitter,
)

try:
    from solver import EquipmentProfile
except ImportError:  # a checkout from before equipment profiles (bench/packing.py --before)
    EquipmentProfile = None  # type: ignore[assignment,misc]

# The footprint pass uses the candidates' own configuration check and the MODCOD catalogue,
# nothing of the packing model (the same two names the hand method uses).
from solver.candidates import Candidate, candidate_for

try:
    from solver import catalogue
except ImportError:  # a checkout from before solver.physics, run by bench/packing.py --before
    from solver.modcod import catalogue  # type: ignore[no-redef]

WIDTH_PER_DEMAND_HZ = 1.6e6
BLOCK_START_HZ = 7_125e6
ROLLOFFS = (0.05, 0.1, 0.15, 0.2, 0.25, 0.35)


def _transmitter(amplifier: Amplifier | None = None) -> Transmitter:
    return Transmitter(filter_span_symbols=12, rolloffs=ROLLOFFS, amplifier=amplifier)


def scenario(
    count: int,
    seed: int = 7,
    objective: Objective = Objective.MAX_THROUGHPUT,
    width_per_demand_hz: float = WIDTH_PER_DEMAND_HZ,
    implementation_loss_db: float = 1.0,
    target_factor: tuple[float, float] = (2.0, 4.0),
) -> Problem:
    """An invented block of ``count`` demands, oversubscribed at the targets (the 12/50/200
    rows of ``packing.py`` and every run of ``calibration.py``)."""
    rng = np.random.default_rng(seed)
    width = width_per_demand_hz * count
    start = BLOCK_START_HZ
    raster = 10e3 if count <= 50 else 25e3
    mid = start + width * rng.uniform(0.3, 0.7)
    exclusion = Exclusion(mid, mid + 0.03 * width, "protected fixed link")
    demands = []
    for i in range(count):
        minimum = float(rng.uniform(0.5e6, 3e6))
        power_limited = rng.random() < 0.6
        demands.append(
            Demand(
                id=f"link-{i:03d}",
                min_rate_bps=minimum,
                target_rate_bps=minimum * float(rng.uniform(*target_factor)),
                priority=int(rng.integers(1, 4)),
                cn0_dbhz=float(rng.uniform(72, 86)) if power_limited else None,
                esn0_db=None if power_limited else float(rng.uniform(8, 26)),
                margin_db=float(rng.uniform(1, 4)),
            )
        )
    return Problem(
        block=Block(start, start + width, raster, (exclusion,), edge_leakage_limit_db=35.0),
        demands=tuple(demands),
        name=f"bench-{count}",
        leakage_limit_db=30.0,
        transmitter=_transmitter(),
        coding=Coding(16200, 1e-5, implementation_loss_db, 0.02),
        objective=objective,
        time_limit_s={12: 5.0, 50: 5.0, 200: 20.0}.get(count, 10.0),
        num_workers=2,
        seed=1,
    )


# ---------------------------------------------------------------- minimum-rate footprints


def min_rate_configurations(problem: Problem, demand: Demand) -> list[Candidate]:
    """Every catalogue entry × roll-off at the symbol rate that just carries the minimum rate,
    where the link still closes with the demand's margin; narrowest footprint first.

    The footprint is the allocated width Rs(1 + α) plus the guard the configuration needs
    towards a neighbour (``CarrierConfig.guard_hz``); ties go to the narrower allocation.
    """
    overhead = problem.coding.framing_overhead
    found: list[Candidate] = []
    for entry in catalogue(problem.coding, demand.modulations or None):
        if not math.isfinite(entry.required_esn0_db):
            continue
        symbol_rate = demand.min_rate_bps / (entry.spectral_efficiency_bps_per_hz * (1 - overhead))
        for rolloff in problem.transmitter.rolloffs:
            cand = candidate_for(
                problem, demand, entry.modulation, entry.code_rate, rolloff, symbol_rate
            )
            if cand is not None:
                found.append(cand)
    return sorted(found, key=lambda c: (footprint_hz(c), c.config.allocated_bandwidth_hz))


def footprint_hz(cand: Candidate) -> float:
    """Allocated width plus the guard towards a neighbour, Hz."""
    return cand.config.allocated_bandwidth_hz + cand.config.guard_hz


def min_rate_need_hz(problem: Problem) -> float:
    """Σ over demands of the narrowest minimum-rate footprint (demands that close no link
    count nothing), Hz."""
    total = 0.0
    for demand in problem.demands:
        configs = min_rate_configurations(problem, demand)
        if configs:
            total += footprint_hz(configs[0])
    return total


# ---------------------------------------------------------------- generated scenarios


@dataclass(frozen=True)
class Recipe:
    """How a generated scenario draws its demands and cuts its block."""

    count: int
    rate_bps: tuple[float, float]  # minimum rate, drawn log-uniform
    need: float  # minimum-rate need / usable width
    exclusions: int
    exclusion_share: float  # width of each exclusion / block width
    raster_hz: float
    time_limit_s: float
    amplifier: Amplifier | None = None
    size_linear: bool = False  # size the block as if the transmitter were linear


def _demands(rng: np.random.Generator, recipe: Recipe) -> tuple[Demand, ...]:
    low, high = np.log(recipe.rate_bps[0]), np.log(recipe.rate_bps[1])
    demands = []
    for i in range(recipe.count):
        minimum = float(np.exp(rng.uniform(low, high)))
        power_limited = rng.random() < 0.6
        headroom_db = float(rng.uniform(8, 24))
        demands.append(
            Demand(
                id=f"d-{i:02d}",
                min_rate_bps=round(minimum),
                target_rate_bps=round(minimum * float(rng.uniform(2.0, 4.0))),
                priority=int(rng.integers(1, 9)),
                cn0_dbhz=10 * math.log10(minimum) + headroom_db if power_limited else None,
                esn0_db=None if power_limited else float(rng.uniform(8, 26)),
                margin_db=float(rng.uniform(1, 4)),
            )
        )
    return tuple(demands)


def _exclusions(rng: np.random.Generator, recipe: Recipe, width_hz: float) -> tuple[Exclusion, ...]:
    """``recipe.exclusions`` equal exclusions splitting the rest into stretches of random
    sizes (Dirichlet(1, …, 1)), each edge on the raster."""
    if recipe.exclusions == 0:
        return ()
    raster = recipe.raster_hz
    each = recipe.exclusion_share * width_hz
    free = width_hz - recipe.exclusions * each
    shares = rng.dirichlet(np.ones(recipe.exclusions + 1))
    out, cursor = [], BLOCK_START_HZ
    for k in range(recipe.exclusions):
        cursor += free * float(shares[k])
        lo = BLOCK_START_HZ + round((cursor - BLOCK_START_HZ) / raster) * raster
        hi = lo + round(each / raster) * raster
        out.append(Exclusion(lo, hi, f"protected service {k + 1}"))
        cursor += each
    return tuple(out)


def generated(name: str, seed: int, recipe: Recipe, width_hz: float | None = None) -> Problem:
    """Draw the demands, size the block to ``recipe.need`` (or take ``width_hz``) and cut its
    exclusions."""
    rng = np.random.default_rng(seed)
    demands = _demands(rng, recipe)
    sizing_tx = _transmitter(None if recipe.size_linear else recipe.amplifier)
    draft = Problem(
        block=Block(BLOCK_START_HZ, BLOCK_START_HZ + 1e9, recipe.raster_hz),
        demands=demands,
        name=name,
        leakage_limit_db=30.0,
        transmitter=sizing_tx,
        coding=Coding(16200, 1e-5, 1.0, 0.02),
        time_limit_s=recipe.time_limit_s,
        num_workers=2,
        seed=1,
    )
    if width_hz is None:
        usable = min_rate_need_hz(draft) / recipe.need
        width = usable / (1 - recipe.exclusions * recipe.exclusion_share)
        width = math.ceil(width / recipe.raster_hz) * recipe.raster_hz
    else:
        width = width_hz
    block = Block(
        BLOCK_START_HZ,
        BLOCK_START_HZ + width,
        recipe.raster_hz,
        _exclusions(rng, recipe, width),
        edge_leakage_limit_db=35.0,
    )
    return replace(draft, block=block, transmitter=_transmitter(recipe.amplifier))


def _rapp(backoff_db: float) -> Amplifier:
    return Amplifier(AmplifierModel.RAPP, 2.0, backoff_db)


OVERSUB = Recipe(30, (0.25e6, 4e6), 1.5, 1, 0.03, 10e3, 10.0)
AMPLIFIER = Recipe(12, (0.5e6, 3e6), 1.0, 1, 0.03, 10e3, 10.0, size_linear=True)
FRAGMENTED = Recipe(16, (10e3, 20e6), 0.9, 3, 0.02, 1e3, 10.0)


# ---------------------------------------------------------------- back-off as a decision

BACKOFFS_DB = (2.0, 4.0, 6.0, 8.0)
"""The output back-offs each carrier of the back-off scenario chooses from (dB)."""

REFERENCE_BACKOFF_DB = 6.0
"""The back-off at which the back-off scenario's demands state their C/N0 or Es/N0."""


def with_backoffs(problem: Problem, backoffs_db: tuple[float, ...]) -> Problem:
    """``problem`` with every demand on one amplifier profile (Rapp p = 2, its in-band
    distortion counted) that may run at each of ``backoffs_db``; links stated at
    :data:`REFERENCE_BACKOFF_DB`."""
    profile = EquipmentProfile(
        "shared-pa",
        rolloffs=ROLLOFFS,
        filter_span_symbols=12,
        amplifier=_rapp(REFERENCE_BACKOFF_DB),
        output_backoffs_db=backoffs_db,
        reference_backoff_db=REFERENCE_BACKOFF_DB,
        implementation_loss_db=problem.coding.implementation_loss_db,
    )
    demands = tuple(replace(d, profile=profile.name) for d in problem.demands)
    return replace(problem, demands=demands, profiles=(profile,))


def backoff_scenario(seed: int) -> Problem:
    """Twelve demands (the amplifier recipe) whose carriers each pick a back-off from
    :data:`BACKOFFS_DB`; the block is sized on a linear transmitter, as for ``amplifier-*``."""
    base = generated("amplifier-choice", seed, replace(AMPLIFIER, amplifier=_rapp(6.0)))
    return with_backoffs(base, BACKOFFS_DB)


PINNED_WIDTH_HZ = {
    "oversub-1.5": 4_200_000.0,
    "oversub-3": 2_840_000.0,
    "amplifier-4": 2_860_000.0,
    "amplifier-5": 2_860_000.0,
    "amplifier-6": 2_860_000.0,
    "fragmented": 11_626_000.0,
}
"""Block width of each generated scenario at its documented seed (sized at commit 9409d7f)."""


@dataclass(frozen=True)
class Scenario:
    """A named scenario: its seed and how to build it from a seed."""

    name: str
    seed: int
    build: Callable[[int], Problem]


def _registry() -> dict[str, Scenario]:
    def recipe(name: str, seed: int, r: Recipe) -> Scenario:
        def build(s: int) -> Problem:
            return generated(name, s, r, PINNED_WIDTH_HZ[name] if s == seed else None)

        return Scenario(name, seed, build)

    out = [
        Scenario("base", 7, lambda s: replace(scenario(12, seed=s), name="base")),
        recipe("oversub-1.5", 11, OVERSUB),
        recipe("oversub-3", 12, replace(OVERSUB, need=3.0)),
        *(
            recipe(f"amplifier-{b}", 13, replace(AMPLIFIER, amplifier=_rapp(float(b))))
            for b in (4, 5, 6)
        ),
        recipe("fragmented", 14, FRAGMENTED),
    ]
    if EquipmentProfile is not None:
        out.append(Scenario("amplifier-choice", 15, backoff_scenario))
    return {s.name: s for s in out}


SCENARIOS = _registry()
GROUPS = {
    "amplifier": ["amplifier-4", "amplifier-5", "amplifier-6"],
    "all": list(SCENARIOS),
}


def expand(names: list[str]) -> list[str]:
    """Scenario names with the group names (``amplifier``, ``all``) spelled out, in order."""
    out: list[str] = []
    for name in names:
        for n in GROUPS.get(name, [name]):
            if n not in SCENARIOS:
                known = ", ".join([*SCENARIOS, *GROUPS])
                raise ValueError(f"scenario {n!r} is not one of: {known}")
            if n not in out:
                out.append(n)
    return out
