"""From the packing model's choice to carriers in place, spaced from the pair.

The model chooses each demand's family, half-width and segment, guarding a segment's carriers
for its most sensitive member.  This stage takes that choice as a start and makes it exact:

1. each segment becomes a :class:`~solver.packing.spacing.Stretch`, carriers in ascending
   guard order
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
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Protocol

from solver.model import Carrier, Demand, Objective, Problem
from solver.packing import PackingInput, PackingResult, Segment
from solver.packing.families import Family
from solver.packing.spacing import (
    PairMeasure,
    Slot,
    Stretch,
    Wall,
    fill_grid,
    leakage_units,
    pair_gap_raw,
    regrid,
)

__all__ = [
    "FINE",
    "Arrangement",
    "PairGap",
    "admit_rest",
    "fine_slot",
    "from_carriers",
    "from_model",
    "greedy_stretches",
    "pair_measure",
    "slot_of",
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


FINE = 4
"""Grid steps per raster step for widths and gaps in this stage: a carrier's centre sits on the
raster, its width need not fill an even number of raster steps (a modem's symbol rate is set
far more finely than the channel raster)."""


def fine_slot(family: Family, demand: Demand, priority: int, owner: int = -1) -> Slot:
    """``family`` on the fine grid, each width filled by its symbol rate, from the width that
    carries the minimum rate to the one that carries the target
    (:func:`~solver.packing.spacing.fill_grid`), valued at ``priority`` × throughput capped at the
    target."""
    fam = fill_grid(family, FINE, demand.min_rate_bps, demand.target_rate_bps, demand.margin_db)
    per_half = min(fam.throughput_per_half_bps, demand.target_rate_bps / fam.hi_half)
    return Slot(fam, fam.lo_half, fam.hi_half, priority * per_half, owner)


def slot_of(data: PackingInput, d: int, k: int) -> Slot:
    """Demand ``d``'s ``k``-th configuration as a slot on the fine grid (:func:`fine_slot`)."""
    opts = data.options[d]
    return fine_slot(opts.candidates[k], opts.demand, data.priorities[d], d)


def _choices(data: PackingInput, d: int) -> list[Slot]:
    """A demand's families as slots, the least spectrum at the narrowest first."""
    slots = [slot_of(data, d, k) for k in range(len(data.options[d].candidates))]
    return sorted(slots, key=lambda s: 2 * s.lo_half + s.family.at(s.lo_half).guard_units)


def _fine_wall(wall: Wall) -> Wall:
    if wall.family is None:
        return wall
    return Wall(regrid(wall.family, FINE), wall.half * FINE)


def _empty(segments: Sequence[Segment]) -> list[Stretch]:
    return [
        Stretch(
            FINE * s.start,
            FINE * s.length,
            _fine_wall(s.left_wall),
            _fine_wall(s.right_wall),
            fine=FINE,
        )
        for s in segments
    ]


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
            slot = slot_of(data, d, k)
            stretches[s].slots.append(slot)
            stretches[s].halves.append(slot.clamp(h * FINE))
    for st in stretches:
        _settle(data, st)
    return Arrangement(stretches)


def _settle(data: PackingInput, stretch: Stretch) -> None:
    """Make the model's choice fit the fine grid: widths filled by their symbol rates and
    guards rounded finer can differ from the model's by a grid step; if the stretch overflows,
    its carriers go to their least widths, and the lowest priority leaves while it still does."""
    if stretch.fits(stretch.halves):
        return
    stretch.halves = [slot.lo_half for slot in stretch.slots]
    while stretch.slots and not stretch.fits(stretch.halves):
        worst = min(
            range(len(stretch.slots)),
            key=lambda i: (data.admission_weights[stretch.slots[i].owner], -i),
        )
        del stretch.slots[worst], stretch.halves[worst]


