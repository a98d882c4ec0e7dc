"""The planning entry point: a :class:`Problem` in, a verified :class:`Plan` out.

Flow: validate → pinned carriers fixed → free segments → candidates per demand → CP-SAT
packing → positions by sorting → independent verification.  A plan that fails verification is
never returned: the carriers to blame get a larger guard (a cut) and the packing is solved
again; after :data:`MAX_REPAIR_ROUNDS` the carriers still to blame are left out, with the reason.
"""

from __future__ import annotations

import functools
import itertools
import logging
import math
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

from solver import equipment
from solver.candidates import (
    Candidate,
    DemandOptions,
    Family,
    build_candidates,
    candidate_sets,
    every_family,
    family_for,
    family_up_to_target,
)
from solver.explain import fill_unused_room
from solver.geometry import (
    FixedCarrier,
    free_segments,
    free_segments_hz,
    raster_units,
)
from solver.greedy import greedy_admission
from solver.judge import INTEGRAL_S, Judgement, branches, judge
from solver.model import (
    Carrier,
    Objective,
    Plan,
    Problem,
    ProgressEvent,
    SolveCancelledError,
    SolveStats,
    SolveStatus,
    Unserved,
    UnservedReason,
)
from solver.packing import (
    PackingInput,
    PackingResult,
    Segment,
    admission_weights,
    solve_packing,
)
from solver.packing.arrangement import (
    Arrangement,
    admit_rest,
    from_carriers,
    from_model,
    greedy_stretches,
    pair_measure,
    refit,
    tighten,
    to_carriers,
)
from solver.repair import drop_until_passing, dropped_notice
from solver.rules import hand_comparison
from solver.spectrum_value import ACHIEVED_SHARE, SpectrumValue, spectrum_value
from solver.squeeze import Rechoice, rechoose, squeeze, undo_rechoices
from solver.summary import (
    CAUTIONS,
    explain_unserved,
    mark_retunes,
    summarise,
    with_guards,
)
from solver.upgrade import mend, upgrade
from solver.validation import validate_problem
from solver.verify import PairCheck, Verification, verify_plan

__all__ = [
    "CAUTIONS",
    "MAX_REPAIR_ROUNDS",
    "protection_levels",
    "solve",
    "summarise",
    "with_guards",
]

log = logging.getLogger(__name__)

MAX_LEVELS = 4
"""At most this many protection levels a segment may take."""

MEND_SHARE = 0.3
"""Share of the time left that mending a plan which failed verification may take."""

MAX_REPAIR_ROUNDS = 6
"""Re-solves allowed after a failed verification before blamed carriers are left out."""


# ---------------------------------------------------------------- pinned carriers


@dataclass(frozen=True)
class _PinnedChoice:
    """How pinned demands are set before the free ones are packed."""

    narrow: bool = False
    """Each at its least spectrum (else at the most throughput that fits)."""
    left_out: tuple[tuple[str, str], ...] = ()
    """Pinned demands left out (id, why), to make room for higher priorities."""


def fix_pinned(
    problem: Problem, options: dict[str, DemandOptions], choice: _PinnedChoice = _PinnedChoice()
) -> tuple[list[FixedCarrier], list[Unserved]]:
    """Give each pinned demand a candidate that fits at its centre, highest priority first:
    its best throughput, or its least spectrum when ``choice.narrow``."""
    placed: list[FixedCarrier] = []
    left_out = dict(choice.left_out)
    unserved = [Unserved(d, UnservedReason.NO_SPECTRUM, why) for d, why in choice.left_out]
    for demand in sorted(
        (d for d in problem.demands if d.pinned_center_hz is not None and d.id not in left_out),
        key=lambda d: (-d.priority, d.id),
    ):
        center = demand.pinned_center_hz
        assert center is not None
        fitting = [
            (c, fam)
            for fam in options[demand.id].candidates
            if (c := _fitting(problem, center, fam, placed, choice.narrow)) is not None
        ]
        if not fitting:
            reason = (
                UnservedReason.NO_LINK
                if not options[demand.id].candidates
                else UnservedReason.NO_SPECTRUM
            )
            detail = options[demand.id].best_link_detail or (
                f"no configuration fits at the pinned centre {center:,.0f} Hz with its guards"
            )
            unserved.append(Unserved(demand.id, reason, detail))
            continue
        if choice.narrow:
            best, fam = min(
                fitting,
                key=lambda cf: (cf[0].width_units + cf[0].guard_units, -cf[0].throughput_bps),
            )
        elif problem.objective is Objective.MAX_MARGIN:
            best, fam = max(
                fitting, key=lambda cf: cf[0].config.esn0_db - cf[0].config.required_esn0_db
            )
        else:
            best, fam = max(
                fitting,
                key=lambda cf: (
                    min(cf[0].throughput_bps, demand.target_rate_bps),
                    -cf[0].width_units,
                ),
            )
        half = best.width_units // 2
        single = replace(fam, top=best, lo_half=half, hi_half=half)
        placed.append(FixedCarrier(Carrier(best.config, center, 0.0, 0.0), best, single))
    return placed, unserved


def _fitting(
    problem: Problem, center: float, fam: Family, placed: Sequence[FixedCarrier], narrow: bool
) -> Candidate | None:
    """The narrowest member of ``fam`` if ``narrow`` (if it fits), else the widest member (in
    steps of about 2 %) that fits at ``center``."""
    if narrow:
        least = fam.at(fam.lo_half)
        return least if _pinned_fits(problem, center, least, placed) else None
    half = fam.hi_half
    while True:
        cand = fam.at(half)
        if _pinned_fits(problem, center, cand, placed):
            return cand
        if half == fam.lo_half:
            return None
        half = max(fam.lo_half, min(half - 1, math.floor(half / 1.02)))


