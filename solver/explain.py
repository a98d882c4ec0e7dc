"""Why a served carrier runs below its demand's target rate, and what would lift it.

For every carrier of a finished plan whose throughput is below its demand's target T,
:func:`explain_shortfalls` tests alternatives with the same physics and candidate code the
planner uses, each with one thing changed, and reports which limit binds (:class:`LimitedBy`).

Words used below.  A *configuration* is a MODCOD entry e of the demand's profile table
(restricted to the demand's modulations), a roll-off α and an amplifier back-off b of the
profile, and a symbol rate Rs on the profile's grid.  It *closes* when its effective Es/N0 at Rs
(thermal noise and error-vector floor, :func:`solver.physics.distortion.effective_esn0_db`)
reaches e's threshold plus the demand's margin; it *carries the target* at
R_T(e) = max(T / η_e, Rs_min) rounded up to the grid (η_e: information bits per symbol).
The carrier's *room* is the spectrum between the facing edge of what lies below it and of what
lies above it (a neighbouring carrier, a block edge or an exclusion).  A configuration's guards
come from :func:`solver.candidates.family_for` (the function that settles every plan's guards);
its *own footprint* is its allocated width Rs(1 + α) plus, on each side, the least gap its own
limits ask: its leakage-limit guard towards a carrier, its edge guard towards an edge or an
exclusion.  *Placing* a configuration in a room gives each side its own guard and shares the
rest in proportion to how much more the planner's spacing rule (the larger of two neighbours'
guards) asks there; the plan with it placed is then judged by :func:`solver.verify.verify_plan`
(leakage and interference measured from the spectra).

The tests, each deciding whether a category *holds*:

``equipment``
    No configuration closes at R_T(e) within the profile's symbol-rate maximum, but one would
    with that maximum lifted or with the amplifier at another whole-dB back-off from 1 dB up to
    6 dB beyond the largest the profile allows (``symbol_rate_needed_baud``: the least R_T(e) of
    the profile's own back-offs that closes above the maximum); or no configuration's footprint
    fits the room, but one at a roll-off the profile lacks (of :data:`CATALOGUE_ROLLOFFS`) would.
``modcod-table``
    An entry outside the profile's table (the ``"full"`` catalogue with the profile's
    implementation loss, the demand's modulations) closes and carries the target, either at any
    width where no table entry does, or in the carrier's current allocated width, at the
    profile's roll-offs and back-offs, where no table entry does at its link.
``neighbour``
    Some configuration carries the target (profile as is) and the one with the least own
    footprint fits the room, but placed there the plan fails verification (a neighbour's
    leakage, or interference between the two, costs the width it needs).
``spectrum``
    Some configuration carries the target, but even the least own footprint exceeds the room.
``unused-room``
    The configuration with the least own footprint fits the room and the plan with it placed
    there passes verification: nothing but the optimiser's objective or time limit stopped it.
``link``
    A higher Es/N0 would let a configuration of the profile carry the target in the carrier's
    current allocated width (``esn0_to_target_db``), or the demand states C/N0 and no
    configuration carries the target at any width (widening lowers Es/N0: the rate saturates).

The category reported (``limited_by``) is the first that holds in :data:`ORDER` (unused-room,
equipment, modcod-table, neighbour, spectrum, link: room it could already use first, then the
radio and its table, then the plan around the carrier, then the physics of the link); the others
that hold are listed (``also``).  When none holds, ``link`` is reported: the profile closes no
configuration that carries the target, which is the link's limit by elimination.

What lifts it:

* ``spectrum_to_target_hz`` — extra spectrum beside the carrier with which the configuration of
  least own footprint reaches the target: from its own footprint less the room, that much
  spectrum is inserted directly above the carrier (everything above moved up), the
  configuration placed and the whole plan verified; while verification fails the extra grows
  by doubling steps (the larger of two raster steps and 1 % of its width,
  :data:`~solver.explain_room.VERIFY_TRIES` tries) and is then halved back towards the last
  failure (:data:`~solver.explain_room.REFINE_STEPS` times); None when no try passes.  Zero
  for ``unused-room``; None when no configuration carries the target.
* ``esn0_to_target_db`` — the demand's stated Es/N0 (at its profile's reference back-off; for
  a C/N0 link, at the carrier's current symbol rate, so C/N0 = it + 10·log10(Rs)) at which a
  configuration of its profile carries the target in the carrier's current allocated width
  (the least over entries, roll-offs and back-offs); None when that needs none higher than now,
  or none does at any Es/N0 (the table's top is too slow for the width, or the EVM floor caps).
* ``symbol_rate_needed_baud`` — as above, for the symbol-rate maximum.
"""

