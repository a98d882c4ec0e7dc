"""Gaps closed as far as verification allows, and the room given to carriers below target.

The pair rule spaces two neighbours so that each keeps its interference into the other within
half the other's allowance (:class:`solver.verify.PairCheck`): safe whatever lies on the
victim's other side, but wider than verification needs where that side is quiet.  Here, in
each stretch from the low end, the gap between each pair of neighbours is brought down to the
least that the whole plan still passes verification at (to the fine grid), with every carrier
above it packed down behind; for ``max_throughput`` the widths are then refitted into the room
that frees, and kept only if verification still passes, and what room is still left goes to
the carriers below target one at a time (:func:`_fill`).  Each step is checked by
:func:`~solver.verify.verify_plan` on the whole plan, so it runs only while the request's time
allows and for plans of at most :data:`SQUEEZE_LIMIT` carriers.

Then, for plans of any size, :func:`rechoose` gives the room a stretch still has to the carriers
below target, each taking the width or configuration of its demand that carries most there;
the planner verifies the plan once and undoes every such change if it fails.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence

from solver.model import Carrier, Objective, Problem
from solver.packing.arrangement import REFIT_SHARE_S, Arrangement, slot_of, to_carriers
from solver.packing.items import PackingInput
from solver.packing.spacing import Slot, Stretch, pair_gap_raw, pair_gap_units, stretch_need
from solver.verify import verify_plan

__all__ = ["SQUEEZE_LIMIT", "Rechoice", "rechoose", "squeeze", "undo_rechoices"]

SQUEEZE_LIMIT = 40
"""Plans with more carriers than this keep the pair rule's gaps (each step verifies the whole
plan)."""


def squeeze(
    problem: Problem, arrangement: Arrangement, fixed: Sequence[Carrier], deadline: float
) -> None:
    """Close the gaps of ``arrangement`` (beside the ``fixed`` carriers) as far as
    verification allows, then (``max_throughput``) refit the widths into the room."""
    if problem.objective is Objective.MAX_MARGIN:
        return
    count = sum(len(st.slots) for st in arrangement.stretches) + len(fixed)
    if count > SQUEEZE_LIMIT:
        return

    def passes() -> bool:
        if not all(st.fits(st.halves) for st in arrangement.stretches):
            return False
        placed = to_carriers(problem, arrangement, spread=False)
        return verify_plan(problem, [*fixed, *placed]).passed

    if not passes():
        return
    for st in arrangement.stretches:
        for i in range(1, len(st.slots)):
            if time.perf_counter() > deadline:
                return
            _close(st, i, passes, widest=False)
    if problem.objective is not Objective.MAX_THROUGHPUT:
        return
    for _ in range(WIDEN_ROUNDS):
        for st in arrangement.stretches:
            if st.slots and time.perf_counter() < deadline:
                _widen(problem, st, passes, deadline)
    for st in arrangement.stretches:
        _fill(st, passes, deadline)


WIDEN_ROUNDS = 2
"""Refit-and-respace rounds of :func:`squeeze` for ``max_throughput``."""


WIDEN_STEPS = (1.0, 0.5, 0.25, 0.125)
"""Shares of the refit's widening tried in turn, largest first."""


def _widen(problem: Problem, st: Stretch, passes: Callable[[], bool], deadline: float) -> None:
    """Refit the widths into the room the closed gaps freed and keep the largest share of
    that widening at which, with every gap as it is now, the stretch still fits and the plan
    still passes (none, if no share does)."""
    kept = list(st.halves), dict(st.scales)
    gaps = stretch_need(st.slots, st.halves, st.left, st.right, st.scales)[1:-1]
    st.refit(time_limit_s=REFIT_SHARE_S, seed=problem.seed)
    wanted = list(st.halves)
    if wanted == kept[0]:
        return
    for share in WIDEN_STEPS:
        if time.perf_counter() > deadline:
            break
        st.halves = [
            slot.clamp(round(old + share * (new - old)))
            for slot, old, new in zip(st.slots, kept[0], wanted, strict=True)
        ]
        st.scales = dict(kept[1])
        for i, units in enumerate(gaps, start=1):
            a, b = st.slots[i - 1], st.slots[i]
            raw = pair_gap_raw(a.family, st.halves[i - 1], b.family, st.halves[i])
            if raw > 0:
                st.scales[a.owner, b.owner] = min(1.0, units / raw)
        if st.halves != kept[0] and st.fits(st.halves) and passes():
            return
    st.halves, st.scales = list(kept[0]), dict(kept[1])


FILL_SHARES = (1.0, 0.5, 0.25)
"""Shares of the room a carrier fits that :func:`_fill` verifies in turn (one verification
each, at most)."""


def _fill(st: Stretch, passes: Callable[[], bool], deadline: float) -> None:
    """The room still left at the top of ``st`` after the refit given to its carriers below
    target, best value per unit first: each takes the most that fits with the gaps as they
    are and verification passes (tried at all, half and a quarter of it)."""
    growing = [i for i, slot in enumerate(st.slots) if st.halves[i] < slot.hi_half]
    growing.sort(key=lambda i: -st.slots[i].value_per_half)
    for i in growing:
        most = _most_that_fits(st, i)
        for share in FILL_SHARES:
            step = int(most * share)
            if step < 1 or time.perf_counter() > deadline:
                break
            st.halves[i] += step
            if passes():
                break
            st.halves[i] -= step