def _pinned_fits(
    problem: Problem, center: float, cand: Candidate, placed: Sequence[FixedCarrier]
) -> bool:
    half = cand.config.allocated_bandwidth_hz / 2
    lo, hi = center - half, center + half
    edge = cand.config.edge_guard_hz
    block = problem.block
    if lo - edge < block.start_hz or hi + edge > block.stop_hz:
        return False
    for x in block.exclusions:
        if lo - edge < x.stop_hz and hi + edge > x.start_hz:
            return False
    for f in placed:
        other = f.carrier
        gap = max(cand.config.guard_hz, f.candidate.config.guard_hz)
        if lo - gap < other.upper_edge_hz and hi + gap > other.lower_edge_hz:
            return False
    return True


def protection_levels(options: Sequence[DemandOptions]) -> tuple[float, ...]:
    """The levels a segment may take, chosen from the families' own sensitivities.

    A family sits at the lowest level at or above its sensitivity, so every dB a level lies
    above a family's sensitivity widens that family's guard for nothing.  With more distinct
    sensitivities than :data:`MAX_LEVELS`, the levels split the sorted sensitivities into
    groups, each at its group's highest value, so that the total excess (dB summed over the
    families) is least — an exact dynamic programme over the sorted values.  A level that
    gives every family the same guard as the next level up is then dropped (its families may
    sit at the higher level at no cost), which keeps the model small.
    """
    families = [f for o in options for f in o.candidates if f.key is not None]
    counts: dict[float, int] = {}
    for f in families:
        counts[f.sensitivity_db] = counts.get(f.sensitivity_db, 0) + 1
    levels = _grouped_levels(sorted(counts.items()), MAX_LEVELS)
    kept: list[float] = []
    for low, high in itertools.pairwise([*levels, math.inf]):
        same = math.isfinite(high) and all(
            math.isclose(f.guard_hz(low), f.guard_hz(high), rel_tol=1e-9, abs_tol=1e-9)
            for f in families
            if f.sensitivity_db <= low + 1e-9
        )
        if not same:
            kept.append(low)
    return tuple(kept)


def _grouped_levels(values: Sequence[tuple[float, int]], groups: int) -> list[float]:
    """At most ``groups`` levels over sorted (value, count) pairs, each level the top of a run
    of consecutive values, least total count-weighted excess (dynamic programme).

    >>> _grouped_levels([(10.0, 1), (11.0, 5), (30.0, 1), (31.0, 1)], 2)
    [11.0, 31.0]
    """
    n = len(values)
    if n <= groups:
        return [v for v, _ in values]

    count = list(itertools.accumulate((c for _, c in values), initial=0))
    mass = list(itertools.accumulate((c * v for v, c in values), initial=0.0))

    def excess(i: int, j: int) -> float:  # values[i..j] at level values[j]
        return values[j][0] * (count[j + 1] - count[i]) - (mass[j + 1] - mass[i])

    # best[k][j]: least excess covering values[0..j] with k levels, the last at values[j].
    best = [[math.inf] * n for _ in range(groups + 1)]
    cut = [[0] * n for _ in range(groups + 1)]
    for j in range(n):
        best[1][j] = excess(0, j)
    for k in range(2, groups + 1):
        for j in range(n):
            for i in range(1, j + 1):
                cost = best[k - 1][i - 1] + excess(i, j)
                if cost < best[k][j]:
                    best[k][j], cut[k][j] = cost, i
    k = min(range(1, groups + 1), key=lambda g: (best[g][n - 1], g))
    levels, j = [], n - 1
    while k >= 1:
        levels.append(values[j][0])
        j = cut[k][j] - 1
        k -= 1
    return sorted(levels)


# ---------------------------------------------------------------- admission and hints


def _hints(
    problem: Problem, options: Sequence[DemandOptions], segments: Sequence[Segment]
) -> dict[str, tuple[int, int, int]]:
    """Family, half-width and segment closest to each demand's current setting (replans)."""
    hints: dict[str, tuple[int, int, int]] = {}
    for opts in options:
        cur = opts.demand.current
        if cur is None:
            continue
        same = [
            (abs(c.config.symbol_rate_baud - cur.symbol_rate_baud), k)
            for k, c in enumerate(opts.candidates)
            if c.config.modulation == cur.modulation
            and c.config.code_rate == cur.code_rate
            and math.isclose(c.config.rolloff, cur.rolloff)
        ]
        where = raster_units(problem, cur.center_hz, up=False)
        inside = [s for s, seg in enumerate(segments) if seg.start <= where < seg.stop]
        if same and inside:
            k = min(same)[1]
            fam = opts.candidates[k]
            width = cur.symbol_rate_baud * (1 + cur.rolloff) / fam.raster_hz / 2
            half = min(max(round(width), fam.lo_half), fam.hi_half)
            hints[opts.demand.id] = (k, half, inside[0])
    return hints


# ---------------------------------------------------------------- solve and repair


