"""Independent check of a finished plan, from the carriers' own spectra.

The packer works with integer guard needs on a raster and a segment-capacity formula.  This
module ignores all of that and looks at the placed carriers only:

* every carrier lies inside the block and outside every exclusion, and no two overlap;
* every carrier's leakage ratio towards its actual neighbour at the actual gap meets the
  leakage limit, and towards every block edge and exclusion it does not overlap — whatever lies
  between — the edge limit (a carrier that overlaps one is reported as outside the block or in
  the exclusion);
* every carrier's margin after the aggregate interference of all others, each at its relative
  level, integrated through the victim's matched receive filter, stays within
  :data:`INTERFERENCE_ALLOWANCE_DB` of the margin the demand asked for.
"""

from __future__ import annotations

import bisect
import functools
import itertools
import math
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, replace
from enum import StrEnum
from typing import Literal

import numpy as np
from numpy.typing import NDArray

from solver import equipment
from solver.model import Carrier, Problem
from solver.physics import emission

__all__ = [
    "INTERFERENCE_ALLOWANCE_DB",
    "LEAKAGE_TOLERANCE_DB",
    "PairCheck",
    "Verification",
    "Violation",
    "ViolationKind",
    "meets_leakage_limits",
    "verify_change",
    "verify_plan",
]

INTERFERENCE_ALLOWANCE_DB = 0.5
"""How much of a demand's requested margin interference may use (common practice: a fraction
of a dB of the link budget is set aside for adjacent-channel interference; value from memory)."""

Side = Literal["below", "above"]

LEAKAGE_TOLERANCE_DB = 0.05
"""Numerical slack on leakage ratios (profile interpolation)."""

_PLACEMENT_TOLERANCE_HZ = 1e-6
"""Numerical slack on edges (floating-point round-off of centres and widths)."""


class ViolationKind(StrEnum):
    OUTSIDE_BLOCK = "outside_block"
    IN_EXCLUSION = "in_exclusion"
    OVERLAP = "overlap"
    LEAKAGE = "leakage"
    EDGE_LEAKAGE = "edge_leakage"
    INTERFERENCE = "interference"


@dataclass(frozen=True)
class Violation:
    """One failed check; ``demand_id`` is the carrier to blame (the leaker or the victim)."""

    demand_id: str
    kind: ViolationKind
    detail: str
    culprit: str | None = None
    needed_db: float = math.nan


@dataclass(frozen=True)
class Verification:
    """The carriers with their measured figures filled in, and every violation found."""

    carriers: tuple[Carrier, ...]
    violations: tuple[Violation, ...]

    @property
    def passed(self) -> bool:
        return not self.violations


def _key(problem: Problem, carrier: Carrier, *, linear: bool = False) -> emission.EmissionKey:
    return equipment.carrier_emission_key(problem, carrier.config, linear=linear)


@dataclass(frozen=True)
class _LeakCheck:
    """One leakage check on one side of a carrier: the gap (Hz) from its nominal edge to what
    it must protect, which limit applies, and what that is (a demand id or an edge's name)."""

    gap_hz: float
    kind: Literal[ViolationKind.LEAKAGE, ViolationKind.EDGE_LEAKAGE]
    towards: str


@dataclass(frozen=True)
class _Obstacle:
    """Spectrum no carrier may use: outside the block, or an exclusion (Hz)."""

    start_hz: float
    stop_hz: float
    name: str


def _obstacles(problem: Problem) -> list[_Obstacle]:
    """Block outside and exclusions, sorted."""
    block = problem.block
    spans = [
        _Obstacle(-math.inf, block.start_hz, "the lower block edge"),
        _Obstacle(block.stop_hz, math.inf, "the upper block edge"),
    ]
    for x in block.exclusions:
        spans.append(
            _Obstacle(x.start_hz, x.stop_hz, f"exclusion ({x.note})" if x.note else "exclusion")
        )
    return sorted(spans, key=lambda o: (o.start_hz, o.stop_hz))


