"""What more spectrum is worth: bit/s per extra MHz at each block edge, and what removing each
exclusion would gain.

Two figures per change, never mixed up:

* **bound** — the gain of the physical bound (:func:`solver.physics.bounds.shannon_nyquist_bound`,
  the Shannon–Nyquist relaxation: ideal carriers, no guards, each demand capped at its target)
  when the usable width grows by the freed width.  The relaxation does not know where spectrum
  sits, so both edges get the same bound figure; an exclusion's is that of its own width.
  It is taken in one of two ways, and the figure says which (:class:`ValueMethod`):

  - ``relaxation-dual``: the dual value λ of the width constraint (bit/s per Hz) times the
    step, used only where it is *exact* over the whole step.  The bound is concave in the
    width W and its right derivative is λ⁺ = max over demands below target of their marginal
    rate (``log2(1 + γ)`` for a fixed-Es/N0 demand, ``log2(1 + x) − x/((1 + x)·ln 2)`` with
    x = P/B for a power-limited one; Boyd & Vandenberghe §5.6 on duals as sensitivities).
    It is linear over the step — so λ⁺·step is the gain, not just an upper bound — in two
    cases only: λ⁺ = 0 (every demand at its target: more width adds nothing), or λ⁺ is the
    slope of fixed-Es/N0 demands whose room below their targets, together, is at least the
    step (the extra width goes to them at a constant rate; a power-limited demand sharing λ
    keeps its width, since any more would earn it less than λ).
  - ``relaxation-resolve``: otherwise (a power-limited demand takes the width, whose
    marginal rate falls as it widens, or the active set changes within the step), the bound is
    solved again at W + step and the two differenced.  It is cheap (the water-filling is
    exact and fast), so this costs milliseconds.

* **achieved** — the gain of *this plan* given the extra spectrum, method ``plan-upgrade``.
  The planner's local improvement (:func:`solver.upgrade.upgrade`: better configurations in
  place, carriers grown into a gap, width passed between neighbours, each kept only if the
  whole plan still passes verification) is first run on the plan in its own request, giving
  the *base*, so that a gain reported for more spectrum is not one the plan could have had
  without it.  Then, per change, the request is widened (one edge moved out by the step, or
  the exclusion removed), the base is verified in it, and the same search runs from there with
  only the carriers beside the freed spectrum free to change (no carrier leaves its stretch,
  so no other can use it).  The base stays feasible with more spectrum, so the figure — the
  best target-capped throughput among the verified plans found, the base included, less the
  base's — is never a loss.  It is what a warm-started local search reached, not a full
  re-solve, which could gain more: a lower estimate of what the spectrum is worth to this plan,
  where the bound figure is an idealised one.  It runs only for ``max_throughput`` (the search
  improves nothing else), only when the solve was not cancelled, and only before a deadline
  (the planner gives it at most :data:`ACHIEVED_SHARE` of the time limit, never past the limit);
  a figure whose search was cut short by the deadline is left out (``None``) rather than
  reported at a machine-speed-dependent value, and :attr:`SpectrumValue.achieved_note` says
  why.

Why not the planner's own bound (:func:`solver.packing.spacing.throughput_bound`, the linear
or mixed-integer programme over real MODCOD families with guards)?  Its objective is weighted
by priority and exists only for ``max_throughput``; its mixed-integer version has no dual
values at all (``scipy.optimize.milp`` returns none), and the relaxation's dual on a stretch's
length row prices one grid unit, not a megahertz over which the active families change.  The
Shannon–Nyquist relaxation is in plain bit/s for every objective, and its dual is exact
where stated above.

Both gains count each demand's throughput capped at its target (bit/s), as the bound does.
The step is 1 MHz rounded to a whole number of raster steps (:func:`step_hz`); per-MHz figures
divide the gain by the freed width in MHz.

References
----------
C. E. Shannon, "Communication in the presence of noise," Proc. IRE 37(1):10–21, 1949.
S. Boyd and L. Vandenberghe, *Convex Optimization*, Cambridge University Press, 2004,
§5.5.3 (water-filling) and §5.6 (perturbation and sensitivity analysis).
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable, Collection, Sequence
from dataclasses import dataclass, replace

from solver.model import Block, Carrier, Demand, Objective, Problem
from solver.packing.families import Family
from solver.physics.bounds import BoundResult, shannon_nyquist_bound
from solver.spectrum_figures import MHZ, ExclusionValue, SpectrumGain, SpectrumValue, ValueMethod
from solver.upgrade import upgrade
from solver.verify import Verification, verify_plan

__all__ = [
    "MHZ",
    "ExclusionValue",
    "SpectrumGain",
    "SpectrumValue",
    "ValueMethod",
    "bound_gain",
    "marginal_rate",
    "spectrum_value",
    "step_hz",
]

ROUND_OFF = 1e-9
"""Relative tolerance of the bound's own solution: a re-solved gain this small below zero
(relative to the bound) is round-off and reported as 0; ties between marginal rates within
it are ties."""

ACHIEVED_SHARE = 0.1
"""Most of the request's time limit the achieved figures may take together (they also stop
at the time limit itself)."""

ACHIEVED_LEAST_S = 0.02
"""An achieved figure is not tried with less time than this (s) left for it."""


def step_hz(block: Block) -> float:
    """1 MHz rounded to a whole number of raster steps (at least one), Hz.

    Examples
    --------
    >>> step_hz(Block(0.0, 1e7, raster_hz=12_500.0))
    1000000.0
    >>> step_hz(Block(0.0, 1e7, raster_hz=300_000.0))
    900000.0
    """
    return max(1, round(MHZ / block.raster_hz)) * block.raster_hz


def _power_hz(demand: Demand) -> float | None:
    """C/N0 after the demand's margin, Hz (None for a fixed-Es/N0 demand)."""
    if demand.cn0_dbhz is None:
        return None
    return float(10.0 ** ((demand.cn0_dbhz - demand.margin_db) / 10.0))