def _arrange(
    problem: Problem,
    data: PackingInput,
    result: PackingResult,
    fixed: Sequence[Carrier],
    deadline: float,
    *,
    polish: bool = True,
) -> tuple[Arrangement, list[Rechoice]]:
    """The model's choice made pair-exact, with the demands it left out fitted in where room
    allows; or the greedy admission peer when that serves more (admission first, then the
    priority-weighted throughput).  Polished: gaps squeezed, and carriers held below target
    by their configuration's link given another where there is room (the changes are
    returned, to be undone if verification fails)."""
    model = from_model(data, result)
    admit_rest(data, model, _part(deadline, 4))
    check = PairCheck(problem)
    greedy = greedy_stretches(data, pair_measure(check), _part(deadline, 3))
    for arrangement in (model, greedy):
        refit(arrangement, problem.objective, problem.seed, _part(deadline, 2))
    better = greedy.admission(data) > model.admission(data) or (
        problem.objective is Objective.MAX_THROUGHPUT
        and greedy.admission(data) == model.admission(data)
        and greedy.value() > model.value()
    )
    chosen = greedy if better else model
    tighten(problem, chosen, check, deadline)
    if not polish:
        return chosen, []
    squeeze(problem, chosen, fixed, deadline)
    return chosen, rechoose(problem, data, chosen, deadline)


def _part(deadline: float, parts: int) -> float:
    """The end of an equal share of the time left before ``deadline`` among ``parts`` steps."""
    now = time.perf_counter()
    return now + max(0.0, deadline - now) / parts


def _raise_floors(check: Verification, floors: dict[str, float], fixed: set[str]) -> set[str]:
    """Cut: each carrier to blame must keep its leakage below what its victim needs.

    For interference the culprit is the victim's strongest interferer; the victim shares its
    need between two neighbours (+3 dB).  A leaker that misses a limit gets 1 dB above it.
    Returns the demands whose floor rose.
    """
    raised: set[str] = set()
    for v in check.violations:
        if v.culprit is None or v.culprit in fixed or not math.isfinite(v.needed_db):
            continue
        extra = 1.0 if v.culprit == v.demand_id else 10.0 * math.log10(2.0)
        wanted = math.ceil((v.needed_db + extra) * 2.0) / 2.0
        if wanted > floors.get(v.culprit, 0.0):
            floors[v.culprit] = wanted
            raised.add(v.culprit)
    return raised


def _solution_hints(
    attempt: PackingInput, result: PackingResult, options: Sequence[DemandOptions]
) -> dict[str, tuple[int, int, int]]:
    """The last round's choice, mapped onto the (possibly rebuilt) families of the next one."""
    hints: dict[str, tuple[int, int, int]] = {}
    for s, picks in result.chosen.items():
        for d, k, h in picks:
            j = options[d].family_index(attempt.options[d].candidates[k].config)
            if j is not None:
                fam = options[d].candidates[j]
                half = min(max(h, fam.lo_half), fam.hi_half)
                hints[attempt.options[d].demand.id] = (j, half, s)
    return hints


def _solve_and_verify(
    problem: Problem,
    data: PackingInput,
    pinned: Sequence[Carrier],
    progress: Callable[[ProgressEvent], None] | None,
    cancel: threading.Event | None,
    first_s: float | None = None,
) -> tuple[Verification, PackingResult, int, list[Unserved]]:
    """Solve, place, verify; cut and re-solve on failure; never return a failing plan.

    The first round (solve and placement) ends within ``first_s`` (the whole time limit if
    None), its solve getting 80 % of that.  A plan that fails is first mended by local changes
    of configuration and width (:func:`~solver.upgrade.mend`, in :data:`MEND_SHARE` of the
    time left); failing that, each repair round solves again with stricter emission for the
    carriers to blame, in half of what is left of the whole limit and with the previous
    round's choice as a hint.  A round that finds nothing in its time falls back to the
    previous round's plan less the carriers to blame.
    """
    started = time.perf_counter()
    deadline = started + problem.time_limit_s
    first_s = problem.time_limit_s if first_s is None else min(first_s, problem.time_limit_s)
    options = list(data.options)
    fixed = {p.demand_id for p in pinned}
    floors: dict[str, float] = {}
    budget, hints = first_s * 0.8, data.hints
    previous: tuple[Verification, PackingResult] | None = None
    round_no = 0
    while True:
        round_no += 1
        attempt = replace(data, options=options, time_limit_s=max(budget, 0.2), hints=hints)
        result = solve_packing(attempt, progress=progress, cancel=cancel)
        polish = cancel is None or not cancel.is_set()  # a cancelled solve skips the squeeze
        ends = started + first_s if round_no == 1 else deadline
        arranged, rechosen = _arrange(problem, attempt, result, pinned, ends, polish=polish)
        placed = to_carriers(problem, arranged)
        if not placed and previous is not None:
            check, dropped = drop_until_passing(problem, previous[0])
            return check, previous[1], round_no, dropped
        check = _verified(problem, pinned, placed, arranged, rechosen, deadline)
        if check.passed:
            return check, result, round_no, []
        raised = _raise_floors(check, floors, fixed)
        log.info("verification round %d failed; stricter emission for %s", round_no, sorted(raised))
        left = deadline - time.perf_counter()
        stop = cancel is not None and cancel.is_set()
        if round_no > MAX_REPAIR_ROUNDS or not raised or left <= 0.2 or stop:
            check, dropped = drop_until_passing(problem, check)
            return check, result, round_no, dropped
        options = [
            build_candidates(problem, o.demand, min_limit_db=floors[o.demand.id])
            if o.demand.id in raised
            else o
            for o in options
        ]
        previous, hints = (check, result), _solution_hints(attempt, result, options)
        budget = left / 2


