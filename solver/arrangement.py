"""From the packing model's choice to carriers in place, spaced from the pair.

The model chooses each demand's family, half-width and segment, guarding a segment's carriers
for its most sensitive member.  This stage takes that choice as a start and makes it exact:

1. each segment becomes a :class:`~solver.spacing.Stretch`, carriers in ascending guard order
   (the model's order);
2. demands the model left out are fitted in where pair-exact gaps leave room, highest
   priority first (:func:`admit_rest`);
3. for ``max_throughput`` the half-widths are refitted so that every gap is what its pair
   needs and the room goes to the carriers below their targets (:meth:`Stretch.refit`).

:func:`greedy_stretches` builds the peer every plan must beat on admission: demands in priority
order, first fit at their narrowest, through the same pair spacing.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from solver.model import Carrier, Objective, Problem
from solver.packing import PackingInput, PackingResult, Segment
from solver.spacing import (
    BoundItem,
    Slot,
    Stretch,
    Wall,
    leakage_units,
    least_guard_per_half,
    pair_gap_raw,
    throughput_bound,
)
from solver.verify import PairCheck

__all__ = [
    "Arrangement",
    "admit_rest",
    "arrangement_bound",
    "from_model",
    "greedy_stretches",
    "to_carriers",
]

REFIT_SHARE_S = 0.5
"""Time (s) each stretch's refit may take at most; it usually proves optimal in milliseconds."""


@dataclass
class Arrangement:
    """Carriers per free segment, in order, with their half-widths."""

    stretches: list[Stretch]

    def owners(self) -> set[int]:
        return {slot.owner for st in self.stretches for slot in st.slots}

    def admission(self, data: PackingInput) -> int:
        return sum(data.admission_weights[d] for d in self.owners())

    def value(self) -> float:
        """Priority-weighted throughput (each demand capped at its target), bit/s."""
        return sum(
            slot.value_per_half * half
            for st in self.stretches
            for slot, half in zip(st.slots, st.halves, strict=True)
        )


def _slot(data: PackingInput, d: int, k: int) -> Slot:
    fam = data.options[d].candidates[k]
    demand = data.options[d].demand
    per_half = min(fam.throughput_per_half_bps, demand.target_rate_bps / fam.hi_half)
    return Slot(fam, fam.lo_half, fam.hi_half, data.priorities[d] * per_half, d)


def _choices(data: PackingInput, d: int) -> list[Slot]:
    """A demand's families as slots, the least spectrum at the narrowest first."""
    slots = [_slot(data, d, k) for k in range(len(data.options[d].candidates))]
    return sorted(slots, key=lambda s: 2 * s.lo_half + s.family.at(s.lo_half).guard_units)


def _empty(segments: Sequence[Segment]) -> list[Stretch]:
    return [Stretch(s.start, s.length, s.left_wall, s.right_wall) for s in segments]


def from_model(data: PackingInput, result: PackingResult) -> Arrangement:
    """The model's choice as stretches: carriers in ascending order of their guard at the
    segment's level (ties by demand id), half-widths as chosen."""
    stretches = _empty(data.segments)
    for s, picks in sorted(result.chosen.items()):
        level = data.level(result.segment_levels.get(s, 0))

        def order(pick: tuple[int, int, int], lv: float | None = level) -> tuple[int, str]:
            d, k, h = pick
            return data.options[d].candidates[k].at(h, lv).guard_units, data.options[d].demand.id

        for d, k, h in sorted(picks, key=order):
            stretches[s].slots.append(_slot(data, d, k))
            stretches[s].halves.append(h)
    return Arrangement(stretches)


def _by_priority(data: PackingInput, owners: set[int]) -> list[int]:
    left = [d for d in range(len(data.options)) if d not in owners and data.options[d].candidates]
    return sorted(left, key=lambda d: (-data.priorities[d], data.options[d].demand.id))


def admit_rest(data: PackingInput, arrangement: Arrangement) -> list[int]:
    """Fit every demand left out where the pair-exact gaps leave room, highest priority
    first, anywhere in a stretch's order (narrowing the others to their least if needed).
    Returns the demands admitted."""
    admitted = []
    for d in _by_priority(data, arrangement.owners()):
        choices = _choices(data, d)
        if any(st.insert(choices) for st in arrangement.stretches):
            admitted.append(d)
    return admitted


def greedy_stretches(data: PackingInput) -> Arrangement:
    """The admission peer: demands in priority order (ties by id), each at its narrowest
    family that still fits, first fit from the low end of the block."""
    arrangement = Arrangement(_empty(data.segments))
    for d in _by_priority(data, set()):
        choices = _choices(data, d)
        any(st.append(choices) for st in arrangement.stretches)
    return arrangement