def _slope(demand: Demand) -> float:
    """Shannon rate per Hz of a fixed-Es/N0 demand after its margin, bit/s per Hz."""
    return math.log2(1.0 + 10.0 ** ((float(demand.esn0_db or 0.0) - demand.margin_db) / 10.0))


def _marginals(bound: BoundResult, demands: Sequence[Demand]) -> list[float]:
    """Each demand's right-hand marginal rate at its width in ``bound``, bit/s per Hz (0 at
    its target, ``inf`` for a power-limited demand with no width)."""
    out = []
    for demand, width, rate in zip(demands, bound.widths_hz, bound.rates_bps, strict=True):
        power = _power_hz(demand)
        if rate >= demand.target_rate_bps * (1.0 - ROUND_OFF):
            out.append(0.0)
        elif power is None:
            out.append(_slope(demand))
        elif width <= 0.0:
            out.append(math.inf)
        else:
            x = power / width
            out.append((math.log1p(x) - x / (1.0 + x)) / math.log(2.0))
    return out


def marginal_rate(usable_hz: float, demands: Sequence[Demand]) -> float:
    """λ⁺: the right derivative of the bound with respect to the usable width, bit/s per Hz.

    Parameters
    ----------
    usable_hz : float
        Usable width W, Hz.
    demands : sequence of Demand
        The demands of the bound.

    Returns
    -------
    float
        The largest marginal rate of a demand below its target (0 when all are at target).

    Examples
    --------
    >>> one = Demand("a", 0.0, 1e12, esn0_db=10.0, margin_db=0.0)
    >>> round(marginal_rate(5e6, [one]), 4)  # log2(1 + 10)
    3.4594
    """
    bound = shannon_nyquist_bound(usable_hz, demands)
    return max(_marginals(bound, demands), default=0.0)


def _exact_dual(bound: BoundResult, demands: Sequence[Demand], step: float) -> float | None:
    """λ⁺·step when the bound is linear over the step (see the module), else None."""
    marginals = _marginals(bound, demands)
    top = max(marginals, default=0.0)
    if top == 0.0:
        return 0.0
    tied = [
        i
        for i, (d, m) in enumerate(zip(demands, marginals, strict=True))
        if d.cn0_dbhz is None and m > 0.0 and m >= top * (1.0 - ROUND_OFF)
    ]
    if not tied:
        return None
    slope = max(marginals[i] for i in tied)
    room = sum(demands[i].target_rate_bps / marginals[i] - bound.widths_hz[i] for i in tied)
    return slope * step if room >= step else None