def _verified(
    problem: Problem,
    pinned: Sequence[Carrier],
    placed: Sequence[Carrier],
    arranged: Arrangement,
    rechosen: list[Rechoice],
    deadline: float,
) -> Verification:
    """The placed plan verified; if it fails, mended by local changes
    (:func:`~solver.upgrade.mend`), else with the re-choices undone (the configurations as
    the model chose them) and mended again.  A failing verification is returned only when
    neither passes."""
    fixed = {p.demand_id for p in pinned}
    check = verify_plan(problem, [*pinned, *placed])
    if check.passed:
        return check
    mended = _mended(problem, check, fixed, deadline)
    if mended is not None:
        return mended
    if rechosen:
        undo_rechoices(rechosen)
        check = verify_plan(problem, [*pinned, *to_carriers(problem, arranged)])
        if check.passed:
            return check
        mended = _mended(problem, check, fixed, deadline)
    return check if mended is None else mended


def _mended(
    problem: Problem, failed: Verification, fixed: set[str], deadline: float
) -> Verification | None:
    """``failed`` mended by local changes (:func:`~solver.upgrade.mend`) in
    :data:`MEND_SHARE` of the time left before ``deadline``; None if that does not pass."""
    now = time.perf_counter()
    families = functools.partial(every_family, problem)
    mended = mend(problem, failed, families, fixed, now + MEND_SHARE * (deadline - now))
    if mended is not None:
        log.info("verification failed for %d carriers; mended", len(failed.violations))
    return mended


# ---------------------------------------------------------------- replans


def _staying(
    problem: Problem,
    options: dict[str, DemandOptions],
    fixed: Sequence[FixedCarrier],
) -> list[FixedCarrier]:
    """Current carriers that can stay exactly as they are: all of them when, beside the fixed
    ones, they pass verification together (an unchanged request keeps its plan); otherwise
    highest priority first, each while it keeps the guard rule beside those kept."""
    current: list[FixedCarrier] = []
    strongest = equipment.strongest_level_db(problem)
    for demand in sorted(problem.demands, key=lambda d: (-d.priority, d.id)):
        cur = demand.current
        if cur is None or demand.pinned_center_hz is not None:
            continue
        fam = family_for(
            problem,
            demand,
            cur.modulation,
            cur.code_rate,
            cur.rolloff,
            cur.symbol_rate_baud,
            strongest,
            output_backoff_db=cur.output_backoff_db,
        )
        if fam is not None:
            current.append(
                FixedCarrier(Carrier(fam.top.config, cur.center_hz, 0.0, 0.0), fam.top, fam)
            )
    together = [f.carrier for f in [*fixed, *current]]
    if current and verify_plan(problem, together).passed:
        return current
    keep: list[FixedCarrier] = []
    for f in current:
        if _pinned_fits(problem, f.carrier.center_hz, f.candidate, [*fixed, *keep]):
            keep.append(f)
    return keep


def _secondary(problem: Problem, plan_carriers: Sequence[Carrier], free_hz: float) -> float:
    """What the objective values once admission is settled (higher is better)."""
    if problem.objective is Objective.MIN_BANDWIDTH:
        return free_hz
    targets = {d.id: d for d in problem.demands}
    if problem.objective is Objective.MAX_MARGIN:
        margins = [
            c.margin_after_interference_db - targets[c.demand_id].margin_db for c in plan_carriers
        ]
        return min(margins, default=0.0)
    return sum(
        targets[c.demand_id].priority
        * min(c.config.throughput_bps, targets[c.demand_id].target_rate_bps)
        for c in plan_carriers
    )


# ---------------------------------------------------------------- entry point


@dataclass(frozen=True)
class _Outcome:
    carriers: tuple[Carrier, ...]
    unserved: tuple[Unserved, ...]
    result: PackingResult
    rounds: int
    dropped: tuple[Unserved, ...] = ()
    fixed: tuple[FixedCarrier, ...] = ()
    """The carriers that did not move (pinned, or kept in place by a replan)."""
    choice: _PinnedChoice = _PinnedChoice()


def _run(
    problem: Problem,
    options: dict[str, DemandOptions],
    fixed: Sequence[FixedCarrier],
    early_unserved: Sequence[Unserved],
    progress: Callable[[ProgressEvent], None] | None,
    cancel: threading.Event | None,
    choice: _PinnedChoice = _PinnedChoice(),
) -> _Outcome:
    fixed_ids = {f.carrier.demand_id for f in fixed} | {u.demand_id for u in early_unserved}
    free = [options[d.id] for d in problem.demands if d.id not in fixed_ids]
    segments = free_segments(problem, fixed)
    data = PackingInput(
        options=free,
        segments=segments,
        objective=problem.objective,
        admission_weights=admission_weights([o.demand for o in free]),
        priorities=[o.demand.priority for o in free],
        time_limit_s=problem.time_limit_s,
        num_workers=problem.num_workers,
        seed=problem.seed,
        hints=_hints(problem, free, segments),
        levels=protection_levels(free),
    )
    started = time.perf_counter()
    deadline = started + problem.time_limit_s
    pinned = [f.carrier for f in fixed]
    demands = [o.demand for o in free if o.candidates]
    peer = greedy_admission(
        problem, pinned, demands, started + GREEDY_SHARE * problem.time_limit_s, cancel
    )
    search_end = deadline - UPGRADE_SHARE * problem.time_limit_s
    now = time.perf_counter()
    packing = replace(problem, time_limit_s=max(0.2, deadline - now))
    check, result, rounds, dropped = _solve_and_verify(
        packing, data, pinned, progress, cancel, first_s=max(0.2, search_end - now)
    )
    check, dropped = _at_least_greedy(
        problem, data, pinned, peer, check, dropped, search_end, cancel
    )
    if cancel is None or not cancel.is_set():
        check = _upgraded(problem, data, pinned, check, deadline)
    served = {c.demand_id for c in check.carriers}
    dropped_ids = {u.demand_id for u in dropped}
    explained = explain_unserved(problem, free, served | dropped_ids, segments)
    unserved = (*early_unserved, *dropped, *explained)
    return _Outcome(
        check.carriers,
        tuple(sorted(unserved, key=lambda u: u.demand_id)),
        result,
        rounds,
        tuple(dropped),
        tuple(fixed),
        choice,
    )