def from_carriers(
    problem: Problem,
    data: PackingInput,
    carriers: Sequence[Carrier],
    family_of: Callable[[Carrier], Family | None],
) -> Arrangement | None:
    """Placed carriers (of ``data``'s demands, each in a free segment) as stretches that can
    be refitted: each at the member of the nearest width of its family (one of its demand's
    families with its settings, else ``family_of(carrier)``) on the fine grid, each gap kept as
    it is (rounded down to the grid).  None when a carrier has no family or the result does
    not fit where the carriers are."""
    index = {o.demand.id: d for d, o in enumerate(data.options)}
    step = problem.block.raster_hz / FINE
    stretches = _empty(data.segments)
    upper: dict[int, float] = {}  # upper edge of each stretch's last carrier so far, Hz
    for c in sorted(carriers, key=lambda c: c.center_hz):
        d = index.get(c.demand_id)
        where = (c.center_hz - problem.block.start_hz) / step
        s = next(
            (i for i, st in enumerate(stretches) if st.start <= where < st.start + st.length),
            None,
        )
        if d is None or s is None:
            return None
        k = data.options[d].family_index(c.config)
        family = data.options[d].candidates[k] if k is not None else family_of(c)
        if family is None:
            return None
        slot = fine_slot(family, data.options[d].demand, data.priorities[d], d)
        st = stretches[s]
        half = slot.clamp(round(c.config.allocated_bandwidth_hz / 2 / step))
        if st.slots:
            prev = st.slots[-1]
            gap = math.floor((c.lower_edge_hz - upper[s]) / step + 1e-9)
            raw = pair_gap_raw(prev.family, st.halves[-1], slot.family, half)
            if raw > 0:
                st.scales[prev.owner, slot.owner] = min(1.0, max(gap, 0) / raw)
        st.slots.append(slot)
        st.halves.append(half)
        upper[s] = c.upper_edge_hz
    arrangement = Arrangement(stretches)
    return arrangement if all(st.fits(st.halves) for st in stretches) else None


def _by_priority(data: PackingInput, owners: set[int]) -> list[int]:
    left = [d for d in range(len(data.options)) if d not in owners and data.options[d].candidates]
    return sorted(left, key=lambda d: (-data.priorities[d], data.options[d].demand.id))


def admit_rest(
    data: PackingInput, arrangement: Arrangement, deadline: float = math.inf
) -> list[int]:
    """Fit every demand left out where the pair-exact gaps leave room, highest priority
    first, anywhere in a stretch's order (narrowing the others to their least if needed),
    until ``deadline`` (``time.perf_counter()``).  Returns the demands admitted."""
    admitted = []
    for d in _by_priority(data, arrangement.owners()):
        if time.perf_counter() > deadline:
            break
        choices = _choices(data, d)
        if any(st.insert(choices) for st in arrangement.stretches):
            admitted.append(d)
    return admitted


def greedy_stretches(
    data: PackingInput, measure: PairMeasure | None = None, deadline: float = math.inf
) -> Arrangement:
    """The admission peer: demands in priority order (ties by id), each at its narrowest
    family that still fits, first fit from the low end of the block; with ``measure``
    (:func:`pair_measure`), at the gap the pair really needs where the mask gap is too wide;
    those not reached by ``deadline`` (``time.perf_counter()``) are left out."""
    arrangement = Arrangement(_empty(data.segments))
    for d in _by_priority(data, set()):
        if time.perf_counter() > deadline:
            break
        choices = _choices(data, d)
        any(st.append(choices, measure) for st in arrangement.stretches)
    return arrangement


class PairGap(Protocol):
    """The verifier's interference rule for two neighbours alone
    (:class:`solver.verify.PairCheck`): the least gap at which both pass."""

    def gap_units(
        self, low: Carrier, high: Carrier, upper_units: int, unit_hz: float | None = None
    ) -> int: ...


def pair_measure(check: PairGap) -> PairMeasure:
    """``check`` as the share of the spectral-mask gap a pair needs (never below either
    leakage guard); remembered per pair of configurations."""
    seen: dict[tuple[Family, int, Family, int], float] = {}

    def measure(a: Slot, ha: int, b: Slot, hb: int) -> float:
        key = (a.family, ha, b.family, hb)
        if key not in seen:
            seen[key] = _pair_scale(check, a.family, ha, b.family, hb)
        return seen[key]

    return measure


def _pair_scale(check: PairGap, a: Family, ha: int, b: Family, hb: int) -> float:
    raw = pair_gap_raw(a, ha, b, hb)
    if raw <= 0 or a.key is None or b.key is None:
        return 1.0
    leak = max(leakage_units(a, ha), leakage_units(b, hb))
    low = Carrier(a.at(ha).config, 0.0, 0.0, 0.0)
    high = Carrier(b.at(hb).config, 0.0, 0.0, 0.0)
    measured = check.gap_units(low, high, math.ceil(raw - 1e-9), a.raster_hz)
    return min(1.0, max(math.ceil(leak - 1e-9), measured) / raw)


