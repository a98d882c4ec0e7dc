"""Verified carriers given better configurations and widths, one local change at a time.

The packing chooses each carrier's modulation, code rate, roll-off and width against the pair
rule's protection (:class:`solver.verify.PairCheck`), which spaces a sensitive carrier as
though its neighbours shared its allowance evenly.  Verification measures the real aggregate,
so once the plan is placed a carrier often has interference margin to spare.  Here, for
``max_throughput``, two kinds of change are tried, each kept only if the whole plan still
passes verification (:func:`~solver.verify.verify_change`: exact, and local):

* **a better configuration where it stands**: a carrier below its target takes the
  configuration of its demand that carries most in no more width, at its own centre;
* **a gap narrowed**: a carrier below its target grows into the gap on one side of it (to a
  neighbour, a block edge or an exclusion), in the configuration worth most at its new width;
* **width passed to a neighbour**: two neighbours of one stretch move the edge between them
  (the gap between them moves with it, unchanged), each in the configuration worth most at its
  new width, when the pair then carries more.

They are tried in that order, the cheaper and (measured on 200 demands) more productive per
second first, so a short time limit gets the most of them.

Admission never changes and nothing leaves its stretch.  Passes repeat until no change is
kept (a change moves its neighbours' interference, so a later pass may find room an earlier
one did not) or the time is up.

The same local changes also mend a plan that fails verification (:func:`mend`, any
objective): for each violation in turn, the carrier to blame or its victim takes another
configuration in its own width, or a narrower one at its centre, that clears the violation
and adds none; the most valuable such change is kept.  That is cheaper, and loses less, than
solving again with stricter emission or leaving carriers out.
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Callable, Collection, Iterable, Iterator, Sequence
from dataclasses import dataclass

from solver.model import Carrier, CarrierConfig, Demand, Objective, Problem
from solver.packing.families import Family
from solver.verify import Verification, meets_leakage_limits, verify_change

__all__ = ["mend", "upgrade"]

CHOICES_PER_SIDE = 3
"""Configurations tried per carrier of a pair at its new width, the most valuable first."""

SLIDE_LIMIT = 3
"""Carriers that may slide to bring a gap beyond them to a carrier below target (each slid
carrier makes the change's verification reach further)."""

SHARES = (1.0, 0.5, 0.25, 0.125)
"""Shares of the width a carrier could give up that a pair tries moving, largest first."""

Families = Callable[[Demand], Sequence[Family]]


def upgrade(
    problem: Problem,
    verified: Verification,
    families: Families,
    keep: Collection[str],
    deadline: float,
) -> Verification:
    """``verified`` (a passing plan) with better configurations and widths where they pass.

    Parameters
    ----------
    problem : Problem
        The request; nothing changes unless its objective is ``max_throughput``.
    verified : Verification
        A plan that passes verification.
    families : callable
        A demand's configurations to choose from (each a :class:`Family` over widths).
    keep : collection of str
        Demands whose carriers must not change (pinned, or kept in place by a replan).
    deadline : float
        ``time.perf_counter()`` value at which to stop trying.

    Returns
    -------
    Verification
        The plan with its changes, passing verification (``verified`` itself when nothing
        changed).
    """
    if problem.objective is not Objective.MAX_THROUGHPUT or not verified.passed:
        return verified
    local = _Local(problem, families, keep, deadline)
    current, changed = verified, True
    while changed and not local.late():
        changed = False
        for i in local.below_target(current):
            better = local.best_in_place(current, i)
            if better is not None:
                current, changed = better, True
        for i in local.below_target(current):
            better = local.best_widening(current, i)
            if better is not None:
                current, changed = better, True
        for i in local.pairs(current):
            better = local.best_transfer(current, i)
            if better is not None:
                current, changed = better, True
    return current


MEND_CHOICES = 6
"""Configurations tried per carrier and width when mending a violation, most valuable first
among those that meet their own leakage limits."""


def mend(
    problem: Problem,
    failed: Verification,
    families: Families,
    keep: Collection[str],
    deadline: float,
) -> Verification | None:
    """``failed``'s plan changed, one carrier at a time, until it passes verification; None
    when some violation has no local change that clears it (or the time is up).

    Parameters
    ----------
    problem : Problem
        The request.
    failed : Verification
        A plan's verification (passing plans come back as they are).
    families : callable
        A demand's configurations to choose from.
    keep : collection of str
        Demands whose carriers must not change.
    deadline : float
        ``time.perf_counter()`` value at which to give up.
    """
    local = _Local(problem, families, keep, deadline)
    current = failed
    while not current.passed:
        if local.late():
            return None
        better = local.best_fix(current)
        if better is None:
            return None
        current = better
    return current


@dataclass
class _Local:
    """What the local changes read: the request, each demand's configurations (built on first
    use), the carriers that must stay and the time limit."""

    problem: Problem
    families: Families
    keep: Collection[str]
    deadline: float

    def __post_init__(self) -> None:
        self.demands = {d.id: d for d in self.problem.demands}
        self.known: dict[str, Sequence[Family]] = {}

    def late(self) -> bool:
        return time.perf_counter() > self.deadline

    def value(self, carrier: Carrier, config: CarrierConfig | None = None) -> float:
        demand = self.demands[carrier.demand_id]
        config = carrier.config if config is None else config
        return demand.priority * min(config.throughput_bps, demand.target_rate_bps)

    def short(self, carrier: Carrier) -> bool:
        target = self.demands[carrier.demand_id].target_rate_bps
        return carrier.config.throughput_bps < target * (1 - 1e-9)

    def configs(self, carrier: Carrier, width_hz: float) -> Iterator[CarrierConfig]:
        """The demand's configurations that carry its minimum rate in ``width_hz`` (each
        filling it, or at its family's top when that is narrower), most valuable first."""
        demand = self.demands[carrier.demand_id]
        if demand.id not in self.known:
            self.known[demand.id] = self.families(demand)
        scaled = []
        for fam in self.known[demand.id]:
            top = fam.top.config
            scale = min(1.0, width_hz / top.allocated_bandwidth_hz)
            rate = top.throughput_bps * scale
            if rate >= demand.min_rate_bps * (1 - 1e-9):
                scaled.append((min(rate, demand.target_rate_bps), scale, fam))
        scaled.sort(key=lambda t: -t[0])
        return (fam.config_at(scale) for _, scale, fam in scaled)

    def below_target(self, plan: Verification) -> list[int]:
        """Carriers below target that may change, highest priority first, then the most short
        of target."""
        carriers = plan.carriers
        below = [
            i for i, c in enumerate(carriers) if c.demand_id not in self.keep and self.short(c)
        ]
        return sorted(
            below,
            key=lambda i: (
                -self.demands[carriers[i].demand_id].priority,
                carriers[i].config.throughput_bps
                - self.demands[carriers[i].demand_id].target_rate_bps,
            ),
        )

    def pairs(self, plan: Verification) -> list[int]:
        """Each ``i`` whose carriers ``i`` and ``i + 1`` may both change, with one of them below
        target and no exclusion between them."""
        out = []
        for i, (a, b) in enumerate(itertools.pairwise(plan.carriers)):
            if a.demand_id in self.keep or b.demand_id in self.keep:
                continue
            if not (self.short(a) or self.short(b)):
                continue
            if any(
                x.start_hz >= a.upper_edge_hz and x.stop_hz <= b.lower_edge_hz
                for x in self.problem.block.exclusions
            ):
                continue
            out.append(i)
        return out

    def best_in_place(self, plan: Verification, i: int) -> Verification | None:
        """The plan with carrier ``i`` in the configuration worth most, in no more width at
        its centre, that passes; None if none beats it."""
        carrier = plan.carriers[i]
        worth = self.value(carrier)
        for config in self.configs(carrier, carrier.config.allocated_bandwidth_hz):
            if self.value(carrier, config) <= worth * (1 + 1e-6) or self.late():
                return None
            new = Carrier(config, carrier.center_hz, 0.0, 0.0)
            if not self.leaks_within(plan.carriers, {i: new}, i):
                continue
            check = verify_change(self.problem, plan, {i: new}, first_only=True)
            if check.passed:
                return check
        return None

    def leaks_within(
        self, carriers: Sequence[Carrier], changes: dict[int, Carrier], i: int
    ) -> bool:
        """Whether carrier ``i``, with ``changes`` made, meets its leakage limits (the cheap
        part of verification, checked before the whole)."""
        lo = max(i - 1, 0)  # the checks read only the neighbours (and the edges, exclusions)
        trial = [changes.get(j, carriers[j]) for j in range(lo, min(i + 2, len(carriers)))]
        return meets_leakage_limits(self.problem, trial, i - lo)

    def best_transfer(self, plan: Verification, i: int) -> Verification | None:
        """The plan with the edge between carriers ``i`` and ``i + 1`` moved (either way) where
        the pair then carries most and passes; None if no move gains."""
        low, high = plan.carriers[i], plan.carriers[i + 1]
        worth = self.value(low) + self.value(high)
        trials = []
        for shift in self._shifts(low, high):
            lows, highs = self._pair_choices(plan, i, shift)
            for a, b in itertools.product(lows, highs):
                gain = self.value(low, a.config) + self.value(high, b.config) - worth
                if gain > worth * 1e-6:
                    trials.append((gain, a, b))
        for _, a, b in sorted(trials, key=lambda t: -t[0]):
            if self.late():
                return None
            check = verify_change(self.problem, plan, {i: a, i + 1: b}, first_only=True)
            if check.passed:
                return check
        return None

    def _pair_choices(
        self, plan: Verification, i: int, shift: float
    ) -> tuple[list[Carrier], list[Carrier]]:
        """Carriers ``i`` and ``i + 1`` with the edge between them moved by ``shift`` (the gap
        above it kept): for each, the most valuable configurations at its new width that meet
        their leakage limits there."""
        low, high = plan.carriers[i], plan.carriers[i + 1]
        edge = low.upper_edge_hz + shift
        low_centre = low.lower_edge_hz + (edge - low.lower_edge_hz) / 2
        start = edge + (high.lower_edge_hz - low.upper_edge_hz)
        high_centre = start + (high.upper_edge_hz - start) / 2
        lows = (
            Carrier(c, low_centre, 0.0, 0.0)
            for c in self.configs(low, low.config.allocated_bandwidth_hz + shift)
        )
        highs = (
            Carrier(c, high_centre, 0.0, 0.0)
            for c in self.configs(high, high.config.allocated_bandwidth_hz - shift)
        )
        first_high = next(highs, None)
        if first_high is None:
            return [], []
        # each side's leakage is checked beside the other side's most valuable choice
        picked_lows = self._first_within(
            plan.carriers, lows, lambda a: {i: a, i + 1: first_high}, i
        )
        if not picked_lows:
            return [], []
        picked_highs = self._first_within(
            plan.carriers,
            itertools.chain([first_high], highs),
            lambda b: {i: picked_lows[0], i + 1: b},
            i + 1,
        )
        return picked_lows, picked_highs

    def _first_within(
        self,
        carriers: Sequence[Carrier],
        options: Iterable[Carrier],
        changes: Callable[[Carrier], dict[int, Carrier]],
        i: int,
    ) -> list[Carrier]:
        """The first :data:`CHOICES_PER_SIDE` of ``options`` that meet their leakage limits as
        carrier ``i`` with ``changes`` made."""
        out: list[Carrier] = []
        for option in options:
            if len(out) == CHOICES_PER_SIDE or self.late():
                break
            if self.leaks_within(carriers, changes(option), i):
                out.append(option)
        return out

    def best_widening(self, plan: Verification, i: int) -> Verification | None:
        """The plan with carrier ``i`` grown into a gap below or above it (its other edge
        kept) in the configuration worth most that passes; None if none beats it.  The gap
        may lie beyond other carriers of its stretch, which then slide towards it by as much."""
        carrier = plan.carriers[i]
        worth = self.value(carrier)
        step = 2.0 * self.problem.block.raster_hz
        trials = []
        for sign in (-1.0, 1.0):
            for gap, slid in self._room(plan.carriers, i, sign):
                for steps in _steps(gap, step):
                    width = carrier.config.allocated_bandwidth_hz + steps * step
                    moved = {j: _slid(plan.carriers[j], sign * steps * step) for j in slid}
                    centre = carrier.center_hz + sign * steps * step / 2
                    for config in itertools.islice(self.configs(carrier, width), CHOICES_PER_SIDE):
                        value = self.value(carrier, config)
                        if value > worth * (1 + 1e-6):
                            new = Carrier(config, centre, 0.0, 0.0)
                            trials.append((value, -len(slid), {**moved, i: new}))
        for _, _, changes in sorted(trials, key=lambda t: (-t[0], -t[1])):
            if self.late():
                return None
            if not self.leaks_within(plan.carriers, changes, i):
                continue
            check = verify_change(self.problem, plan, changes, first_only=True)
            if check.passed:
                return check
        return None

    def _room(
        self, carriers: Sequence[Carrier], i: int, sign: float
    ) -> Iterator[tuple[float, list[int]]]:
        """Gaps (Hz) below (``sign`` -1) or above (+1) carrier ``i`` in its stretch, nearest
        first, each with the carriers between it and ``i`` (which would slide into it); up to
        a block edge, an exclusion or a carrier that must stay."""
        slid: list[int] = []
        j = i
        while True:
            k = j + int(sign)
            edge = carriers[j].lower_edge_hz if sign < 0 else carriers[j].upper_edge_hz
            wall = self._wall(edge, sign)
            inside = 0 <= k < len(carriers) and abs(_facing(carriers[k], sign) - edge) < abs(
                wall - edge
            )
            if not inside:
                yield abs(wall - edge), list(slid)
                return
            yield abs(_facing(carriers[k], sign) - edge), list(slid)
            if carriers[k].demand_id in self.keep or len(slid) == SLIDE_LIMIT:
                return
            slid.append(k)
            j = k

    def _wall(self, edge_hz: float, sign: float) -> float:
        """The nearest block edge or exclusion beyond ``edge_hz`` in direction ``sign``."""
        block = self.problem.block
        if sign < 0:
            walls = [block.start_hz, *(x.stop_hz for x in block.exclusions)]
            return max((w for w in walls if w <= edge_hz + 1e-6), default=block.start_hz)
        walls = [block.stop_hz, *(x.start_hz for x in block.exclusions)]
        return min((w for w in walls if w >= edge_hz - 1e-6), default=block.stop_hz)

    def best_fix(self, plan: Verification) -> Verification | None:
        """The plan with the most valuable single change that clears its first violation
        and adds none; None if no change does."""
        violation = plan.violations[0]
        index = {c.demand_id: i for i, c in enumerate(plan.carriers)}
        blamed = [violation.demand_id, violation.culprit]
        trials = []
        for demand_id in dict.fromkeys(b for b in blamed if b is not None):
            if demand_id in self.keep or demand_id not in index:
                continue
            for new in self._fixes(plan.carriers, index[demand_id]):
                trials.append((self.value(new), index[demand_id], new))
        count = len(plan.violations)
        for _, i, new in sorted(trials, key=lambda t: -t[0]):
            if self.late():
                return None
            check = verify_change(self.problem, plan, {i: new})
            still = {(v.kind, v.demand_id) for v in check.violations}
            if len(check.violations) < count and (violation.kind, violation.demand_id) not in still:
                return check
        return None

    def _fixes(self, carriers: Sequence[Carrier], i: int) -> Iterator[Carrier]:
        """Carrier ``i`` in other configurations at its centre: in its own width and in
        narrower ones (by shares of what it could give up), each meeting its own leakage
        limits there."""
        carrier = carriers[i]
        step = 2.0 * self.problem.block.raster_hz
        spare = carrier.config.allocated_bandwidth_hz - self._narrowest(carrier)
        for steps in [0, *_steps(spare, step)]:
            width = carrier.config.allocated_bandwidth_hz - steps * step
            found = 0
            for config in self.configs(carrier, width):
                if found == MEND_CHOICES or self.late():
                    break
                if config == carrier.config:
                    continue
                new = Carrier(config, carrier.center_hz, 0.0, 0.0)
                if self.leaks_within(carriers, {i: new}, i):
                    found += 1
                    yield new

    def _shifts(self, low: Carrier, high: Carrier) -> Iterator[float]:
        """Moves of the edge between two neighbours (Hz, up is positive): shares of what the
        giving one could spare, in steps of two raster steps (centres stay on the raster)."""
        step = 2.0 * self.problem.block.raster_hz
        for giver, sign in ((high, 1.0), (low, -1.0)):
            spare = giver.config.allocated_bandwidth_hz - self._narrowest(giver)
            for steps in _steps(spare, step):
                yield sign * steps * step

    def _narrowest(self, carrier: Carrier) -> float:
        """The least width (Hz) in which some configuration carries the demand's minimum
        rate."""
        demand = self.demands[carrier.demand_id]
        if demand.id not in self.known:
            self.known[demand.id] = self.families(demand)
        widths = [
            fam.config_at(fam.lo_half / fam.hi_half).allocated_bandwidth_hz
            for fam in self.known[demand.id]
        ]
        return min(widths, default=carrier.config.allocated_bandwidth_hz)


def _steps(gap_hz: float, step_hz: float) -> list[int]:
    """Whole ``step_hz`` steps worth trying in a gap: shares of it, largest first."""
    out: list[int] = []
    for share in SHARES:
        steps = int(gap_hz * share / step_hz + 1e-9)
        if steps > 0 and steps not in out:
            out.append(steps)
    return out


def _slid(carrier: Carrier, shift_hz: float) -> Carrier:
    return Carrier(carrier.config, carrier.center_hz + shift_hz, 0.0, 0.0)


def _facing(carrier: Carrier, sign: float) -> float:
    """The edge of ``carrier`` that faces a carrier on its ``-sign`` side (its upper edge when
    it lies below, ``sign`` -1)."""
    return carrier.upper_edge_hz if sign < 0 else carrier.lower_edge_hz