UPGRADE_SHARE = 0.2
"""Share of a run's time kept, after the first search round, for giving verified carriers
better configurations and widths (:func:`_upgraded`); repair rounds, when verification fails,
may use it first."""


def _upgraded(
    problem: Problem,
    data: PackingInput,
    pinned: Sequence[Carrier],
    check: Verification,
    deadline: float,
) -> Verification:
    """The verified plan with its free carriers in better configurations where they stand
    (:func:`~solver.upgrade.upgrade`); where that leaves a carrier narrower (at its target in
    less width), the room goes to its neighbours (:func:`_widened`) and the widened carriers
    try again."""
    families = functools.partial(every_family, problem)
    keep = {c.demand_id for c in pinned}
    better = upgrade(problem, check, families, keep, deadline)
    narrowed = any(
        b.config.allocated_bandwidth_hz < a.config.allocated_bandwidth_hz * (1 - 1e-9)
        for a, b in zip(check.carriers, better.carriers, strict=True)
    )
    if not narrowed or time.perf_counter() > deadline:
        return better
    free = [c for c in better.carriers if c.demand_id not in keep]
    wider = _widened(problem, data, pinned, free, deadline)
    if not wider.passed or _secondary(problem, wider.carriers, 0.0) <= _secondary(
        problem, better.carriers, 0.0
    ):
        return better
    return upgrade(problem, wider, families, keep, deadline)


GREEDY_SHARE = 0.2
"""Share of a run's time the verifier-driven greedy peer may take, before the packing (it
stops there and loses the comparison if it has not placed everyone it could)."""


def _at_least_greedy(
    problem: Problem,
    data: PackingInput,
    pinned: Sequence[Carrier],
    peer: Sequence[Carrier],
    check: Verification,
    dropped: list[Unserved],
    deadline: float,
    cancel: threading.Event | None = None,
) -> tuple[Verification, list[Unserved]]:
    """The packed plan, or the greedy peer's (:mod:`solver.greedy`) when that serves more
    (priority first): no plan serves less than greedy admission through the verifier."""
    index = {o.demand.id: d for d, o in enumerate(data.options)}
    weight = data.admission_weights

    def admitted(carriers: Sequence[Carrier]) -> int:
        return sum(weight[index[c.demand_id]] for c in carriers if c.demand_id in index)

    if admitted(peer) <= admitted(check.carriers):
        return check, dropped
    if cancel is not None and cancel.is_set():  # as placed: no squeeze
        return verify_plan(problem, [*pinned, *peer]), []
    log.info("the greedy peer serves more than the packing; its plan is kept")
    return _widened(problem, data, pinned, peer, deadline), []


def _widened(
    problem: Problem,
    data: PackingInput,
    pinned: Sequence[Carrier],
    peer: Sequence[Carrier],
    deadline: float,
) -> Verification:
    """The greedy peer's plan with its widths refitted and its gaps closed where verification
    allows (:func:`~solver.squeeze.squeeze`), or as it is if that fails."""
    demands = {d.id: d for d in problem.demands}

    def family_of(carrier: Carrier) -> Family | None:
        return family_up_to_target(problem, demands[carrier.demand_id], carrier.config)

    arrangement = from_carriers(problem, data, peer, family_of)
    if arrangement is not None and problem.objective is not Objective.MAX_MARGIN:
        squeeze(problem, arrangement, pinned, deadline)
        wider = verify_plan(problem, [*pinned, *to_carriers(problem, arrangement)])
        served = {c.demand_id for c in [*pinned, *peer]}
        if wider.passed and {c.demand_id for c in wider.carriers} == served:
            return wider
    return verify_plan(problem, [*pinned, *peer])


def _score(problem: Problem, outcome: _Outcome) -> tuple[int, float]:
    weights = dict(
        zip((d.id for d in problem.demands), admission_weights(problem.demands), strict=True)
    )
    admitted = sum(weights[c.demand_id] for c in outcome.carriers)
    carriers = with_guards(problem, outcome.carriers)
    free = sum(free_segments_hz(problem, carriers))
    return admitted, _secondary(problem, carriers, free)


def _pick_replan(problem: Problem, moved: _Outcome, stayed: _Outcome) -> _Outcome:
    """Keep carriers in place unless moving them gains more than the retune penalty."""
    a_moved, s_moved = _score(problem, moved)
    a_stayed, s_stayed = _score(problem, stayed)
    if a_moved != a_stayed:
        return moved if a_moved > a_stayed else stayed
    scale = max(abs(s_moved), abs(s_stayed), 1e-12)
    r_moved = sum(c.retuned for c in mark_retunes(problem, moved.carriers))
    r_stayed = sum(c.retuned for c in mark_retunes(problem, stayed.carriers))
    penalty = problem.retune_penalty * scale
    return moved if s_moved - penalty * r_moved > s_stayed - penalty * r_stayed else stayed