def refit(
    arrangement: Arrangement, objective: Objective, seed: int, deadline: float = math.inf
) -> None:
    """Half-widths refitted to pair-exact gaps (``max_throughput`` only: the other objectives
    keep the model's widths, which pair spacing only makes easier to place); stretches not
    reached by ``deadline`` (``time.perf_counter()``) keep theirs."""
    if objective is Objective.MIN_BANDWIDTH:
        for st in arrangement.stretches:
            st.halves = [slot.lo_half for slot in st.slots]
    if objective is not Objective.MAX_THROUGHPUT:
        return
    for st in arrangement.stretches:
        if st.slots and time.perf_counter() < deadline:
            st.refit(time_limit_s=_refit_s(deadline), seed=seed)


def _refit_s(deadline: float) -> float:
    """A stretch's refit time: :data:`REFIT_SHARE_S`, or what is left before ``deadline``."""
    return max(0.05, min(REFIT_SHARE_S, deadline - time.perf_counter()))


TIGHTEN_ROUNDS = 2
"""Measure-and-refit rounds of :func:`tighten`."""


def _measure(stretch: Stretch, check: PairGap, deadline: float = math.inf) -> bool:
    """Each pair's gap as the verifier's rule needs it at the current half-widths, stored as a
    share of the spectral-mask gap (never more than all of it).  Pairs not reached by
    ``deadline`` keep the share they have; returns whether every pair was measured."""
    for i in range(1, len(stretch.slots)):
        if time.perf_counter() > deadline:
            return False
        a, b = stretch.slots[i - 1], stretch.slots[i]
        ha, hb = stretch.halves[i - 1], stretch.halves[i]
        if pair_gap_raw(a.family, ha, b.family, hb) > 0:
            scale = _pair_scale(check, a.family, ha, b.family, hb)
            stretch.scales[a.owner, b.owner] = scale
    return True


def tighten(
    problem: Problem, arrangement: Arrangement, check: PairGap, deadline: float = math.inf
) -> None:
    """Gaps as the verifier needs them, not as the spectral mask bounds them: each pair's
    interference into the other's matched filter is measured (half of each one's allowance,
    :class:`~solver.verify.PairCheck`) and, for ``max_throughput``, the room it frees goes
    to the carriers below their targets; a step that no longer fits at its own measured
    gaps is undone.  Stretches not reached by ``deadline`` keep the gaps they have."""
    for st in arrangement.stretches:
        if len(st.slots) < 2 or time.perf_counter() > deadline:
            continue
        kept = list(st.halves), dict(st.scales)
        _measure(st, check, deadline)
        if not st.fits(st.halves):
            st.halves, st.scales = list(kept[0]), dict(kept[1])
            continue
        if problem.objective is not Objective.MAX_THROUGHPUT:
            continue
        for _ in range(TIGHTEN_ROUNDS):
            if time.perf_counter() > deadline:
                break
            kept = list(st.halves), dict(st.scales)
            st.refit(time_limit_s=_refit_s(deadline), seed=problem.seed)
            # a share measured at other half-widths may not hold at these: all or none
            if not _measure(st, check, deadline) or not st.fits(st.halves):
                st.halves, st.scales = list(kept[0]), dict(kept[1])
                break
            if st.halves == kept[0]:
                break


def to_carriers(
    problem: Problem, arrangement: Arrangement, *, spread: bool | None = None
) -> tuple[Carrier, ...]:
    """Carriers at their positions: packed low for ``min_bandwidth``, and where a carrier
    could still grow (the room left is what growing it would not pass verification in: kept
    whole at the top, free for later); otherwise the slack of a stretch is spread over its
    gaps (it lowers leakage and interference and costs nothing).  ``spread`` overrides the
    choice."""
    step = problem.block.raster_hz / FINE
    carriers: list[Carrier] = []
    for st in arrangement.stretches:
        spreads = spread
        if spread is None:
            full = all(h >= slot.hi_half for slot, h in zip(st.slots, st.halves, strict=True))
            spreads = problem.objective is not Objective.MIN_BANDWIDTH and full
        centres = st.centres(spread=bool(spreads))
        for slot, half, centre in zip(st.slots, st.halves, centres, strict=True):
            cand = slot.family.at(half)
            carriers.append(Carrier(cand.config, problem.block.start_hz + centre * step, 0.0, 0.0))
    return tuple(carriers)
