"""Feasible carrier configurations for one demand, with dominated ones pruned.

For every catalogue entry (modulation, code rate) and every roll-off of the transmitter, the
allocated widths between the demand's minimum rate and what its target rate needs (or what the
link still closes at, whichever is smaller) are laid on a geometric grid with a step of
:data:`WIDTH_STEP` (1 %), each rounded up to an even number of raster steps so that the carrier
centre sits on the raster.  The symbol rate then fills the rounded width, unless the link would
no longer close.  All candidates are computed at once with numpy per demand, then pruned to the
Pareto front of (spectrum cost, throughput) and thinned to at most ``max_per_demand``.

Spectrum cost is counted in integer raster units, the solver's only grid:

* ``width_units`` — the allocated width Rs(1 + α) rounded up to an even number of raster steps;
* ``guard_units`` — the guard the carrier needs at the plan's leakage limit;
* ``edge_units`` — the guard it needs towards a block edge or exclusion (edge limit).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from solver import equipment
from solver.model import (
    CarrierConfig,
    CodeRate,
    Coding,
    Demand,
    EquipmentProfile,
    Modulation,
    Objective,
    Problem,
    format_code_rate,
)
from solver.packing.families import Candidate, DemandOptions, Family, mask_guard_per_baud
from solver.physics import distortion, emission, link, modcod
from solver.verify import INTERFERENCE_ALLOWANCE_DB, LEAKAGE_TOLERANCE_DB

__all__ = [
    "WIDTH_STEP",
    "Candidate",
    "DemandOptions",
    "Family",
    "best_margin_db",
    "bound_candidates",
    "build_candidates",
    "candidate_for",
    "candidate_sets",
    "every_family",
    "family_for",
    "family_up_to_target",
    "least_guard_per_baud",
    "least_width_hz",
    "narrowest_at_min_rate",
]

WIDTH_STEP = 1.01
"""Ratio between neighbouring widths of the candidate grid (rounding loses under 1 % of width)."""

DEFAULT_MAX_PER_DEMAND = 40
"""Candidates kept per demand after Pareto pruning (thinned evenly in log-throughput)."""


@dataclass(frozen=True)
class _Combos:
    """Every (MODCOD, roll-off, back-off) triple a demand's profile allows, as parallel arrays."""

    modulation: tuple[Modulation, ...]
    code_rate: tuple[CodeRate, ...]
    bits_per_symbol: NDArray[np.int64]
    net_bits_per_symbol: NDArray[np.float64]
    required_esn0_db: NDArray[np.float64]
    rolloff: NDArray[np.float64]
    occupied_per_baud: NDArray[np.float64]
    keys: tuple[emission.EmissionKey, ...]
    backoff_db: tuple[float | None, ...]
    esn0_offset_db: NDArray[np.float64]
    """Es/N0 and level change against the reference back-off (dB)."""
    evm_pct: NDArray[np.float64]
    profile: EquipmentProfile
    memo: dict[tuple[str, int, int], float] = field(default_factory=dict, compare=False, repr=False)
    """Guards already looked up, by (rule, combo, level in half dB)."""

    @property
    def size(self) -> int:
        return len(self.modulation)


def _undominated(
    entries: Sequence[equipment.TableEntry], across_modulations: bool
) -> list[equipment.TableEntry]:
    """Entries no other entry beats on both efficiency and required Es/N0.

    Through an amplifier the spectrum depends on the modulation, so entries only compete with
    entries of the same modulation; with a linear transmitter every entry competes.
    """
    kept = []
    for e in entries:
        beaten = any(
            (across_modulations or o.modulation == e.modulation)
            and o.net_bits_per_symbol >= e.net_bits_per_symbol
            and o.required_esn0_db <= e.required_esn0_db
            and (
                o.net_bits_per_symbol > e.net_bits_per_symbol
                or o.required_esn0_db < e.required_esn0_db
            )
            for o in entries
        )
        if not beaten:
            kept.append(e)
    return kept


def _demand_combos(problem: Problem, demand: Demand) -> _Combos:
    """The combos of ``demand``'s profile and allowed modulations."""
    profile = equipment.profile_for(problem, demand)
    return _combos(problem.coding, profile, tuple(demand.modulations))


@functools.lru_cache(maxsize=256)
def _combos(
    coding: Coding, profile: EquipmentProfile, modulations: tuple[Modulation, ...]
) -> _Combos:
    """Table × roll-offs × back-offs, computed once per (coding, profile, modulations)."""
    entries = _undominated(
        equipment.modcod_table(profile, coding, modulations), profile.amplifier is None
    )
    rows = []
    for option in equipment.backoff_options(profile):
        tx = equipment.transmitter_at(profile, option.output_backoff_db)
        keys = {
            (e.modulation, r): emission.EmissionKey.for_carrier(tx, e.modulation, r)
            for e in entries
            for r in profile.rolloffs
        }
        emission.warm_profiles(keys.values())
        for entry in entries:
            for rolloff in profile.rolloffs:
                key = keys[entry.modulation, rolloff]
                occupied = emission.get_profile(key).occupied_bandwidth()
                evm = equipment.carrier_evm_pct(
                    profile, option.output_backoff_db, entry.modulation, rolloff
                )
                rows.append((entry, rolloff, key, occupied, option, evm))
    return _Combos(
        modulation=tuple(r[0].modulation for r in rows),
        code_rate=tuple(r[0].code_rate for r in rows),
        bits_per_symbol=np.array([r[0].bits_per_symbol for r in rows], dtype=np.int64),
        net_bits_per_symbol=np.array([r[0].net_bits_per_symbol for r in rows]),
        required_esn0_db=np.array([r[0].required_esn0_db for r in rows]),
        rolloff=np.array([r[1] for r in rows]),
        occupied_per_baud=np.array([r[3] for r in rows]),
        keys=tuple(r[2] for r in rows),
        backoff_db=tuple(r[4].output_backoff_db for r in rows),
        esn0_offset_db=np.array([r[4].esn0_offset_db for r in rows]),
        evm_pct=np.array([r[5] for r in rows]),
        profile=profile,
    )