CLOSING_S_PER_DEMAND = 0.010
"""Time kept back per demand, from the search, for what follows it: the last verification,
the bound and the summary (measured on 1,000 narrow carriers in one stretch: verification
5.6–7.1 ms and the bound 1.3 ms per carrier on two cores, with a little to spare).  When the
bound's mixed-integer version will run, it gets :data:`~solver.judge.INTEGRAL_S` more."""


@dataclass(frozen=True)
class _Clock:
    """The caller's time limit for the whole request, less the time kept back for closing."""

    started: float
    limit_s: float

    @classmethod
    def start(cls, problem: Problem) -> _Clock:
        closing = min(0.6 * problem.time_limit_s, CLOSING_S_PER_DEMAND * len(problem.demands))
        return cls(time.perf_counter(), problem.time_limit_s - closing)

    def keeping(self, problem: Problem, seconds: float) -> _Clock:
        """The clock with ``seconds`` more kept back for closing (never more than 60 % of the
        time limit in all)."""
        floor = 0.4 * problem.time_limit_s
        return replace(self, limit_s=max(min(self.limit_s, floor), self.limit_s - seconds))

    def elapsed(self) -> float:
        return time.perf_counter() - self.started

    def share(self, parts: int) -> float:
        """An equal share of what is left among ``parts`` stages still to run (at least
        0.2 s, so that a stage can always return its first plan)."""
        return max(0.2, (self.limit_s - self.elapsed()) / max(parts, 1))


class _Teller:
    """Progress for the caller from the first moment: the stage being computed, and each
    verified plan's own figures (value, bound, gap: what the plan will report)."""

    def __init__(
        self,
        clock: _Clock,
        progress: Callable[[ProgressEvent], None] | None,
        problem: Problem,
        cancel: threading.Event | None = None,
    ) -> None:
        self.clock, self.progress, self.problem = clock, progress, problem
        self.cancel = cancel
        self.families: dict[str, tuple[Family, ...]] = {}
        self.free = free_segments(problem, [])
        self.last: tuple[tuple[Carrier, ...], Judgement] | None = None

    def stage(self, what: str) -> None:
        if self.progress is not None:
            nan = math.nan
            self.progress(ProgressEvent(self.clock.elapsed(), nan, nan, nan, what))

    def searching(self, event: ProgressEvent) -> None:
        """A packing model's improving solution: not yet placed or verified, so only the
        stage is passed on."""
        self.stage("searching")

    def verified(self, carriers: Sequence[Carrier]) -> Judgement:
        key = tuple(carriers)
        if self.last is None or self.last[0] != key:
            left = self.problem.time_limit_s - self.clock.elapsed()
            branch = min(INTEGRAL_S, max(0.0, left / 2))
            if self.cancel is not None and self.cancel.is_set():
                branch = 0.0  # a cancelled solve returns at once, with the linear bound
            verdict = judge(self.problem, carriers, self.free, self.families, branch)
            self.last = key, verdict
        verdict = self.last[1]
        if self.progress is not None:
            self.progress(
                ProgressEvent(
                    self.clock.elapsed(), verdict.value, verdict.bound, verdict.gap, "verified plan"
                )
            )
        return verdict


def solve(
    problem: Problem,
    *,
    progress: Callable[[ProgressEvent], None] | None = None,
    cancel: threading.Event | None = None,
) -> Plan:
    """Plan the block: choose, place and verify a carrier for as many demands as fit.

    Parameters
    ----------
    problem : Problem
        Block, demands, equipment, coding assumptions, objective and solver settings.
    progress : callable, optional
        Receives a :class:`ProgressEvent` on every improving solution.
    cancel : threading.Event, optional
        Set to stop the search early; the best verified plan so far is returned (the peer
        and the squeeze are skipped, and its bound is the linear relaxation's, without the
        mixed-integer refinement).

    Returns
    -------
    Plan
        Carriers sorted by frequency, unserved demands with reasons, summary, solver figures
        and notices (always including :data:`CAUTIONS`).

    Raises
    ------
    ProblemError
        When the problem is not valid; its ``field`` names the offending input.
    SolveCancelledError
        When ``cancel`` is set before any plan exists (spectra and candidates being built).
    """
    validate_problem(problem)
    clock = _Clock.start(problem)
    tell = _Teller(clock, progress, problem, cancel)
    tell.stage("building spectra and candidates")
    sets = _candidate_sets(problem, cancel)
    options = {d: kept for d, (kept, _) in sets.items()}
    tell.families = {d: bounding for d, (_, bounding) in sets.items()}
    if branches(tell.families, tell.free):
        clock = tell.clock = clock.keeping(problem, INTEGRAL_S)
    if problem.objective is Objective.MAX_THROUGHPUT:
        clock = tell.clock = clock.keeping(problem, ACHIEVED_SHARE * problem.time_limit_s)
    progress = tell.searching
    replanning = problem.retune_penalty > 0 and any(d.current is not None for d in problem.demands)
    stages = 2 if replanning else 1
    outcome = _louder_or_not(problem, options, clock, stages, progress, cancel)
    if replanning:
        tell.verified(outcome.carriers)  # a verified plan to show while the replan runs
        outcome = _kept_in_place(problem, options, outcome, clock, progress, cancel)
    outcome, improved = _rooms_filled(problem, outcome, clock, cancel)
    verdict = tell.verified(outcome.carriers)
    value = _spectrum_value(problem, outcome, clock, cancel, improved)
    plan = _finish(problem, outcome, verdict, clock.elapsed())
    return replace(plan, summary=replace(plan.summary, spectrum_value=value))