def _placement_violations(problem: Problem, carriers: Sequence[Carrier]) -> list[Violation]:
    found: list[Violation] = []
    block = problem.block
    for c in carriers:
        if (
            c.lower_edge_hz < block.start_hz - _PLACEMENT_TOLERANCE_HZ
            or c.upper_edge_hz > block.stop_hz + _PLACEMENT_TOLERANCE_HZ
        ):
            found.append(
                Violation(c.demand_id, ViolationKind.OUTSIDE_BLOCK, "carrier leaves the block")
            )
        for x in block.exclusions:
            if (
                c.lower_edge_hz < x.stop_hz - _PLACEMENT_TOLERANCE_HZ
                and c.upper_edge_hz > x.start_hz + _PLACEMENT_TOLERANCE_HZ
            ):
                note = f" ({x.note})" if x.note else ""
                found.append(
                    Violation(
                        c.demand_id, ViolationKind.IN_EXCLUSION, f"carrier enters exclusion{note}"
                    )
                )
    for a, b in itertools.pairwise(carriers):
        if b.lower_edge_hz < a.upper_edge_hz - _PLACEMENT_TOLERANCE_HZ:
            found.append(Violation(b.demand_id, ViolationKind.OVERLAP, f"overlaps {a.demand_id}"))
    return found


def _obstacle_gaps(obstacles: Sequence[_Obstacle], c: Carrier, side: Side) -> list[_LeakCheck]:
    """A check against every obstacle wholly on ``side`` of the carrier, nearest first.

    An obstacle the carrier overlaps is left out: the carrier is reported as outside the block
    or in the exclusion instead, and a leakage ratio at a negative gap would mean nothing.
    """
    if side == "below":
        gaps = [
            (c.lower_edge_hz - o.stop_hz, o.name)
            for o in obstacles
            if o.stop_hz <= c.lower_edge_hz + _PLACEMENT_TOLERANCE_HZ
        ]
    else:
        gaps = [
            (o.start_hz - c.upper_edge_hz, o.name)
            for o in obstacles
            if o.start_hz >= c.upper_edge_hz - _PLACEMENT_TOLERANCE_HZ
        ]
    return [_LeakCheck(gap, ViolationKind.EDGE_LEAKAGE, name) for gap, name in sorted(gaps)]


def _side_ratio(problem: Problem, c: Carrier, gap_hz: float, side: Side) -> float:
    key = _key(problem, c)
    rs = c.config.symbol_rate_baud
    # Beyond the profile's reach the leakage is taken at its farthest gap (conservative).
    gap = min(max(gap_hz, 0.0), emission.get_profile(key).max_gap * rs * (1 - 1e-9))
    return float(emission.leakage_ratio_db_at(key, rs, gap, side))


def _side_checks(
    obstacles: Sequence[_Obstacle], c: Carrier, side: Side, neighbour: Carrier | None
) -> list[_LeakCheck]:
    """What ``c`` must protect on ``side``, nearest first: its neighbour (unless an edge or
    exclusion lies between them) and every block edge and exclusion, whoever lies between."""
    checks = _obstacle_gaps(obstacles, c, side)
    if neighbour is not None:
        gap = (
            neighbour.lower_edge_hz - c.upper_edge_hz
            if side == "above"
            else c.lower_edge_hz - neighbour.upper_edge_hz
        )
        if not checks or gap < checks[0].gap_hz:
            checks.insert(0, _LeakCheck(gap, ViolationKind.LEAKAGE, neighbour.demand_id))
    return checks


def _leakage(problem: Problem, carriers: list[Carrier]) -> tuple[list[Carrier], list[Violation]]:
    """Leakage ratio of each carrier towards its neighbour and every edge and exclusion.

    The ratio filled in on each side is the one towards whatever is nearest there.
    """
    rule = _LeakageRule.of(problem)
    return _collected(rule.check(carriers, i) for i in range(len(carriers)))