def bound_gain(
    usable_hz: float, freed_hz: float, demands: Sequence[Demand]
) -> tuple[float, ValueMethod]:
    """Gain of the Shannon–Nyquist bound when ``freed_hz`` is added to the usable width.

    Parameters
    ----------
    usable_hz : float
        Usable width W now, Hz.
    freed_hz : float
        Width added, Hz (non-negative).
    demands : sequence of Demand
        The demands of the bound.

    Returns
    -------
    (float, ValueMethod)
        The gain in bit/s and how it was found: the exact dual value, or a re-solve.

    Examples
    --------
    >>> one = Demand("a", 0.0, 1e12, esn0_db=10.0, margin_db=0.0)
    >>> gain, how = bound_gain(5e6, 1e6, [one])
    >>> round(gain), how.value  # 1 MHz × log2(11)
    (3459432, 'relaxation-dual')
    """
    if not (math.isfinite(freed_hz) and freed_hz >= 0):
        raise ValueError(f"{freed_hz=} must be finite and non-negative")
    now = shannon_nyquist_bound(usable_hz, demands)
    exact = _exact_dual(now, demands, freed_hz)
    if exact is not None:
        return exact, ValueMethod.RELAXATION_DUAL
    gain = shannon_nyquist_bound(usable_hz + freed_hz, demands).total_bps - now.total_bps
    if -ROUND_OFF * max(now.total_bps, 1.0) <= gain < 0.0:
        gain = 0.0
    return gain, ValueMethod.RELAXATION_RESOLVE


Families = Callable[[Problem, Demand], Sequence[Family]]
"""A demand's configurations in a given request (:func:`solver.candidates.every_family`)."""


@dataclass(frozen=True)
class _Change:
    """A widened request, the width it frees, and the span of frequencies (Hz) whose carriers
    can reach the freed spectrum (those in the stretches beside it)."""

    widened: Problem
    freed_hz: float
    reach: tuple[float, float]


def _changes(problem: Problem, step: float) -> list[_Change]:
    """Lower edge, upper edge, then each exclusion removed (in request order)."""
    block = problem.block
    walls = sorted((x.start_hz, x.stop_hz) for x in block.exclusions)
    first = walls[0][0] if walls else block.stop_hz
    last = walls[-1][1] if walls else block.start_hz
    out = [
        _Change(
            replace(problem, block=replace(block, start_hz=block.start_hz - step)),
            step,
            (-math.inf, first),
        ),
        _Change(
            replace(problem, block=replace(block, stop_hz=block.stop_hz + step)),
            step,
            (last, math.inf),
        ),
    ]
    for i, x in enumerate(block.exclusions):
        below = max((w[1] for w in walls if w[1] <= x.start_hz), default=-math.inf)
        above = min((w[0] for w in walls if w[0] >= x.stop_hz), default=math.inf)
        rest = block.exclusions[:i] + block.exclusions[i + 1 :]
        widened = replace(problem, block=replace(block, exclusions=rest))
        out.append(_Change(widened, x.stop_hz - x.start_hz, (below, above)))
    return out


def _capped(problem: Problem, carriers: Sequence[Carrier]) -> float:
    """Σ min(throughput, target) over ``carriers``, bit/s."""
    targets = {d.id: d.target_rate_bps for d in problem.demands}
    return sum(min(c.config.throughput_bps, targets[c.demand_id]) for c in carriers)