def _kept_in_place(
    problem: Problem,
    options: dict[str, DemandOptions],
    outcome: _Outcome,
    clock: _Clock,
    progress: Callable[[ProgressEvent], None] | None,
    cancel: threading.Event | None,
) -> _Outcome:
    """A replan's second stage: the current carriers that can stay exactly as they are kept,
    the rest planned around them; the better of that and ``outcome`` by the retune penalty."""
    staying = _staying(problem, options, outcome.fixed)
    if not staying:
        return outcome
    budget = replace(problem, time_limit_s=clock.share(1))
    fixed = [*outcome.fixed, *staying]
    pinned = {d.id for d in problem.demands if d.pinned_center_hz is not None}
    early = [u for u in outcome.unserved if u.demand_id in pinned]
    kept = _run(budget, options, fixed, early, progress, cancel)
    return _pick_replan(problem, outcome, kept)


def _rooms_filled(
    problem: Problem, outcome: _Outcome, clock: _Clock, cancel: threading.Event | None
) -> tuple[_Outcome, bool]:
    """The outcome with every carrier below target that fits its target configuration in the
    room it already has moved to it (:func:`solver.explain.fill_unused_room`), then improved in
    place by the verified local search (:func:`~solver.upgrade.upgrade`), in the time kept back
    from the search; the spectrum value takes what is left of it.  Its figures start from a plan
    improved in place, so without this the plan would report a gain it did not take.  Also
    whether that search ran to its end (the spectrum value need not run it again)."""
    if problem.objective is not Objective.MAX_THROUGHPUT or (
        cancel is not None and cancel.is_set()
    ):
        return outcome, False
    deadline = _closing_deadline(problem, clock)
    keep = _unmoved(problem, outcome)
    carriers = fill_unused_room(problem, outcome.carriers, keep, deadline)
    check = verify_plan(problem, carriers)
    if not check.passed or time.perf_counter() >= deadline:
        return replace(outcome, carriers=carriers), False
    families = functools.partial(every_family, problem)
    carriers = upgrade(problem, check, families, keep, deadline).carriers
    return replace(outcome, carriers=carriers), time.perf_counter() < deadline


def _spectrum_value(
    problem: Problem,
    outcome: _Outcome,
    clock: _Clock,
    cancel: threading.Event | None,
    improved: bool,
) -> SpectrumValue:
    """What more spectrum is worth to this plan (:mod:`solver.spectrum_value`): its achieved
    figures take at most :data:`~solver.spectrum_value.ACHIEVED_SHARE` of the time limit, and
    never run past it; ``improved``: the outcome is already improved in place."""
    return spectrum_value(
        problem,
        outcome.carriers,
        every_family,
        _unmoved(problem, outcome),
        deadline=_closing_deadline(problem, clock),
        cancel=cancel,
        improved_in_place=improved,
    )


def _closing_deadline(problem: Problem, clock: _Clock) -> float:
    """The end of one closing step: :data:`~solver.spectrum_value.ACHIEVED_SHARE` of the time
    limit from now, never past the limit."""
    limit = clock.started + problem.time_limit_s
    return min(limit, time.perf_counter() + ACHIEVED_SHARE * problem.time_limit_s)


def _unmoved(problem: Problem, outcome: _Outcome) -> set[str]:
    """Demands whose carriers no closing step may change: pinned ones, and those a replan
    kept in place."""
    keep = {d.id for d in problem.demands if d.pinned_center_hz is not None}
    return keep | {f.carrier.demand_id for f in outcome.fixed}


def _candidate_sets(
    problem: Problem, cancel: threading.Event | None
) -> dict[str, tuple[DemandOptions, tuple[Family, ...]]]:
    sets = {}
    for d in problem.demands:
        if cancel is not None and cancel.is_set():
            raise SolveCancelledError("cancelled while spectra and candidates were being built")
        sets[d.id] = candidate_sets(problem, d)
    return sets


def _louder_or_not(
    problem: Problem,
    options: dict[str, DemandOptions],
    clock: _Clock,
    stages: int,
    progress: Callable[[ProgressEvent], None] | None,
    cancel: threading.Event | None,
) -> _Outcome:
    """The better plan of the request as given and, when a profile may run louder than its
    stated link, of the request without those back-offs (:func:`solver.equipment.quieter`):
    a louder back-off widens every carrier's protection whether or not a plan uses it, so the
    request as given can lose to its own quieter part within the same time."""
    quiet = equipment.quieter(problem)
    if quiet is None:
        return _with_pinned(problem, options, clock, stages, progress, cancel)
    quiet_options = {d: kept for d, (kept, _) in _candidate_sets(quiet, cancel).items()}
    first = _with_pinned(quiet, quiet_options, clock, stages + 1, progress, cancel)
    if cancel is not None and cancel.is_set():
        return first
    second = _with_pinned(problem, options, clock, stages, progress, cancel)
    return max((first, second), key=lambda o: _score(problem, o))