def _collected(
    checked: Iterable[tuple[Carrier, list[Violation]]],
) -> tuple[list[Carrier], list[Violation]]:
    """Each carrier with its figures filled in, and every violation, from per-carrier checks."""
    out: list[Carrier] = []
    found: list[Violation] = []
    for carrier, violations in checked:
        out.append(carrier)
        found += violations
    return out, found


@dataclass(frozen=True)
class _LeakageRule:
    """The leakage checks of one problem: its obstacles and the limit of each kind of check."""

    problem: Problem
    obstacles: list[_Obstacle]
    limits: dict[ViolationKind, float]

    @classmethod
    def of(cls, problem: Problem) -> _LeakageRule:
        limits = {
            ViolationKind.LEAKAGE: problem.leakage_limit_db,
            ViolationKind.EDGE_LEAKAGE: problem.edge_limit_db,
        }
        return cls(problem, _obstacles(problem), limits)

    def check(
        self, carriers: Sequence[Carrier], i: int, *, first_only: bool = False
    ) -> tuple[Carrier, list[Violation]]:
        """Carrier ``i`` of ``carriers`` (sorted by centre) with its leakage ratios filled in,
        and what it fails (only the first failure when ``first_only``, the ratios then
        incomplete)."""
        c = carriers[i]
        found: list[Violation] = []
        ratios: dict[Side, float] = {"below": math.inf, "above": math.inf}
        sides: tuple[tuple[Side, Carrier | None], ...] = (
            ("below", carriers[i - 1] if i else None),
            ("above", carriers[i + 1] if i + 1 < len(carriers) else None),
        )
        for side, neighbour in sides:
            for k, check in enumerate(_side_checks(self.obstacles, c, side, neighbour)):
                ratio = _side_ratio(self.problem, c, check.gap_hz, side)
                if k == 0:
                    ratios[side] = ratio
                limit = self.limits[check.kind]
                if ratio < limit - LEAKAGE_TOLERANCE_DB:
                    found.append(
                        Violation(
                            c.demand_id,
                            check.kind,
                            f"leakage ratio {ratio:.1f} dB towards {check.towards} ({side}) is "
                            f"below the {limit:.1f} dB limit",
                            culprit=c.demand_id,
                            needed_db=limit,
                        )
                    )
                    if first_only:
                        return c, found
        carrier = replace(
            c, leakage_ratio_below_db=ratios["below"], leakage_ratio_above_db=ratios["above"]
        )
        return carrier, found


@dataclass(frozen=True)
class _Emitter:
    """A placed carrier's emission: its profile, level and how far (Hz) its profile reaches."""

    carrier: Carrier
    profile: emission.SpectrumProfile
    level: float
    reach_hz: float
    linear_key: emission.EmissionKey
    shape: int
    """What fixes this carrier's emission and matched filter, whatever its centre (profile,
    filter, symbol rate, level), as a number of :func:`_shape_id`."""

    @classmethod
    def of(cls, problem: Problem, carrier: Carrier, level: float) -> _Emitter:
        key = _key(problem, carrier)
        linear = _key(problem, carrier, linear=True)
        profile = emission.get_profile(key)
        rate = carrier.config.symbol_rate_baud
        reach = float(np.max(np.abs(profile.freq))) * rate
        return cls(carrier, profile, level, reach, linear, _shape_id((key, linear, rate, level)))

    def density(self, freq_hz: NDArray[np.float64]) -> NDArray[np.float64]:
        """Power spectral density (linear, relative units) at ``freq_hz``."""
        c = self.carrier
        return self.level * self.profile.psd_at((freq_hz - c.center_hz) / c.config.symbol_rate_baud)


@functools.lru_cache(maxsize=256)
def _response(key: emission.EmissionKey) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """The matched filter's power response (normalised to 1 at the centre) on its profile's
    grid (Rs units)."""
    matched = emission.get_profile(key)
    return matched.freq, matched.psd / float(matched.psd_at(np.zeros(1))[0])