def _most_that_fits(st: Stretch, i: int) -> int:
    """The largest rise of carrier ``i``'s half-width (to its top) at which ``st`` still fits."""
    lo, hi = 0, st.slots[i].hi_half - st.halves[i]
    base = st.halves[i]
    while lo < hi:
        mid = (lo + hi + 1) // 2
        st.halves[i] = base + mid
        if st.fits(st.halves):
            lo = mid
        else:
            hi = mid - 1
    st.halves[i] = base
    return lo


def _close(st: Stretch, i: int, passes_now: Callable[[], bool], *, widest: bool) -> None:
    """The least gap (grid units) between carriers ``i - 1`` and ``i`` at which the plan
    passes, by bisection up to the pair's present gap (or, with ``widest``, up to the
    spectral-mask gap), kept as that pair's scale."""
    a, b = st.slots[i - 1], st.slots[i]
    ha, hb = st.halves[i - 1], st.halves[i]
    raw = pair_gap_raw(a.family, ha, b.family, hb)
    if raw <= 0:
        return
    pair = (a.owner, b.owner)
    scale = 1.0 if widest else st.scales.get(pair, 1.0)
    lo, hi = 0, pair_gap_units(a.family, ha, b.family, hb, scale)

    def at(units: int) -> float:
        return min(1.0, units / raw)

    while lo < hi:
        mid = (lo + hi) // 2
        st.scales[pair] = at(mid)
        if passes_now():
            hi = mid
        else:
            lo = mid + 1
    st.scales[pair] = at(hi)


Rechoice = tuple[Stretch, int, Slot, int, dict[tuple[int, int], float]]
"""What :func:`rechoose` changed at one place: the stretch, the index, the slot and half-width
it had, and the stretch's pair scales before."""


def rechoose(
    problem: Problem, data: PackingInput, arrangement: Arrangement, deadline: float
) -> list[Rechoice]:
    """``max_throughput``: a carrier below its target, in a stretch with room left, takes the
    width or the configuration of its demand that carries most in the room there is (its own
    widened, or another where its own link will not let it grow).  Its gaps go back to the
    full pair rule (the pair's earlier tightening was for the old configuration).  Returns the
    changes, for :func:`undo_rechoices` when the plan then fails verification."""
    if problem.objective is not Objective.MAX_THROUGHPUT:
        return []
    done: list[Rechoice] = []
    for st in arrangement.stretches:
        for i in sorted(range(len(st.slots)), key=lambda i: -st.slots[i].value_per_half):
            if time.perf_counter() > deadline:
                return done
            old, half = st.slots[i], st.halves[i]
            if _at_target(data, old, half):
                continue
            scales = dict(st.scales)
            st.scales = {pair: v for pair, v in scales.items() if old.owner not in pair}
            best = _best_fitting(data, st, i)
            if best is None:
                st.scales = scales
                continue
            done.append((st, i, old, half, scales))
            st.slots[i], st.halves[i] = best
    return done


def undo_rechoices(done: Sequence[Rechoice]) -> None:
    """Put back what :func:`rechoose` changed, last change first."""
    for st, i, old, half, scales in reversed(done):
        st.slots[i], st.halves[i], st.scales = old, half, scales


def _at_target(data: PackingInput, slot: Slot, half: int) -> bool:
    target = data.options[slot.owner].demand.target_rate_bps
    return slot.family.at(half).config.throughput_bps >= target * (1 - 1e-9)


def _best_fitting(data: PackingInput, st: Stretch, i: int) -> tuple[Slot, int] | None:
    """Among slot ``i``'s demand's configurations, the one (and half-width) worth most that
    fits where slot ``i`` is, the others as they are; None if none beats it.  Configurations
    are tried from the most each could carry down, and no further than the best found."""
    old, half = st.slots[i], st.halves[i]
    slots = [slot_of(data, old.owner, k) for k in range(len(data.options[old.owner].candidates))]
    slots.sort(key=lambda s: -s.value_per_half * s.hi_half)
    best: tuple[Slot, int] | None = None
    best_value = old.value_per_half * half
    for new in slots:
        if new.value_per_half * new.hi_half <= best_value:
            break
        st.slots[i] = new
        top = _widest_fitting(st, i, new)
        if top is not None and new.value_per_half * top > best_value:
            best, best_value = (new, top), new.value_per_half * top
    st.slots[i], st.halves[i] = old, half
    return best


def _widest_fitting(st: Stretch, i: int, slot: Slot) -> int | None:
    """The widest half-width of ``slot`` at place ``i`` at which ``st`` fits (None: none)."""
    st.halves[i] = slot.lo_half
    if not st.fits(st.halves):
        return None
    lo, hi = slot.lo_half, slot.hi_half
    while lo < hi:
        mid = (lo + hi + 1) // 2
        st.halves[i] = mid
        if st.fits(st.halves):
            lo = mid
        else:
            hi = mid - 1
    return lo