from __future__ import annotations

import math
import time
from collections.abc import Collection, Sequence
from dataclasses import dataclass
from enum import StrEnum

import numpy as np

from solver import equipment
from solver import explain_link as lk
from solver import explain_room as rm
from solver.candidates import family_for
from solver.model import (
    Carrier,
    CarrierConfig,
    Demand,
    EquipmentProfile,
    Problem,
    Transmitter,
    format_code_rate,
)
from solver.verify import verify_plan

__all__ = [
    "CATALOGUE_ROLLOFFS",
    "ORDER",
    "LimitedBy",
    "Shortfall",
    "explain_shortfalls",
    "fill_unused_room",
    "meets_target",
]


class LimitedBy(StrEnum):
    """What binds a carrier below its demand's target (see the module's docstring)."""

    UNUSED_ROOM = "unused-room"
    EQUIPMENT = "equipment"
    MODCOD_TABLE = "modcod-table"
    NEIGHBOUR = "neighbour"
    SPECTRUM = "spectrum"
    LINK = "link"


ORDER: tuple[LimitedBy, ...] = tuple(LimitedBy)
"""The order in which a binding limit is reported first."""

CATALOGUE_ROLLOFFS: tuple[float, ...] = Transmitter().rolloffs
"""Roll-offs a transmitter may offer (the request's default list), for the equipment test."""

TARGET_TOLERANCE = 1e-6
"""A carrier within this relative distance of its target meets it (as the plan's notices)."""


@dataclass(frozen=True)
class Shortfall:
    """Why one served carrier is below its target, and what would lift it.

    Attributes
    ----------
    demand_id : str
    limited_by : LimitedBy
        The first limit in :data:`ORDER` that holds.
    also : tuple of LimitedBy
        Every other limit that holds, in :data:`ORDER`.
    spectrum_to_target_hz : float or None
        Extra spectrum beside the carrier (Hz) with which it reaches its target.
    esn0_to_target_db : float or None
        Stated Es/N0 (dB) with which it reaches its target in its current width.
    symbol_rate_needed_baud : float or None
        Symbol rate (baud) the target needs, above the profile's maximum.
    detail : str
        One line in words.
    widened : Carrier or None
        The carrier at its target, placed in its room enlarged by ``spectrum_to_target_hz``
        inserted directly above it (every frequency above its current upper edge moved up by
        that much), as verified; None with no ``spectrum_to_target_hz``.
    """

    demand_id: str
    limited_by: LimitedBy
    also: tuple[LimitedBy, ...]
    spectrum_to_target_hz: float | None
    esn0_to_target_db: float | None
    symbol_rate_needed_baud: float | None
    detail: str
    widened: Carrier | None = None


def meets_target(demand: Demand, throughput_bps: float) -> bool:
    """Whether ``throughput_bps`` reaches the demand's target (within :data:`TARGET_TOLERANCE`)."""
    return throughput_bps >= demand.target_rate_bps * (1 - TARGET_TOLERANCE)


# ----------------------------------------------------------------------------- the tests


@dataclass(frozen=True)
class _Case:
    """One carrier below target, with what every test reads."""

    problem: Problem
    ordered: Sequence[Carrier]
    index: int
    demand: Demand
    profile: EquipmentProfile
    strongest_db: float

    @property
    def carrier(self) -> Carrier:
        return self.ordered[self.index]

    @property
    def sides(self) -> tuple[rm.Side, rm.Side]:
        return rm.sides_of(self.problem, self.ordered, self.index)


Found = dict[LimitedBy, str]
"""The limits that hold, each with its line in words."""