def _received(
    problem: Problem, victim: _Emitter, emitters: Sequence[_Emitter]
) -> tuple[float, dict[str, float]]:
    """Signal power and each other carrier's power through the victim's matched filter
    (``emitters`` sorted by centre frequency, or few)."""
    rs = victim.carrier.config.symbol_rate_baud
    grid, response = _response(victim.linear_key)
    freq = victim.carrier.center_hz + grid * rs
    signal = _COUPLING.get((victim.shape, -1, 0.0))
    if signal is None:
        signal = float(np.trapezoid(victim.density(freq) * response, freq))
        _remember((victim.shape, -1, 0.0), signal)
    reach = float(np.max(np.abs(grid), initial=0.0)) * rs
    powers: dict[str, float] = {}
    for other in _near(victim, emitters, reach):
        centre = other.carrier.center_hz
        offset = centre - victim.carrier.center_hz
        if abs(offset) > reach + other.reach_hz:
            continue
        found = _COUPLING.get((victim.shape, other.shape, offset))
        if found is None:
            # Only where the other's profile is defined (0 beyond it), with one point either
            # side so the trapezoid keeps every segment that touches it: the same sum, fewer
            # points.
            lo = max(int(np.searchsorted(freq, centre - other.reach_hz, "left")) - 1, 0)
            hi = int(np.searchsorted(freq, centre + other.reach_hz, "right")) + 1
            part = slice(lo, hi)
            density = other.density(freq[part])
            found = float(np.trapezoid(density * response[part], freq[part]))
            _remember((victim.shape, other.shape, offset), found)
        powers[other.carrier.demand_id] = found
    return signal, powers


_SHAPES: dict[tuple[emission.EmissionKey, emission.EmissionKey, float, float], int] = {}
_NEXT_SHAPE = itertools.count()


def _shape_id(shape: tuple[emission.EmissionKey, emission.EmissionKey, float, float]) -> int:
    """A number per shape, never given to another (so remembered pairs stay right when the
    table of shapes is emptied and numbered afresh)."""
    found = _SHAPES.get(shape)
    if found is None:
        if len(_SHAPES) >= COUPLING_ENTRIES:
            _SHAPES.clear()
        found = _SHAPES[shape] = next(_NEXT_SHAPE)
    return found


_COUPLING: dict[tuple[int, int, float], float] = {}
"""Power one carrier puts through another's matched filter, by the two carriers' shapes and
the offset between their centres (and each carrier's own signal, with no other shape): the
same two carriers at the same offset give the same figure wherever they sit, so a plan
verified again after a small change (a carrier moved, added or dropped) computes only the
pairs that changed."""

COUPLING_ENTRIES = 400_000
"""Pairs remembered (some 100 MB at most); the memory is emptied when full."""


def _remember(key: tuple[int, int, float], value: float) -> None:
    if len(_COUPLING) >= COUPLING_ENTRIES:
        _COUPLING.clear()
    _COUPLING[key] = value


def _near(victim: _Emitter, emitters: Sequence[_Emitter], reach_hz: float) -> list[_Emitter]:
    """The other emitters whose centres lie within ``reach_hz`` plus the farthest reach of
    any emitter from the victim's centre (``emitters`` sorted by centre, when many)."""
    if len(emitters) <= 8:
        return [e for e in emitters if e is not victim]
    centre = victim.carrier.center_hz
    widest = max(e.reach_hz for e in emitters)
    centres = [e.carrier.center_hz for e in emitters]
    lo = bisect.bisect_left(centres, centre - reach_hz - widest)
    hi = bisect.bisect_right(centres, centre + reach_hz + widest)
    return [e for e in emitters[lo:hi] if e is not victim]


def _needed_c_over_i_db(esn0_db: float, required_db: float, floor_db: float) -> float:
    """C/I that leaves exactly ``floor_db`` of margin: 1/(1/Es/N0 + 1/(C/I)) = req + floor."""
    target = 10.0 ** (-(required_db + floor_db) / 10.0) - 10.0 ** (-esn0_db / 10.0)
    return math.inf if target <= 0 else -10.0 * math.log10(target)