def refit(arrangement: Arrangement, objective: Objective, seed: int) -> None:
    """Half-widths refitted to pair-exact gaps (``max_throughput`` only: the other objectives
    keep the model's widths, which pair spacing only makes easier to place)."""
    if objective is not Objective.MAX_THROUGHPUT:
        return
    for st in arrangement.stretches:
        if st.slots:
            st.refit(time_limit_s=REFIT_SHARE_S, seed=seed)


TIGHTEN_ROUNDS = 2
"""Measure-and-refit rounds of :func:`tighten`."""


def _measure(stretch: Stretch, check: PairCheck) -> None:
    """Each pair's gap as the verifier's rule needs it at the current half-widths, stored as a
    share of the spectral-mask gap (never more than all of it)."""
    for i in range(1, len(stretch.slots)):
        a, b = stretch.slots[i - 1], stretch.slots[i]
        ha, hb = stretch.halves[i - 1], stretch.halves[i]
        raw = pair_gap_raw(a.family, ha, b.family, hb)
        if raw <= 0 or a.family.key is None or b.family.key is None:
            continue
        leak = max(leakage_units(a.family, ha), leakage_units(b.family, hb))
        low = Carrier(a.family.at(ha).config, 0.0, 0.0, 0.0)
        high = Carrier(b.family.at(hb).config, 0.0, 0.0, 0.0)
        measured = check.gap_units(low, high, math.ceil(raw - 1e-9))
        stretch.scales[a.owner, b.owner] = min(1.0, max(math.ceil(leak - 1e-9), measured) / raw)


def tighten(problem: Problem, arrangement: Arrangement) -> None:
    """Gaps as the verifier needs them, not as the spectral mask bounds them: each pair's
    interference into the other's matched filter is measured (half of each one's allowance,
    :class:`~solver.verify.PairCheck`) and, for ``max_throughput``, the room it frees goes
    to the carriers below their targets; a refit that no longer fits at its own measured
    gaps is undone."""
    check = PairCheck(problem)
    for st in arrangement.stretches:
        if len(st.slots) < 2:
            continue
        _measure(st, check)
        if problem.objective is not Objective.MAX_THROUGHPUT:
            continue
        for _ in range(TIGHTEN_ROUNDS):
            before, scales = list(st.halves), dict(st.scales)
            st.refit(time_limit_s=REFIT_SHARE_S, seed=problem.seed)
            _measure(st, check)
            if not st.fits(st.halves):
                st.halves, st.scales = before, scales
                break
            if st.halves == before:
                break


def to_carriers(problem: Problem, arrangement: Arrangement) -> tuple[Carrier, ...]:
    """Carriers at their positions: packed low for ``min_bandwidth``, otherwise the slack of a
    stretch spread over its gaps (it lowers leakage and interference and costs nothing)."""
    raster = problem.block.raster_hz
    spread = problem.objective is not Objective.MIN_BANDWIDTH
    carriers: list[Carrier] = []
    for st in arrangement.stretches:
        for slot, half, low in zip(st.slots, st.halves, st.lows(spread=spread), strict=True):
            cand = slot.family.at(half)
            center = problem.block.start_hz + (low + half) * raster
            carriers.append(Carrier(cand.config, center, 0.0, 0.0))
    return tuple(carriers)


def _end_per_half(slot: Slot, wall: Wall, least_guard: float) -> float:
    """The least guard per half-width unit ``slot`` needs towards ``wall``: its edge guard
    towards an edge or exclusion, its least guard towards a fixed carrier."""
    return slot.family.edge_per_half if wall.family is None else least_guard


def arrangement_bound(data: PackingInput, admitted: int) -> float:
    """Upper bound on the priority-weighted throughput of any pair-spaced plan of these
    families that serves at least ``admitted`` admission weight (bit/s);
    ``-inf`` when none can."""
    families = [f for o in data.options for f in o.candidates]
    walls = [w.family for s in data.segments for w in (s.left_wall, s.right_wall) if w.family]
    least = min((f.sensitivity_db for f in [*families, *walls]), default=-math.inf)
    items = []
    for d, opts in enumerate(data.options):
        for k in range(len(opts.candidates)):
            slot = _slot(data, d, k)
            guard = least_guard_per_half(slot.family, least)
            for s, seg in enumerate(data.segments):
                if 2 * slot.lo_half <= seg.length:
                    end = min(
                        _end_per_half(slot, seg.left_wall, guard),
                        _end_per_half(slot, seg.right_wall, guard),
                    )
                    items.append(
                        BoundItem(
                            d,
                            s,
                            slot.lo_half,
                            slot.hi_half,
                            slot.value_per_half,
                            2.0 + guard,
                            end - guard / 2,
                        )
                    )
    lengths = [s.length for s in data.segments]
    return throughput_bound(items, lengths, list(data.admission_weights), admitted)