def _guard_per_baud(
    combos: _Combos, combo_index: NDArray[np.int64], limits_db: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Guard (Rs units) of each combo at each limit, looked up once per distinct pair."""
    half_db = np.ceil(limits_db * 2.0 - 1e-9).astype(np.int64)  # rounded up to 0.5 dB: safe side
    return _per_pair(combos, combo_index, half_db, _leakage_guard)


def _mask_per_baud(
    combos: _Combos, combo_index: NDArray[np.int64], levels_db: NDArray[np.float64]
) -> NDArray[np.float64]:
    """:func:`mask_guard_per_baud` for each (combo, level), once per distinct pair."""
    half_db = np.ceil(levels_db * 2.0 - 1e-9).astype(np.int64)
    return _per_pair(combos, combo_index, half_db, mask_guard_per_baud)


def _per_pair(
    combos: _Combos,
    combo_index: NDArray[np.int64],
    half_db: NDArray[np.int64],
    rule: Callable[[emission.EmissionKey, float], float],
) -> NDArray[np.float64]:
    """``rule(key, half_db / 2)`` for each (combo, half-dB level), evaluated once per distinct
    pair for the life of ``combos`` (they are cached per catalogue and transmitter)."""
    pairs = np.stack([np.asarray(combo_index, dtype=np.int64), half_db.astype(np.int64)], axis=1)
    unique, inverse = np.unique(pairs.reshape(-1, 2), axis=0, return_inverse=True)
    memo, name = combos.memo, rule.__name__
    values = np.empty(len(unique))
    for n, (combo, half) in enumerate(unique.tolist()):
        value = memo.get((name, combo, half))
        if value is None:
            value = memo[name, combo, half] = rule(combos.keys[combo], half / 2.0)
        values[n] = value
    return np.asarray(values[inverse.reshape(-1)], dtype=np.float64)


def _leakage_guard(key: emission.EmissionKey, limit_db: float) -> float:
    return emission.get_profile(key).guard_needed(limit_db)


def _profile(combos: _Combos, index: int) -> emission.SpectrumProfile:
    return emission.get_profile(combos.keys[index])


_THERMAL_NEEDED = np.vectorize(distortion.thermal_esn0_needed_db, otypes=[float])


def _link_limit_baud(demand: Demand, combos: _Combos) -> NDArray[np.float64]:
    """Largest symbol rate at which each combo still closes the link with the demand's margin:
    its effective Es/N0 (thermal and error-vector floor, :func:`_esn0_db`) at least the
    threshold plus the margin, and inside the profile's symbol-rate range."""
    needed = combos.required_esn0_db + demand.margin_db
    thermal_needed = np.asarray(_THERMAL_NEEDED(needed, combos.evm_pct), dtype=np.float64)
    top = combos.profile.symbol_rate_max_baud
    if demand.cn0_dbhz is not None:
        over = demand.cn0_dbhz + combos.esn0_offset_db - thermal_needed
        return np.minimum(np.asarray(10.0 ** (over / 10.0)), top)
    esn0 = demand.esn0_db if demand.esn0_db is not None else -math.inf
    closes = esn0 + combos.esn0_offset_db >= thermal_needed - 1e-9
    return np.where(closes, top, 0.0)


def _rate_range(demand: Demand, combos: _Combos) -> tuple[NDArray[np.float64], ...]:
    """Per combo: the least symbol rate on the profile's grid that carries the minimum rate,
    and the highest on the grid up to the target's and the link's limit."""
    net, profile = combos.net_bits_per_symbol, combos.profile
    step = profile.symbol_rate_step_baud
    low = np.maximum(demand.min_rate_bps / net, profile.symbol_rate_min_baud)
    high = np.minimum(demand.target_rate_bps / net, _link_limit_baud(demand, combos))
    return equipment.grid_ceil(low, step), np.maximum(equipment.grid_floor(high, step), 0.0)


def _thermal_db(
    demand: Demand, combos: _Combos, idx: NDArray[np.int64], rate_baud: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Es/N0 (dB) from thermal noise of combos ``idx`` at ``rate_baud``."""
    return _stated_esn0_db(demand, rate_baud) + combos.esn0_offset_db[idx]


def _stated_esn0_db(demand: Demand, rate_baud: NDArray[np.float64]) -> NDArray[np.float64]:
    """Es/N0 (dB) the demand's link gives at ``rate_baud`` at its reference back-off."""
    if demand.cn0_dbhz is not None:
        return np.asarray(demand.cn0_dbhz - 10.0 * np.log10(rate_baud))
    esn0 = demand.esn0_db if demand.esn0_db is not None else -math.inf
    return np.asarray(np.full_like(rate_baud, esn0))


def _esn0_db(
    demand: Demand, combos: _Combos, idx: NDArray[np.int64], rate_baud: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Effective Es/N0 (dB) of combos ``idx`` at ``rate_baud``: thermal and error floor."""
    thermal = _thermal_db(demand, combos, idx, rate_baud)
    return np.asarray(distortion.effective_esn0_db(thermal, combos.evm_pct[idx]))


def _even_units(width_hz: NDArray[np.float64], raster_hz: float) -> NDArray[np.int64]:
    units = np.ceil(width_hz / raster_hz - 1e-9).astype(np.int64)
    return np.asarray(units + (units % 2), dtype=np.int64)


class _Grid(NamedTuple):
    combo_index: NDArray[np.int64]
    width_units: NDArray[np.int64]
    symbol_rate_baud: NDArray[np.float64]


def _width_grid(combos: _Combos, demand: Demand, raster_hz: float, max_width_hz: float) -> _Grid:
    """All (combo, width) pairs between the minimum rate and min(target, link limit)."""
    step = combos.profile.symbol_rate_step_baud
    alpha = combos.rolloff
    rs_min, rs_hi = _rate_range(demand, combos)
    ok = (rs_hi >= rs_min * (1 - 1e-12)) & (rs_min * (1 + alpha) <= max_width_hz)
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        empty = np.zeros(0, dtype=np.int64)
        return _Grid(empty, empty, np.zeros(0))
    lo = np.maximum(_even_units(rs_min[idx] * (1 + alpha[idx]), raster_hz), 2)  # ≥ 1 step
    hi = np.maximum(_even_units(rs_hi[idx] * (1 + alpha[idx]), raster_hz), lo)
    steps = (np.ceil(np.log(hi / lo) / math.log(WIDTH_STEP)) + 1).astype(np.int64)
    combo_index = np.repeat(idx, steps)
    offsets = np.arange(int(steps.sum())) - np.repeat(np.cumsum(steps) - steps, steps)
    raw = np.repeat(lo, steps) * WIDTH_STEP**offsets
    width_units = np.minimum(_even_units(raw * raster_hz, raster_hz), np.repeat(hi, steps))
    keep = np.unique(combo_index * (int(width_units.max()) + 1) + width_units, return_index=True)[1]
    combo_index, width_units = combo_index[keep], width_units[keep]
    fill_rate = width_units * raster_hz / (1 + alpha[combo_index])
    rs = equipment.grid_floor(np.minimum(fill_rate, rs_hi[combo_index]), step)
    return _Grid(combo_index, width_units, np.maximum(rs, rs_min[combo_index]))


def _pareto(
    cost: NDArray[np.int64], value: NDArray[np.float64], tiebreak: NDArray[np.float64]
) -> NDArray[np.int64]:
    """Indices on the front: no other point has cost <= and value >= (one strictly better)."""
    order = np.lexsort((tiebreak, -value, cost))
    ordered = value[order]
    best_before = np.concatenate(([-np.inf], np.maximum.accumulate(ordered)[:-1]))
    return np.asarray(order[ordered > best_before * (1 + 1e-9) + 1e-9], dtype=np.int64)


def _thin(indices: NDArray[np.int64], value: NDArray[np.float64], limit: int) -> NDArray[np.int64]:
    """Keep at most ``limit`` points, evenly spread in log(value), always keeping both ends."""
    if indices.size <= limit:
        return indices
    logs = np.log(value[indices])
    targets = np.linspace(logs[0], logs[-1], limit)
    picks = np.unique(np.searchsorted(logs, targets).clip(0, indices.size - 1))
    return np.asarray(indices[picks], dtype=np.int64)


def _immunity_limit_db(
    esn0_db: NDArray[np.float64],
    margin_db: NDArray[np.float64],
    demand: Demand,
    weakest_gap_db: float | NDArray[np.float64],
) -> NDArray[np.float64]:
    """Leakage ratio the neighbours must keep so interference costs at most the allowance.

    With margin m above the requirement and the demand asking for m0, interference may lower
    Es/N0 by Δ = m - m0 + allowance, which needs C/I ≥ Es/N0 - 10·log10(10^(Δ/10) - 1); two
    neighbours share it (+3 dB), and a carrier below the others' level needs that much more.
    The result is rounded up to 0.5 dB so the guard search runs for few distinct limits.
    """
    allowed = np.maximum(margin_db - demand.margin_db, 0.0) + INTERFERENCE_ALLOWANCE_DB
    c_over_i = esn0_db - 10.0 * np.log10(10.0 ** (allowed / 10.0) - 1.0)
    needed = c_over_i + 10.0 * math.log10(2.0) + weakest_gap_db
    return np.ceil(needed * 2.0) / 2.0


def _discrete_candidates(
    problem: Problem,
    demand: Demand,
    *,
    max_per_demand: int = DEFAULT_MAX_PER_DEMAND,
    max_width_hz: float | None = None,
    min_limit_db: float = 0.0,
) -> DemandOptions:
    """Every useful single configuration of ``demand`` (used for ``max_margin``).

    A candidate's guard is the larger of the gap that keeps its own leakage ratio at the plan's
    limit and the gap that keeps interference from its neighbours within the allowance (see
    :func:`_immunity_limit_db`); its edge guard keeps the edge limit.

    Parameters
    ----------
    problem : Problem
        Supplies the catalogue's coding parameters, the roll-offs and the leakage limits.
    demand : Demand
        The demand to serve.
    max_per_demand : int
        Upper bound on the number of candidates kept after Pareto pruning.
    max_width_hz : float, optional
        Widest allocation worth considering (the largest free segment); defaults to the block.
    min_limit_db : float
        A floor on the leakage ratio the guard must keep (dB), raised by verification when
        this demand's emissions disturb a more sensitive neighbour.

    Returns
    -------
    DemandOptions
        Candidates sorted by increasing throughput; empty with a reason when none closes.
    """
    raster = problem.block.raster_hz
    combos = _demand_combos(problem, demand)
    widest = problem.block.width_hz if max_width_hz is None else max_width_hz
    grid = _width_grid(combos, demand, raster, widest)
    if grid.width_units.size == 0:
        return DemandOptions(demand, (), _no_link_detail(problem, demand, combos))
    idx, rs = grid.combo_index, grid.symbol_rate_baud
    g = _guards(problem, demand, combos, idx, rs, min_limit_db)
    guard_units = np.ceil(np.where(g.usable, g.guard_hz, 0.0) / raster - 1e-9).astype(np.int64)
    edge_units = np.ceil(np.where(g.usable, g.edge_hz, 0.0) / raster - 1e-9).astype(np.int64)
    capped = np.minimum(g.throughput_bps, demand.target_rate_bps)
    cost = grid.width_units + guard_units
    kept = _front(problem.objective, cost, capped, g.margin_db, edge_units, g.usable)
    kept = _thin(kept[np.argsort(capped[kept], kind="stable")], capped, max_per_demand)
    out = [
        _family(problem, demand, combos, g, int(i), int(grid.width_units[i]) // 2, None)
        for i in kept
    ]
    return DemandOptions(demand, tuple(out), "")


def build_candidates(
    problem: Problem,
    demand: Demand,
    *,
    max_width_hz: float | None = None,
    min_limit_db: float = 0.0,
) -> DemandOptions:
    """Every useful configuration family of ``demand``: closes its link, meets its minimum rate.

    For ``max_throughput`` and ``min_bandwidth`` each (catalogue entry, roll-off) becomes one
    :class:`Family` whose width runs from what the minimum rate needs to what the target rate
    (or the link) allows, on the raster's even steps; families beaten on spectral cost per bit
    over the whole of their throughput range are pruned.  For ``max_margin`` the margin varies
    along a power-limited family, so single candidates on a 1 % width grid are used instead.

    A guard is the larger of the gap that keeps the carrier's own leakage ratio at the plan's
    limit (or ``min_limit_db`` when verification raised it) and the gap that keeps the
    interference it receives within the allowance (:func:`_immunity_limit_db`, taken at the
    widest point of the family, where the margin is smallest); the edge guard keeps the edge
    limit.

    Parameters
    ----------
    problem : Problem
        Supplies the catalogue's coding parameters, the roll-offs and the leakage limits.
    demand : Demand
        The demand to serve.
    max_width_hz : float, optional
        Widest allocation worth considering; defaults to the block width.
    min_limit_db : float
        A floor on the leakage ratio the guard must keep (dB).

    Returns
    -------
    DemandOptions
        Families sorted by increasing top throughput; empty with a reason when none closes.
    """
    if problem.objective is Objective.MAX_MARGIN:
        return _discrete_candidates(
            problem, demand, max_width_hz=max_width_hz, min_limit_db=min_limit_db
        )
    widest = problem.block.width_hz if max_width_hz is None else max_width_hz
    return _kept_families(problem, demand, _basis(problem, demand, widest, min_limit_db))


class _Basis(NamedTuple):
    """Every combination's family span and guards, before any is pruned."""

    combos: _Combos
    span: _Span
    guards: _Guards | None


def _basis(problem: Problem, demand: Demand, widest_hz: float, min_limit_db: float) -> _Basis:
    combos = _demand_combos(problem, demand)
    span = _family_span(combos, demand, problem.block.raster_hz, widest_hz)
    if span.combo_index.size == 0:
        return _Basis(combos, span, None)
    g = _guards(problem, demand, combos, span.combo_index, span.top_rate_baud, min_limit_db)
    return _Basis(combos, span, g)


def candidate_sets(problem: Problem, demand: Demand) -> tuple[DemandOptions, tuple[Family, ...]]:
    """:func:`build_candidates` and :func:`bound_candidates` of one demand, sharing the work
    (spans and guards of every combination) where the objective allows."""
    if problem.objective is Objective.MAX_MARGIN:
        return build_candidates(problem, demand), bound_candidates(problem, demand)
    basis = _basis(problem, demand, problem.block.width_hz, 0.0)
    return _kept_families(problem, demand, basis), _bound_families(problem, demand, basis)


def _kept_families(problem: Problem, demand: Demand, basis: _Basis) -> DemandOptions:
    combos, span, g = basis
    if g is None:
        return DemandOptions(demand, (), _no_link_detail(problem, demand, combos))
    raster = problem.block.raster_hz
    per_half_cost = 2.0 + np.where(g.usable, g.guard_hz, 0.0) / raster / span.hi_half
    ratio = g.throughput_bps / span.hi_half / per_half_cost
    low_throughput = g.throughput_bps * span.lo_half / span.hi_half
    edge_per_bit = np.where(g.usable, g.edge_hz, np.inf) / g.throughput_bps
    front = _family_front(ratio, low_throughput, g.throughput_bps, edge_per_bit)
    kept = [i for i in front if g.usable[i]]
    families = [
        _family(problem, demand, combos, g, i, int(span.hi_half[i]), int(span.lo_half[i]))
        for i in sorted(kept, key=lambda i: (g.throughput_bps[i], -ratio[i]))
    ]
    return DemandOptions(demand, tuple(families), "")


class _Guards(NamedTuple):
    """Per grid point: link figures and the guards of :func:`build_candidates`."""

    combo_index: NDArray[np.int64]
    symbol_rate_baud: NDArray[np.float64]
    throughput_bps: NDArray[np.float64]
    esn0_db: NDArray[np.float64]
    thermal_db: NDArray[np.float64]
    margin_db: NDArray[np.float64]
    sensitivity_db: NDArray[np.float64]
    leakage_guard_per_baud: NDArray[np.float64]
    guard_hz: NDArray[np.float64]
    edge_hz: NDArray[np.float64]
    usable: NDArray[np.bool_]


def _guards(
    problem: Problem,
    demand: Demand,
    combos: _Combos,
    idx: NDArray[np.int64],
    rs: NDArray[np.float64],
    min_limit_db: float,
) -> _Guards:
    """Es/N0, margin, sensitivity and guards (leakage limit or own mask, whichever is wider)."""
    thermal = _thermal_db(demand, combos, idx, rs)
    esn0 = np.asarray(distortion.effective_esn0_db(thermal, combos.evm_pct[idx]))
    margin = esn0 - combos.required_esn0_db[idx]
    weakest = _weakest_gap_db(problem, demand) - combos.esn0_offset_db[idx]
    floor = max(problem.leakage_limit_db, min_limit_db)
    sensitivity = _immunity_limit_db(esn0, margin, demand, weakest)
    leak_per_baud = _guard_per_baud(combos, idx, np.full(idx.size, floor))
    guard = np.maximum(leak_per_baud, _mask_per_baud(combos, idx, sensitivity)) * rs
    edge = _guard_per_baud(combos, idx, np.full(idx.size, problem.edge_limit_db)) * rs
    usable = np.isfinite(guard) & np.isfinite(edge)
    throughput = rs * combos.net_bits_per_symbol[idx]
    return _Guards(
        idx, rs, throughput, esn0, thermal, margin, sensitivity, leak_per_baud, guard, edge, usable
    )


def _family(
    problem: Problem,
    demand: Demand,
    combos: _Combos,
    g: _Guards,
    i: int,
    hi_half: int,
    lo_half: int | None,
) -> Family:
    """The family of grid point ``i``, topped at ``hi_half`` (a single point if no ``lo_half``)."""
    c = int(g.combo_index[i])
    rs = float(g.symbol_rate_baud[i])
    raster = problem.block.raster_hz
    config = CarrierConfig(
        demand_id=demand.id,
        modulation=combos.modulation[c],
        code_rate=combos.code_rate[c],
        rolloff=float(combos.rolloff[c]),
        symbol_rate_baud=rs,
        bits_per_symbol=int(combos.bits_per_symbol[c]),
        allocated_bandwidth_hz=rs * (1 + float(combos.rolloff[c])),
        occupied_bandwidth_hz=rs * float(combos.occupied_per_baud[c]),
        guard_hz=float(g.guard_hz[i]),
        edge_guard_hz=float(g.edge_hz[i]),
        throughput_bps=float(g.throughput_bps[i]),
        esn0_db=float(g.esn0_db[i]),
        required_esn0_db=float(combos.required_esn0_db[c]),
        profile=combos.profile.name,
        output_backoff_db=combos.backoff_db[c],
        evm_pct=float(combos.evm_pct[c]),
        thermal_esn0_db=float(g.thermal_db[i]),
    )
    top = Candidate.on_raster(config, 2 * hi_half, raster)
    return Family(
        top,
        hi_half if lo_half is None else lo_half,
        hi_half,
        demand.cn0_dbhz is not None,
        raster,
        sensitivity_db=float(g.sensitivity_db[i]),
        leakage_guard_per_baud=float(g.leakage_guard_per_baud[i]),
        key=combos.keys[c],
        symbol_rate_step_baud=combos.profile.symbol_rate_step_baud,
        symbol_rate_max_baud=combos.profile.symbol_rate_max_baud,
    )


class _Span(NamedTuple):
    combo_index: NDArray[np.int64]
    lo_half: NDArray[np.int64]
    hi_half: NDArray[np.int64]
    top_rate_baud: NDArray[np.float64]


def _family_span(combos: _Combos, demand: Demand, raster_hz: float, max_width_hz: float) -> _Span:
    """Half-width range of each combo, from the minimum rate to min(target, link limit).

    The top is the even raster slot that just holds the highest symbol rate (rounded up, so
    every family can reach its target); the symbol rate then scales with the half-width, so
    a carrier fills its slot but for less than one even raster step.
    """
    alpha = combos.rolloff
    rs_min, rs_hi = _rate_range(demand, combos)
    # never wider than the block: a family of astronomical width has none
    widest = equipment.grid_floor(max_width_hz / (1 + alpha), combos.profile.symbol_rate_step_baud)
    rs_hi = np.minimum(rs_hi, widest)
    step = 2.0 * raster_hz / (1 + alpha)  # symbol rate that fills one half-width unit
    ok = (rs_hi >= rs_min * (1 - 1e-12)) & (rs_min * (1 + alpha) <= max_width_hz)
    hi = np.ceil(np.where(ok, rs_hi, 1.0) / step - 1e-9).astype(np.int64)
    lo = np.ceil(np.where(ok, rs_min, 1.0) * hi / np.where(ok, rs_hi, 1.0) - 1e-9).astype(np.int64)
    idx = np.flatnonzero(ok & (hi >= 1))
    return _Span(idx, np.maximum(lo[idx], 1), hi[idx], rs_hi[idx])


def _family_front(
    ratio: NDArray[np.float64],
    low: NDArray[np.float64],
    high: NDArray[np.float64],
    *per_bit: NDArray[np.float64],
) -> list[int]:
    """Families not beaten by one that is cheaper per bit over their whole throughput range.

    Family j beats i when it reaches at least i's top throughput, costs no more at i's
    lowest throughput (above j's own minimum its cost per bit, 1/ratio, is then lower
    everywhere) and needs no wider guard of each kind in ``per_bit`` per bit carried (beside an
    edge, an exclusion or a pinned carrier the edge guard decides what fits).
    """
    cost = low / ratio
    guards = np.array(per_bit, dtype=np.float64).reshape(len(per_bit), ratio.size)
    order = np.argsort(-ratio, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    # beats[j, i]: family j beats family i (the relation is transitive, so a family beaten
    # by any family ahead of it in the order is beaten by one that is kept)
    beats = (
        (high[:, None] >= high[None, :] * (1 - 1e-9))
        & (cost[:, None] <= cost[None, :] * (1 + 1e-9))
        & np.all(guards[:, :, None] <= guards[:, None, :] * (1 + 1e-9), axis=0)
        & (rank[:, None] < rank[None, :])
    )
    covered = beats.any(axis=0)
    return [int(i) for i in order if not covered[i]]


def _front(
    objective: Objective,
    cost: NDArray[np.int64],
    capped: NDArray[np.float64],
    margin: NDArray[np.float64],
    edge_units: NDArray[np.int64],
    usable: NDArray[np.bool_],
) -> NDArray[np.int64]:
    """Pareto front for the objective: (cost, throughput), and (cost, margin) for max_margin."""
    pool = np.flatnonzero(usable)
    if pool.size == 0:
        return pool
    front = pool[_pareto(cost[pool], capped[pool], edge_units[pool].astype(float))]
    if objective is Objective.MAX_MARGIN:
        by_margin = pool[_pareto(cost[pool], margin[pool], -capped[pool])]
        front = np.union1d(front, by_margin)
    return np.asarray(front, dtype=np.int64)


def _no_link_detail(problem: Problem, demand: Demand, combos: _Combos) -> str:
    """Words for a demand that no configuration can serve."""
    if combos.size == 0:
        return "no modulation of the catalogue is allowed for this demand"
    easiest = int(np.argmin(combos.required_esn0_db))
    net = float(combos.net_bits_per_symbol[easiest])
    rs_min = demand.min_rate_bps / net
    name = f"{combos.modulation[easiest]} {format_code_rate(combos.code_rate[easiest])}"
    if demand.cn0_dbhz is not None:
        esn0 = link.esn0_from_cn0_db(demand.cn0_dbhz, rs_min)
        where = f"C/N0 {demand.cn0_dbhz:.1f} dBHz gives Es/N0 {esn0:.1f} dB at {rs_min:,.0f} Bd"
    else:
        esn0 = demand.esn0_db if demand.esn0_db is not None else -math.inf
        where = f"Es/N0 is {esn0:.1f} dB"
    needed = float(combos.required_esn0_db[easiest]) + demand.margin_db
    if needed > esn0:
        return (
            f"no modulation closes the link even at the minimum rate: {where}, but the most "
            f"robust entry ({name}) needs {needed:.1f} dB including the {demand.margin_db:.1f} dB "
            "margin"
        )
    width = rs_min * (1 + float(combos.rolloff[easiest]))
    return (
        f"the minimum rate needs at least {width:,.0f} Hz of allocated width, more than the "
        f"{problem.block.width_hz:,.0f} Hz block allows"
    )


def candidate_for(
    problem: Problem,
    demand: Demand,
    modulation: Modulation,
    code_rate: CodeRate,
    rolloff: float,
    symbol_rate_baud: float,
    *,
    output_backoff_db: float | None = None,
) -> Candidate | None:
    """The candidate for one exact configuration, or None when it no longer serves the demand.

    Used for replans: a carrier may stay as it is only if its link still closes with the
    demand's margin and it still carries the minimum rate.
    """
    settings = (modulation, code_rate, rolloff, symbol_rate_baud)
    fam = family_for(problem, demand, *settings, output_backoff_db=output_backoff_db)
    return None if fam is None else fam.top


def family_for(
    problem: Problem,
    demand: Demand,
    modulation: Modulation,
    code_rate: CodeRate,
    rolloff: float,
    symbol_rate_baud: float,
    strongest_level_db: float | None = None,
    *,
    output_backoff_db: float | None = None,
) -> Family | None:
    """:func:`candidate_for` as a single-width :class:`Family` that knows its spectrum, its
    sensitivity and its leakage guard (so its neighbours can be spaced from the pair).

    ``strongest_level_db`` is the highest level among the problem's carriers
    (:func:`solver.equipment.strongest_level_db`, found here when not given; callers with many
    carriers pass it once); ``output_backoff_db`` the amplifier's (None: the profile's
    reference).  A MODCOD outside the profile's table takes the physics core's threshold (a
    replan's carrier runs it today)."""
    profile = equipment.profile_for(problem, demand)
    table_entry = _entry(problem, profile, modulation, code_rate)
    entry = table_entry.required_esn0_db
    option = equipment.backoff_option(profile, output_backoff_db)
    evm = equipment.carrier_evm_pct(profile, option.output_backoff_db, modulation, rolloff)
    throughput = symbol_rate_baud * table_entry.net_bits_per_symbol
    thermal, esn0 = _link_at(demand, option, evm, symbol_rate_baud)
    if throughput < demand.min_rate_bps * (1 - 1e-9) or esn0 - entry < demand.margin_db:
        return None  # an infinite threshold (the format never reaches the target) ends here too
    tx = equipment.transmitter_at(profile, option.output_backoff_db)
    key = emission.EmissionKey.for_carrier(tx, modulation, rolloff)
    spectrum = emission.get_profile(key)
    weakest = _weakest_gap_db(problem, demand, strongest_level_db) - option.esn0_offset_db
    immunity = float(
        _immunity_limit_db(np.array([esn0]), np.array([esn0 - entry]), demand, weakest)[0]
    )
    leak_per_baud = spectrum.guard_needed(problem.leakage_limit_db)
    guard = max(leak_per_baud, mask_guard_per_baud(key, immunity)) * symbol_rate_baud
    edge = spectrum.guard_needed(problem.edge_limit_db) * symbol_rate_baud
    if not (math.isfinite(guard) and math.isfinite(edge)):
        return None
    config = CarrierConfig(
        demand_id=demand.id,
        modulation=modulation,
        code_rate=code_rate,
        rolloff=rolloff,
        symbol_rate_baud=symbol_rate_baud,
        bits_per_symbol=table_entry.bits_per_symbol,
        allocated_bandwidth_hz=symbol_rate_baud * (1 + rolloff),
        occupied_bandwidth_hz=symbol_rate_baud * spectrum.occupied_bandwidth(),
        guard_hz=guard,
        edge_guard_hz=edge,
        throughput_bps=throughput,
        esn0_db=esn0,
        required_esn0_db=entry,
        profile=profile.name,
        output_backoff_db=option.output_backoff_db,
        evm_pct=evm,
        thermal_esn0_db=thermal,
    )
    return _single_family(problem, demand, config, key, immunity, leak_per_baud)


def _link_at(
    demand: Demand, option: equipment.BackoffOption, evm_pct: float, rate_baud: float
) -> tuple[float, float]:
    """Thermal and effective Es/N0 (dB) of ``demand`` at ``rate_baud``, back-off ``option``
    and error-vector floor ``evm_pct``."""
    thermal = float(_stated_esn0_db(demand, np.array([rate_baud]))[0]) + option.esn0_offset_db
    if evm_pct <= 0:
        return thermal, thermal
    return thermal, float(distortion.effective_esn0_db(thermal, evm_pct))


@functools.lru_cache(maxsize=256)
def _table_index(
    profile: EquipmentProfile, coding: Coding
) -> dict[tuple[Modulation, CodeRate], equipment.TableEntry]:
    return {(e.modulation, e.code_rate): e for e in equipment.modcod_table(profile, coding)}


def _entry(
    problem: Problem, profile: EquipmentProfile, modulation: Modulation, code_rate: CodeRate
) -> equipment.TableEntry:
    """The profile table's entry of a MODCOD; one outside the table (a replan's carrier runs it
    today) gets the physics core's threshold and the request's framing."""
    found = _table_index(profile, problem.coding).get((modulation, code_rate))
    if found is not None:
        return found
    coding = replace(problem.coding, implementation_loss_db=profile.implementation_loss_db)
    bits = modcod.constellation(modulation).bits_per_symbol
    return equipment.TableEntry(
        modulation,
        code_rate,
        bits,
        link.throughput_bps(1.0, bits, code_rate, problem.coding.framing_overhead),
        modcod.required_esn0_db(modulation, code_rate, coding),
    )


def _weakest_gap_db(
    problem: Problem, demand: Demand, strongest_level_db: float | None = None
) -> float:
    """How far (dB) ``demand``, at its reference back-off, sits below the strongest carrier."""
    strongest = (
        equipment.strongest_level_db(problem) if strongest_level_db is None else strongest_level_db
    )
    return strongest - demand.relative_level_db


def _single_family(
    problem: Problem,
    demand: Demand,
    config: CarrierConfig,
    key: emission.EmissionKey,
    sensitivity_db: float,
    leakage_guard_per_baud: float,
) -> Family:
    """``config`` as a family of one width (the even raster slot that holds it)."""
    profile = equipment.profile_for(problem, demand)
    raster = problem.block.raster_hz
    width = int(_even_units(np.array([config.allocated_bandwidth_hz]), raster)[0])
    half = max(width // 2, 1)
    return Family(
        Candidate.on_raster(config, width, raster),
        half,
        half,
        demand.cn0_dbhz is not None,
        raster,
        sensitivity_db=sensitivity_db,
        leakage_guard_per_baud=leakage_guard_per_baud,
        key=key,
        symbol_rate_step_baud=profile.symbol_rate_step_baud,
        symbol_rate_max_baud=profile.symbol_rate_max_baud,
    )


def family_up_to_target(problem: Problem, demand: Demand, config: CarrierConfig) -> Family | None:
    """``config``'s settings as a family from its own symbol rate up to the one that carries
    the demand's target, or the link's limit if lower (None when the link does not close)."""
    net = config.throughput_bps / config.symbol_rate_baud
    profile = equipment.profile_for(problem, demand)
    needed = config.required_esn0_db + demand.margin_db
    thermal_needed = float(distortion.thermal_esn0_needed_db(needed, config.evm_pct))
    thermal = config.esn0_db if config.thermal_esn0_db is None else config.thermal_esn0_db
    limit = (
        config.symbol_rate_baud * 10.0 ** ((thermal - thermal_needed) / 10.0)
        if demand.cn0_dbhz is not None
        else math.inf
    )
    wanted = min(demand.target_rate_bps / net, limit, profile.symbol_rate_max_baud)
    top = max(
        float(equipment.grid_floor(np.array([wanted]), profile.symbol_rate_step_baud)[0]),
        config.symbol_rate_baud,
    )
    settings = (config.modulation, config.code_rate, config.rolloff)
    backoff = config.output_backoff_db
    return family_for(problem, demand, *settings, top, output_backoff_db=backoff) or family_for(
        problem, demand, *settings, config.symbol_rate_baud, output_backoff_db=backoff
    )


# ---------------------------------------------------------------- for bounds


def bound_candidates(problem: Problem, demand: Demand) -> tuple[Family, ...]:
    """Families for a bound that holds for every plan the verifier passes: every combination
    that closes the link and meets the minimum rate, kept unless another carries more per
    hertz of allocated width (exactly, not per raster-rounded slot), reaches at least its top
    rate and needs no more per bit carried, either towards a block edge or as its own leakage
    guard (the only spacing such a bound counts, measured as the bound measures it)."""
    return _bound_families(problem, demand, _basis(problem, demand, problem.block.width_hz, 0.0))


def _bound_families(problem: Problem, demand: Demand, basis: _Basis) -> tuple[Family, ...]:
    """The families :func:`bound_candidates` keeps, compared on the exact quantities the bound
    counts (:func:`solver.judge._items`): throughput per hertz of allocated width, the top
    throughput, and the edge and leakage guards per bit at the verifier's tolerance below each
    limit on the kinder side (an unreachable leakage guard counts as none, as the bound does).
    A family's range in throughput always starts at the demand's minimum rate."""
    combos, span, g = basis
    if g is None:
        return ()
    placeable = np.isfinite(g.edge_hz)
    idx = g.combo_index
    per_hz = combos.net_bits_per_symbol[idx] / (1.0 + combos.rolloff[idx])
    low = np.full(idx.size, demand.min_rate_bps)
    edge = _least_per_baud(combos, idx, problem.edge_limit_db)
    leak = _least_per_baud(combos, idx, problem.leakage_limit_db)
    leak = np.where(np.isfinite(leak), leak, 0.0)
    net = combos.net_bits_per_symbol[idx]
    edge_per_bit = np.where(placeable, edge, np.inf) / net
    front = _family_front(per_hz, low, g.throughput_bps, edge_per_bit, leak / net)
    return tuple(
        _family(problem, demand, combos, g, i, int(span.hi_half[i]), int(span.lo_half[i]))
        for i in front
        if placeable[i]
    )


def least_guard_per_baud(key: emission.EmissionKey, limit_db: float) -> float:
    """The smaller of a spectrum's two one-sided guards (symbol-rate units) for ``limit_db``,
    at the verifier's tolerance below it: the least spacing any verified carrier keeps.

    Parameters
    ----------
    key : emission.EmissionKey
        The carrier's spectrum profile.
    limit_db : float
        Leakage-ratio limit (dB, positive).

    Returns
    -------
    float
        Guard in units of the symbol rate (``math.inf`` when never met).
    """
    profile = emission.get_profile(key)
    at = limit_db - LEAKAGE_TOLERANCE_DB
    return min(profile.guard_needed(at, "below"), profile.guard_needed(at, "above"))


def _least_per_baud(
    combos: _Combos, idx: NDArray[np.int64], limit_db: float
) -> NDArray[np.float64]:
    """:func:`least_guard_per_baud` of each combo in ``idx``, once per distinct combo."""
    unique, inverse = np.unique(idx, return_inverse=True)
    values = np.array([least_guard_per_baud(combos.keys[c], limit_db) for c in unique.tolist()])
    return np.asarray(values[inverse.reshape(-1)], dtype=np.float64)


def every_family(problem: Problem, demand: Demand) -> tuple[Family, ...]:
    """Every combination of modulation, code rate and roll-off that closes the demand's link
    at its minimum rate and can be placed, none pruned (a configuration that carries less
    may still pass verification where a better one does not)."""
    combos, span, g = _basis(problem, demand, problem.block.width_hz, 0.0)
    if g is None:
        return ()
    return tuple(
        _family(problem, demand, combos, g, i, int(span.hi_half[i]), int(span.lo_half[i]))
        for i in range(g.combo_index.size)
        if np.isfinite(g.edge_hz[i])
    )


def least_width_hz(problem: Problem, demand: Demand) -> float:
    """The narrowest allocation any configuration needs for the minimum rate with the link
    closed (Hz; inf when none closes)."""
    combos = _demand_combos(problem, demand)
    rs_min, _ = _rate_range(demand, combos)
    closes = rs_min <= _link_limit_baud(demand, combos) * (1 + 1e-12)
    widths = np.where(closes, rs_min * (1 + combos.rolloff), np.inf)
    return float(widths.min(initial=np.inf))


def best_margin_db(problem: Problem, demand: Demand, max_width_hz: float) -> float:
    """The most link margin beyond the demand's own any configuration can have at the
    minimum rate within ``max_width_hz``, before interference (dB; -inf when none closes)."""
    combos = _demand_combos(problem, demand)
    rs_min, _ = _rate_range(demand, combos)
    every = np.arange(combos.size)
    margin = _esn0_db(demand, combos, every, rs_min) - combos.required_esn0_db - demand.margin_db
    fits = (rs_min * (1 + combos.rolloff) <= max_width_hz) & (margin >= -1e-9)
    return float(np.where(fits, margin, -np.inf).max(initial=-np.inf))


LEAST_SYMBOL_RATE_BAUD = 1.0
"""The narrowest carrier greedy admission sizes (a minimum rate of 0 bit/s still needs one)."""


def narrowest_at_min_rate(problem: Problem, demand: Demand, count: int) -> list[Candidate]:
    """The ``count`` configurations (any catalogue entry × roll-off whose link closes with the
    demand's margin) that carry the minimum rate in the least spectrum, allocated width plus
    guard, narrowest first: every combination is sized at once, and only the shortlist is
    made into candidates (:func:`candidate_for`, as a replan checks one)."""
    combos = _demand_combos(problem, demand)
    if combos.size == 0:
        return []
    rate = np.maximum(_rate_range(demand, combos)[0], LEAST_SYMBOL_RATE_BAUD)
    closes = rate <= _link_limit_baud(demand, combos) * (1 + 1e-12)
    idx = np.flatnonzero(closes)
    if idx.size == 0:
        return []
    g = _guards(problem, demand, combos, idx, rate[idx], 0.0)
    footprint = np.where(g.usable, rate[idx] * (1 + combos.rolloff[idx]) + g.guard_hz, np.inf)
    shortlist = idx[np.argsort(footprint, kind="stable")[: 2 * count]]
    found = [
        c
        for i in shortlist
        if (
            c := candidate_for(
                problem,
                demand,
                combos.modulation[i],
                combos.code_rate[i],
                float(combos.rolloff[i]),
                float(rate[i]),
                output_backoff_db=combos.backoff_db[i],
            )
        )
        is not None
    ]
    found.sort(
        key=lambda c: (
            c.config.allocated_bandwidth_hz + c.config.guard_hz,
            c.config.allocated_bandwidth_hz,
        )
    )
    return found[:count]