def _interference(
    problem: Problem, carriers: list[Carrier]
) -> tuple[list[Carrier], list[Violation]]:
    """C/I through each victim's matched filter and the margin that is left."""
    rule = _InterferenceRule.of(problem)
    emitters = [rule.emitter(c) for c in carriers]
    by_centre = sorted(emitters, key=lambda e: e.carrier.center_hz)
    return _collected(rule.check(emitter, by_centre) for emitter in emitters)


@dataclass(frozen=True)
class _InterferenceRule:
    """The interference check of one problem: each demand's relative level and the margin
    interference must leave it."""

    problem: Problem
    levels: dict[str, float]
    floors: dict[str, float]

    @classmethod
    def of(cls, problem: Problem) -> _InterferenceRule:
        levels = {d.id: 10.0 ** (d.relative_level_db / 10.0) for d in problem.demands}
        floors = {d.id: d.margin_db - INTERFERENCE_ALLOWANCE_DB for d in problem.demands}
        return cls(problem, levels, floors)

    def emitter(self, carrier: Carrier) -> _Emitter:
        """``carrier``'s emission at its demand's level, moved by its back-off."""
        offset_db = equipment.level_offset_db(self.problem, carrier.config)
        level = self.levels[carrier.demand_id] * 10.0 ** (offset_db / 10.0)
        return _Emitter.of(self.problem, carrier, level)

    def check(
        self, victim: _Emitter, by_centre: Sequence[_Emitter]
    ) -> tuple[Carrier, list[Violation]]:
        """The victim with its C/I and margin after interference filled in, and what it fails
        (``by_centre``: every emitter, sorted by centre)."""
        v = victim.carrier
        signal, powers = _received(self.problem, victim, by_centre)
        interference = sum(powers.values())
        ci_lin = math.inf if interference <= 0 else signal / interference
        c_over_i = 10.0 * math.log10(ci_lin)
        esn0_lin = 10.0 ** (v.config.esn0_db / 10.0)
        effective_db = 10.0 * math.log10(1.0 / (1.0 / esn0_lin + 1.0 / ci_lin))
        margin_after = effective_db - v.config.required_esn0_db
        floor = self.floors[v.demand_id]
        found: list[Violation] = []
        if margin_after < floor:
            culprit = max(powers, key=lambda d: powers[d])
            needed = _needed_c_over_i_db(v.config.esn0_db, v.config.required_esn0_db, floor)
            found.append(
                Violation(
                    v.demand_id,
                    ViolationKind.INTERFERENCE,
                    f"margin after interference {margin_after:.2f} dB is below {floor:.2f} dB "
                    f"(C/I {c_over_i:.1f} dB, {needed:.1f} dB needed; most from {culprit})",
                    culprit=culprit,
                    needed_db=needed,
                )
            )
        return replace(v, c_over_i_db=c_over_i, margin_after_interference_db=margin_after), found

    def hears(self, victim: _Emitter, other: _Emitter) -> bool:
        """Whether ``other``'s emission reaches into ``victim``'s matched filter at all."""
        offset = abs(other.carrier.center_hz - victim.carrier.center_hz)
        return offset <= _hearing_hz(victim) + other.reach_hz


NEIGHBOUR_SHARE_DB = 10.0 * math.log10(2.0)
"""A victim's interference allowance is shared by its two neighbours (3 dB each)."""