def _with_pinned(
    problem: Problem,
    options: dict[str, DemandOptions],
    clock: _Clock,
    stages: int,
    progress: Callable[[ProgressEvent], None] | None,
    cancel: threading.Event | None,
) -> _Outcome:
    """The best plan over the ways of setting pinned demands: at their best throughput, at
    their least spectrum, and without pinned demands that keep out a higher priority."""
    choices = [_PinnedChoice()]
    if any(d.pinned_center_hz is not None for d in problem.demands):
        wide = [f.carrier.config for f in fix_pinned(problem, options)[0]]
        narrow = _PinnedChoice(narrow=True)
        if [f.carrier.config for f in fix_pinned(problem, options, narrow)[0]] != wide:
            choices.append(narrow)
    outcomes: list[_Outcome] = []
    for i, choice in enumerate(choices):
        budget = replace(problem, time_limit_s=clock.share(len(choices) - i + stages - 1))
        fixed, early = fix_pinned(problem, options, choice)
        outcomes.append(_run(budget, options, fixed, early, progress, cancel, choice))
    best = max(outcomes, key=lambda o: _score(problem, o))
    displacing = _displacing_pinned(problem, options, best)
    if displacing:
        choice = replace(best.choice, left_out=displacing)
        budget = replace(problem, time_limit_s=clock.share(stages))
        fixed, early = fix_pinned(problem, options, choice)
        trial = _run(budget, options, fixed, early, progress, cancel, choice)
        best = max((best, trial), key=lambda o: _score(problem, o))
    return best


def _displacing_pinned(
    problem: Problem, options: dict[str, DemandOptions], outcome: _Outcome
) -> tuple[tuple[str, str], ...]:
    """Pinned demands served while a free demand of higher priority, with a link, is not:
    each with the reason it would be left out for them."""
    served = {c.demand_id for c in outcome.carriers}
    waiting = [
        d
        for d in problem.demands
        if d.id not in served and d.pinned_center_hz is None and options[d.id].candidates
    ]
    out = []
    for d in problem.demands:
        if d.id not in served or d.pinned_center_hz is None:
            continue
        above = sorted(w.id for w in waiting if w.priority > d.priority)
        if above:
            why = f"pinned carrier left out to make room for higher-priority demands {above}"
            out.append((d.id, why))
    return tuple(sorted(out))


def _finish(problem: Problem, outcome: _Outcome, verdict: Judgement, elapsed_s: float) -> Plan:
    carriers = mark_retunes(problem, with_guards(problem, outcome.carriers))
    retunes = sum(c.retuned for c in carriers)
    result = outcome.result
    status: SolveStatus
    if carriers:
        status = verdict.status
    else:
        status = SolveStatus.INFEASIBLE if problem.demands else SolveStatus.OPTIMAL
    stats = SolveStats(
        status=status,
        objective_value=verdict.value,
        best_bound=verdict.bound,
        optimality_gap=verdict.gap,
        solve_time_s=elapsed_s,
        num_workers=problem.num_workers,
        seed=problem.seed,
        solver_version=result.solver_version,
        verification_rounds=outcome.rounds,
        search_time_s=result.solve_time_s,
    )
    notices = list(CAUTIONS)
    if outcome.rounds > 1:
        notices.append(
            f"Verification needed {outcome.rounds} rounds: guards were widened where "
            "interference was found."
        )
    if outcome.dropped:
        notices.append(dropped_notice(outcome.dropped))
    if status is SolveStatus.FEASIBLE:
        notices.extend(_not_proven(problem, verdict))
    notices.extend(_below_target(problem, carriers))
    throughput = sum(c.config.throughput_bps for c in carriers)
    return Plan(
        name=problem.name,
        status=status,
        carriers=tuple(carriers),
        unserved=outcome.unserved,
        summary=summarise(problem, carriers, retunes, hand_comparison(problem, throughput)),
        stats=stats,
        notices=tuple(notices),
    )


def _not_proven(problem: Problem, verdict: Judgement) -> list[str]:
    """Why a plan is not called optimal, in the plan's own figures."""
    said = []
    if not verdict.proven_admission:
        said.append(
            "Not proven to serve the most demands: a relaxation that leaves out the spacing "
            "between carriers still has room for more."
        )
    if math.isfinite(verdict.gap):
        if problem.objective is Objective.MAX_MARGIN:
            figure = f"{verdict.bound - verdict.value:.2f} dB"
        else:
            figure = f"{verdict.gap:.2%}"
        said.append(
            f"Not proven optimal: a bound that holds for every plan verification passes lies "
            f"{figure} above this plan; it leaves out most of the spacing carriers need, so "
            "not all of that gap can be reached."
        )
    return said


def _below_target(problem: Problem, carriers: Sequence[Carrier]) -> list[str]:
    """Which served demands run below their target (so that spectrum left free beside them is
    noticed); what binds each, and what would lift it, is :func:`solver.explain_shortfalls`'s
    to say, carrier by carrier."""
    demands = {d.id: d for d in problem.demands}
    below = [
        c.demand_id
        for c in carriers
        if c.config.throughput_bps < demands[c.demand_id].target_rate_bps * (1 - 1e-6)
    ]
    if not below:
        return []
    return [
        f"Below target: {_names(below)} (each such carrier says what binds it and what would "
        "lift it)."
    ]


def _names(ids: Sequence[str], shown: int = 6) -> str:
    head = ", ".join(sorted(ids)[:shown])
    return head if len(ids) <= shown else f"{head} and {len(ids) - shown} more"