def _targets(case: _Case, rolloffs: Sequence[float]) -> list[rm.Target]:
    """Every configuration of the profile's table and back-offs at ``rolloffs`` that closes
    and carries the target at R_T, with its guards (:func:`~solver.candidates.family_for`)."""
    options = equipment.backoff_options(case.profile)
    entries = lk.table(case.problem, case.profile, case.demand)
    links = lk.links(case.demand, entries, options, case.profile)
    rate = lk.target_rate(case.demand, case.profile, links)
    out = []
    for k in np.flatnonzero(lk.reach(case.demand, case.profile, links)).tolist():
        entry, option = entries[k // len(options)], options[k % len(options)]
        for rolloff in rolloffs:
            fam = family_for(
                case.problem,
                case.demand,
                entry.modulation,
                entry.code_rate,
                rolloff,
                float(rate[k]),
                case.strongest_db,
                output_backoff_db=option.output_backoff_db,
            )
            if fam is not None:
                config = fam.top.config
                leak = fam.leakage_guard_per_baud * config.symbol_rate_baud
                out.append(rm.Target(config, leak))
    return out


def _settings(config: CarrierConfig) -> str:
    return (
        f"{config.modulation.value} {format_code_rate(config.code_rate)} at "
        f"{config.symbol_rate_baud:,.0f} Bd, roll-off {config.rolloff:g}"
    )


def _room_limits(case: _Case, targets: Sequence[rm.Target]) -> tuple[Found, rm.Widening]:
    """Spectrum, neighbour or unused room, for a demand that some configuration serves at
    target; and the extra spectrum with which it passes verification."""
    sides, room = case.sides, rm.room_width(case.sides)
    best = min(targets, key=lambda t: rm.own_footprint(t, sides))
    need = rm.own_footprint(best, sides)
    widening = rm.extra_passing(case.problem, case.ordered, case.index, best, need - room)
    violation = widening.first_violation
    where = f"the {room:,.0f} Hz between {sides[0].name} and {sides[1].name}"
    needs = (
        f"{_settings(best.config)} carries the target in {need:,.0f} Hz with the guards its "
        "own leakage limits ask"
    )
    found: Found = {}
    if need > room:
        found[LimitedBy.SPECTRUM] = f"{needs}, more than {where}"
        if _rolloff_fits(case, room):
            found[LimitedBy.EQUIPMENT] = (
                f"a roll-off its profile lacks (it offers {_listed(case.profile.rolloffs)}) "
                "would fit the target in the room it has"
            )
    elif violation is None:
        found[LimitedBy.UNUSED_ROOM] = (
            f"{needs}, which fits {where} and passes verification: the optimiser left it "
            "narrower (its objective or time limit)"
        )
    else:
        found[LimitedBy.NEIGHBOUR] = (
            f"{needs}, which fits {where}, but there verification fails: {violation.detail}"
        )
    return found, widening


def _listed(values: Sequence[float]) -> str:
    return ", ".join(f"{v:g}" for v in values)


def _rolloff_fits(case: _Case, room_hz: float) -> bool:
    """Whether a configuration at a roll-off of :data:`CATALOGUE_ROLLOFFS` the profile lacks
    carries the target with its own guards within the room."""
    missing = [a for a in CATALOGUE_ROLLOFFS if a not in case.profile.rolloffs]
    if not missing:
        return False
    return any(rm.own_footprint(t, case.sides) <= room_hz for t in _targets(case, missing))


def _intrinsic_limits(case: _Case) -> tuple[Found, float | None]:
    """Equipment and MODCOD-table limits for a demand that no configuration serves at target at
    any width; and the symbol rate the target needs above the profile's maximum."""
    demand, profile, found = case.demand, case.profile, Found()
    entries = lk.table(case.problem, profile, demand)
    own = lk.links(demand, entries, equipment.backoff_options(profile), profile)
    rate = lk.target_rate(demand, profile, own)
    over = np.flatnonzero(lk.closes(demand, own, rate) & (rate > profile.symbol_rate_max_baud))
    needed = None
    if over.size:
        k = int(over[np.argmin(rate[over])])
        needed = float(rate[k])
        found[LimitedBy.EQUIPMENT] = (
            f"{own.names[k]} needs {needed:,.0f} Bd for the target, above its profile's maximum "
            f"{profile.symbol_rate_max_baud:,.0f} Bd"
        )
    else:
        relaxed = lk.links(demand, entries, lk.relaxed_backoffs(profile), profile)
        hit = np.flatnonzero(lk.reach(demand, profile, relaxed))
        if hit.size:
            k = int(hit[0])
            allowed = [o.output_backoff_db or 0.0 for o in equipment.backoff_options(profile)]
            found[LimitedBy.EQUIPMENT] = (
                f"{relaxed.names[k]} at {relaxed.backoff_db[k]:g} dB back-off (its profile allows "
                f"{_listed(allowed)} dB) would carry the target"
            )
    options = equipment.backoff_options(profile)
    outside = lk.links(demand, lk.outside_table(case.problem, profile, demand), options, profile)
    hit = np.flatnonzero(lk.reach(demand, profile, outside))
    if hit.size:
        found[LimitedBy.MODCOD_TABLE] = (
            f"{outside.names[int(hit[0])]}, outside its profile's table, would carry the target "
            "at its link"
        )
    return found, needed


@dataclass(frozen=True)
class _EsN0:
    """The stated Es/N0 (dB) the target needs in the carrier's width, with what it has now."""

    needed_db: float
    now_db: float
    name: str


def _esn0_in_width(case: _Case) -> _EsN0 | None:
    """The least stated Es/N0 at which some configuration of the profile carries the target in
    the carrier's current allocated width (for a C/N0 link, at its current symbol rate)."""
    demand, profile, cfg = case.demand, case.profile, case.carrier.config
    links = lk.links(
        demand, lk.table(case.problem, profile, demand), equipment.backoff_options(profile), profile
    )
    stated_needed = lk.thermal_needed(links) - links.offset_db
    now = float(lk.stated_db(demand, np.array([cfg.symbol_rate_baud]))[0])
    best = _EsN0(math.inf, now, "")
    for rolloff in profile.rolloffs:
        rate = lk.width_rate(profile, cfg.allocated_bandwidth_hz, rolloff)
        carries = rate * links.net >= demand.target_rate_bps * (1 - 1e-9)
        if rate <= 0 or not carries.any():
            continue
        # for a C/N0 link: the C/N0 needed at this rate, as Es/N0 at the current rate
        shift = 10.0 * math.log10(rate / cfg.symbol_rate_baud) if demand.cn0_dbhz else 0.0
        needed = np.where(carries, stated_needed + shift, np.inf)
        k = int(np.argmin(needed))
        if needed[k] < best.needed_db:
            best = _EsN0(float(needed[k]), now, f"{links.names[k]}, roll-off {rolloff:g}")
    if not math.isfinite(best.needed_db) or best.needed_db <= now + 1e-9:
        return None
    return best


def _table_in_width(case: _Case) -> str | None:
    """Words when an entry outside the profile's table, and none in it, carries the target in
    the carrier's current allocated width at its link (profile's roll-offs and back-offs)."""
    demand, profile, width = case.demand, case.profile, case.carrier.config.allocated_bandwidth_hz
    options = equipment.backoff_options(profile)
    outside = lk.links(demand, lk.outside_table(case.problem, profile, demand), options, profile)
    inside = lk.links(demand, lk.table(case.problem, profile, demand), options, profile)
    for rolloff in profile.rolloffs:
        rate = lk.width_rate(profile, width, rolloff)
        if rate <= 0:
            continue
        target = demand.target_rate_bps * (1 - 1e-9)
        at = np.array([rate])
        if np.any((rate * inside.net >= target) & lk.closes(demand, inside, at)):
            return None
        hit = np.flatnonzero((rate * outside.net >= target) & lk.closes(demand, outside, at))
        if hit.size:
            return (
                f"{outside.names[int(hit[0])]}, outside its profile's table, would carry the "
                f"target in its {width:,.0f} Hz at its link"
            )
    return None


def _link_words(case: _Case, esn0: _EsN0 | None, served_at_any_width: bool) -> str:
    width = case.carrier.config.allocated_bandwidth_hz
    in_width = (
        ""
        if esn0 is None
        else f"in its {width:,.0f} Hz it needs Es/N0 {esn0.needed_db:.2f} dB for the target "
        f"({esn0.name}), {esn0.now_db:.2f} dB now"
    )
    if served_at_any_width or case.demand.cn0_dbhz is None:
        return in_width or "no configuration of its profile carries the target at its link"
    most = _most_at_any_width(case)
    saturates = (
        f"at its link limit: with C/N0 {case.demand.cn0_dbhz:.1f} dBHz a wider carrier loses "
        f"Es/N0, so none carries more than {most:,.0f} bit/s at any width"
    )
    return f"{saturates}; {in_width}" if in_width else saturates


def _most_at_any_width(case: _Case) -> float:
    """The most any (entry, back-off) of the profile carries on a C/N0 link (bit/s)."""
    demand, profile = case.demand, case.profile
    links = lk.links(
        demand, lk.table(case.problem, profile, demand), equipment.backoff_options(profile), profile
    )
    cn0 = -math.inf if demand.cn0_dbhz is None else demand.cn0_dbhz
    with np.errstate(over="ignore"):
        limit = 10.0 ** ((cn0 + links.offset_db - lk.thermal_needed(links)) / 10.0)
    rate = equipment.grid_floor(
        np.minimum(limit, profile.symbol_rate_max_baud), profile.symbol_rate_step_baud
    )
    return float(np.max(rate * links.net, initial=0.0))


# ----------------------------------------------------------------------------- the verdict


def _explain(case: _Case) -> Shortfall:
    configs = _targets(case, case.profile.rolloffs)
    widening, rate_needed = rm.Widening(None, None, None), None
    if configs:
        found, widening = _room_limits(case, configs)
    else:
        found, rate_needed = _intrinsic_limits(case)
    in_width = _table_in_width(case)
    if in_width is not None:
        found.setdefault(LimitedBy.MODCOD_TABLE, in_width)
    esn0 = _esn0_in_width(case)
    if esn0 is not None or (not configs and case.demand.cn0_dbhz is not None) or not found:
        found[LimitedBy.LINK] = _link_words(case, esn0, bool(configs))
    held = [category for category in ORDER if category in found]
    return Shortfall(
        demand_id=case.demand.id,
        limited_by=held[0],
        also=tuple(held[1:]),
        spectrum_to_target_hz=widening.extra_hz,
        esn0_to_target_db=None if esn0 is None else esn0.needed_db,
        symbol_rate_needed_baud=rate_needed,
        detail=found[held[0]],
        widened=widening.carrier,
    )


def explain_shortfalls(problem: Problem, carriers: Sequence[Carrier]) -> dict[str, Shortfall]:
    """Why each carrier below its demand's target is there, and what would lift it.

    Parameters
    ----------
    problem : Problem
        The request the plan answers.
    carriers : sequence of Carrier
        The plan's placed carriers (their guards settled, as a finished plan reports them).

    Returns
    -------
    dict of str to Shortfall
        By demand id, one entry per carrier whose throughput is below its demand's target
        (:func:`meets_target`); carriers at target are left out.  How each limit is decided,
        and the order in which they are reported, is in the module's docstring.
    """
    demands = {d.id: d for d in problem.demands}
    ordered = sorted(carriers, key=lambda c: c.center_hz)
    strongest = equipment.strongest_level_db(problem)
    out: dict[str, Shortfall] = {}
    for i, carrier in enumerate(ordered):
        demand = demands.get(carrier.demand_id)
        if demand is None or meets_target(demand, carrier.config.throughput_bps):
            continue
        profile = equipment.profile_for(problem, demand)
        case = _Case(problem, ordered, i, demand, profile, strongest)
        out[demand.id] = _explain(case)
    return out


def fill_unused_room(
    problem: Problem,
    carriers: Sequence[Carrier],
    keep: Collection[str],
    deadline: float,
) -> tuple[Carrier, ...]:
    """``carriers`` with each carrier below target whose target configuration fits the room it
    already has (the ``unused-room`` case of :func:`explain_shortfalls`) moved to it, one at a
    time, each kept only when the whole plan still passes verification.

    Demands in ``keep`` do not change; the work stops at ``deadline``
    (``time.perf_counter()``).  Nothing moves outside its own room, so no other carrier does.
    """
    demands = {d.id: d for d in problem.demands}
    ordered = sorted(carriers, key=lambda c: c.center_hz)
    strongest = equipment.strongest_level_db(problem)
    for i, carrier in enumerate(ordered):
        demand = demands.get(carrier.demand_id)
        if time.perf_counter() > deadline:
            break
        if demand is None or demand.id in keep:
            continue
        if meets_target(demand, carrier.config.throughput_bps):
            continue
        case = _Case(problem, ordered, i, demand, equipment.profile_for(problem, demand), strongest)
        targets = _targets(case, case.profile.rolloffs)
        if not targets:
            continue
        found, widening = _room_limits(case, targets)
        if LimitedBy.UNUSED_ROOM not in found or widening.carrier is None:
            continue
        trial = [*ordered[:i], widening.carrier, *ordered[i + 1 :]]
        if verify_plan(problem, trial).passed:
            ordered = trial
    return tuple(ordered)