class PairCheck:
    """The interference rule of :func:`verify_plan` for two neighbours alone: each must keep
    its interference into the other's matched filter within half the other's allowance.

    :meth:`gap_units` finds the smallest gap (raster units) at which both hold, by bisection
    between 0 and an upper bound known to pass; the leakage-ratio guards are the caller's.
    """

    def __init__(self, problem: Problem) -> None:
        self.problem = problem
        self.rule = _InterferenceRule.of(problem)

    def _passes(self, low: Carrier, high: Carrier, gap_hz: float) -> bool:
        centre = low.upper_edge_hz + gap_hz + high.config.allocated_bandwidth_hz / 2
        high = replace(high, center_hz=centre)
        pair = [self.rule.emitter(low), self.rule.emitter(high)]
        for victim, other in ((pair[0], pair[1]), (pair[1], pair[0])):
            cfg = victim.carrier.config
            signal, powers = _received(self.problem, victim, [victim, other])
            interference = powers.get(other.carrier.demand_id, 0.0)
            if interference <= 0:
                continue
            floor = self.rule.floors[victim.carrier.demand_id]
            needed = _needed_c_over_i_db(cfg.esn0_db, cfg.required_esn0_db, floor)
            if 10.0 * math.log10(signal / interference) < needed + NEIGHBOUR_SHARE_DB:
                return False
        return True

    def gap_units(
        self, low: Carrier, high: Carrier, upper_units: int, unit_hz: float | None = None
    ) -> int:
        """Smallest gap in units of ``unit_hz`` (the raster unless given; at most
        ``upper_units``) at which both pass."""
        raster = self.problem.block.raster_hz if unit_hz is None else unit_hz
        if self._passes(low, high, 0.0):
            return 0
        lo, hi = 0, max(upper_units, 1)
        while not self._passes(low, high, hi * raster):
            if hi > 1_000_000:
                return upper_units
            lo, hi = hi, 2 * hi
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if self._passes(low, high, mid * raster):
                hi = mid
            else:
                lo = mid
        return hi


def verify_plan(problem: Problem, carriers: Sequence[Carrier]) -> Verification:
    """Check placed carriers against the block, the leakage limits and interference.

    Parameters
    ----------
    problem : Problem
        The request (block, exclusions, limits, demands with their relative levels).
    carriers : sequence of Carrier
        Placed carriers, in any order.

    Returns
    -------
    Verification
        Carriers sorted by frequency with leakage ratios, C/I and margin after interference
        filled in, plus every violation (empty when the plan passes).
    """
    ordered = sorted(carriers, key=lambda c: c.center_hz)
    violations = _placement_violations(problem, ordered)
    ordered, leak = _leakage(problem, ordered)
    ordered, interf = _interference(problem, ordered)
    return Verification(tuple(ordered), tuple(violations + leak + interf))


def meets_leakage_limits(problem: Problem, carriers: Sequence[Carrier], index: int) -> bool:
    """Whether carrier ``index`` of ``carriers`` (sorted by centre) passes the leakage checks
    of :func:`verify_plan`: towards its neighbours and every block edge and exclusion."""
    return not _LeakageRule.of(problem).check(carriers, index, first_only=True)[1]


def verify_change(
    problem: Problem,
    before: Verification,
    changes: Mapping[int, Carrier],
    *,
    first_only: bool = False,
) -> Verification:
    """:func:`verify_plan` of ``before``'s plan with the carriers at the indices of ``changes``
    replaced, computing only what the changes can alter.

    What a carrier's checks read is local: its placement and leakage ratios depend on its
    neighbours on either side, and its interference on the emitters that reach into its matched
    filter.  So only the changed carriers' neighbours' placement and leakage, and the victims
    an old or a new changed carrier reaches, are checked again; every other carrier keeps its
    figures and violations.  A change that reorders the carriers is verified whole.  The
    result equals :func:`verify_plan` on the changed plan (a property test holds it to that).

    With ``first_only`` it stops at the first violation (the changed carriers' own checks
    first, then their victims nearest first): ``passed`` is still exact, but a failing result
    lists one violation and leaves the figures part-filled.
    """
    carriers = list(before.carriers)
    for index, new in changes.items():
        carriers[index] = new
    if any(a.center_hz > b.center_hz for a, b in itertools.pairwise(carriers)):
        return verify_plan(problem, carriers)
    near = sorted({j for i in changes for j in range(i - 1, i + 2) if 0 <= j < len(carriers)})
    near_ids = {carriers[j].demand_id for j in near}
    found: list[Violation] = []
    for i in changes:
        window = carriers[max(i - 2, 0) : i + 2]
        found += [v for v in _placement_violations(problem, window) if v.demand_id in near_ids]
    found = list(dict.fromkeys(found))
    leak_rule = _LeakageRule.of(problem)
    for j in near:
        if first_only and found:
            return Verification(tuple(carriers), tuple(found[:1]))
        carriers[j], leaks = leak_rule.check(carriers, j, first_only=first_only)
        found += leaks
    victims: set[str] = set()
    for j, heard in _interference_after(problem, before, carriers, changes):
        carriers[j] = replace(
            carriers[j],
            c_over_i_db=heard.carrier.c_over_i_db,
            margin_after_interference_db=heard.carrier.margin_after_interference_db,
        )
        victims.add(carriers[j].demand_id)
        found += heard.violations
        if first_only and found:
            return Verification(tuple(carriers), tuple(found[:1]))
    kept = [
        v
        for v in before.violations
        if not (v.kind is ViolationKind.INTERFERENCE and v.demand_id in victims)
        and not (v.kind is not ViolationKind.INTERFERENCE and v.demand_id in near_ids)
    ]
    return Verification(tuple(carriers), (*kept, *found))