@dataclass
class _Achiever:
    """Runs ``plan-upgrade`` figures for one plan before a deadline.

    The plan is first improved by the same local search in its own request (the *base*), so
    that a gain found with more spectrum is not one the plan could have had without it; each
    change then starts from the base verified in the widened request, with only the carriers
    that can reach the freed spectrum free to change.  The base stays feasible with more
    spectrum, so a figure is the best target-capped throughput among the verified plans found
    there (the base included) less the base's: never negative.
    """

    problem: Problem
    carriers: tuple[Carrier, ...]
    families: Families
    keep: frozenset[str]
    deadline: float
    cancel: threading.Event | None
    base: tuple[Carrier, ...] | None = None
    polished_bps: float = 0.0
    """What the base gained over the plan in its own request, bit/s."""

    def why_not(self) -> str:
        """Why achieved figures cannot be computed at all (empty when they can)."""
        if self.problem.objective is not Objective.MAX_THROUGHPUT:
            return "achieved gains are computed for max_throughput plans only"
        if not self.carriers:
            return "achieved gains need a plan with carriers"
        if self.cancel is not None and self.cancel.is_set():
            return "achieved gains skipped: the solve was cancelled"
        return ""

    def _search(
        self, problem: Problem, start: Verification, keep: Collection[str], end: float
    ) -> Verification:
        def families(demand: Demand) -> Sequence[Family]:
            return self.families(problem, demand)

        return upgrade(problem, start, families, keep, end)

    def _stopped(self, end: float) -> bool:
        late = end - time.perf_counter() < ACHIEVED_LEAST_S
        return late or (self.cancel is not None and self.cancel.is_set())

    def _base(self, end: float) -> tuple[Carrier, ...] | None:
        """The plan improved in place by local search in its own request (computed once;
        None when that was cut short)."""
        if self.base is None and not self._stopped(end):
            start = verify_plan(self.problem, self.carriers)
            found = self._search(self.problem, start, self.keep, end) if start.passed else start
            if time.perf_counter() < end:
                self.base = found.carriers
                before = _capped(self.problem, self.carriers)
                self.polished_bps = _capped(self.problem, found.carriers) - before
        return self.base

    def gain(self, change: _Change, end: float) -> float | None:
        """Target-capped throughput gained with ``change``, bit/s.

        None when there was no time, a search was cut short by ``end`` (its figure would
        depend on the machine's speed), or the base does not verify in the widened request.
        """
        base = self._base(end)
        if base is None or self._stopped(end):
            return None
        start = verify_plan(change.widened, base)
        if not start.passed:
            return None
        low, high = change.reach
        outside = {c.demand_id for c in base if not low <= c.center_hz <= high}
        found = self._search(change.widened, start, self.keep | outside, end)
        if time.perf_counter() >= end:
            return None
        gained = _capped(change.widened, found.carriers) - _capped(change.widened, base)
        return max(0.0, gained)


def spectrum_value(
    problem: Problem,
    carriers: Sequence[Carrier],
    families: Families,
    keep: Collection[str] = (),
    *,
    deadline: float | None = None,
    cancel: threading.Event | None = None,
    improved_in_place: bool = False,
) -> SpectrumValue:
    """Bound and achieved gains of one raster-rounded MHz at each edge and of each exclusion.

    Parameters
    ----------
    problem : Problem
        The request the plan answers.
    carriers : sequence of Carrier
        The plan's verified carriers.
    families : callable
        ``families(problem, demand)``: a demand's configurations in a (widened) request.
    keep : collection of str
        Demands whose carriers must not change (pinned, or kept in place by a replan).
    deadline : float, optional
        ``time.perf_counter()`` value by which the achieved figures stop (None: no achieved
        figures are computed).
    cancel : threading.Event, optional
        When set, no further achieved figure is started.
    improved_in_place : bool, optional
        The carriers are already the result of the local search in their own request (the
        planner ran it): they are the base as they are, and that search is not run again.

    Returns
    -------
    SpectrumValue
        Per edge and per exclusion: freed width, bound gain and method, achieved gain and
        method where computed.
    """
    step = step_hz(problem.block)
    usable = problem.block.usable_width_hz
    changes = _changes(problem, step)
    achiever = _Achiever(
        problem,
        tuple(carriers),
        families,
        frozenset(keep),
        deadline or 0.0,
        cancel,
        base=tuple(carriers) if improved_in_place else None,
    )
    why = "achieved gains not requested" if deadline is None else achiever.why_not()
    gains = []
    for change in changes:
        gain, how = bound_gain(usable, change.freed_hz, problem.demands)
        achieved = None if why else achiever.gain(change, achiever.deadline)
        method = ValueMethod.PLAN_UPGRADE if achieved is not None else None
        gains.append(SpectrumGain(change.freed_hz, gain, how, achieved, method))
    exclusions = tuple(
        ExclusionValue(i, x.note, g)
        for i, (x, g) in enumerate(zip(problem.block.exclusions, gains[2:], strict=True))
    )
    return SpectrumValue(step, gains[0], gains[1], exclusions, _note(why, achiever, gains))


def _note(why: str, achiever: _Achiever, gains: Sequence[SpectrumGain]) -> str:
    """What a reader of the achieved figures needs to know, in words (empty when nothing)."""
    said = [why] if why else []
    if not why and any(g.achieved_gain_bps is None for g in gains):
        said.append(
            "some achieved gains were left out: their local search did not finish in the time "
            "left, or the solve was cancelled"
        )
    if achiever.polished_bps > 0:
        said.append(
            f"achieved gains are measured from this plan improved in place by local search "
            f"({achiever.polished_bps:,.0f} bit/s more without any extra spectrum)"
        )
    return "; ".join(said)