@dataclass(frozen=True)
class _Heard:
    carrier: Carrier
    violations: list[Violation]


def _interference_after(
    problem: Problem,
    before: Verification,
    carriers: Sequence[Carrier],
    changes: Mapping[int, Carrier],
) -> Iterator[tuple[int, _Heard]]:
    """Each victim of the changes (the changed carriers first, then those an old or a new
    changed carrier reaches, nearest first) with its interference measured anew."""
    rule = _InterferenceRule.of(problem)
    base = _emitters_of(problem, before, rule)
    emitters = list(base.emitters)
    for i in changes:
        emitters[i] = rule.emitter(carriers[i])
    changed = [emitters[i] for i in changes] + [base.emitters[i] for i in changes]
    reach = base.reach_hz + max(e.reach_hz for e in changed)
    centres = base.centres
    lo = bisect.bisect_left(centres, min(e.carrier.center_hz for e in changed) - reach)
    hi = bisect.bisect_right(centres, max(e.carrier.center_hz for e in changed) + reach)
    middle = sum(centres[i] for i in changes) / len(changes)
    others = sorted(
        (j for j in range(lo, hi) if j not in changes),
        key=lambda j: abs(centres[j] - middle),
    )
    for j in [*changes, *others]:
        victim = emitters[j]
        if j in changes or any(rule.hears(victim, e) for e in changed):
            carrier, violations = rule.check(victim, emitters)
            yield j, _Heard(carrier, violations)


@dataclass(frozen=True)
class _PlanEmitters:
    """A verified plan's emitters (in its order, which is by centre), their centres, and the
    farthest any of them reaches or hears (Hz)."""

    plan: Verification
    emitters: list[_Emitter]
    centres: list[float]
    reach_hz: float


_LAST_EMITTERS: list[_PlanEmitters] = []
"""The emitters of the plan last passed to :func:`verify_change` (a search tries many changes
against one plan)."""


def _emitters_of(problem: Problem, plan: Verification, rule: _InterferenceRule) -> _PlanEmitters:
    if _LAST_EMITTERS and _LAST_EMITTERS[0].plan is plan and rule.problem is problem:
        return _LAST_EMITTERS[0]
    emitters = [rule.emitter(c) for c in plan.carriers]
    reach = max((e.reach_hz + _hearing_hz(e) for e in emitters), default=0.0)
    found = _PlanEmitters(plan, emitters, [e.carrier.center_hz for e in emitters], reach)
    _LAST_EMITTERS[:] = [found]
    return found


def _hearing_hz(victim: _Emitter) -> float:
    """How far from its centre (Hz) a carrier's matched filter hears."""
    grid, _ = _response(victim.linear_key)
    return float(np.max(np.abs(grid), initial=0.0)) * victim.carrier.config.symbol_rate_baud
