"""The link side of :mod:`solver.explain`: MODCOD entries × back-offs as arrays, and whether
each closes and carries a demand's target, without spectra (fast enough to try relaxed profiles:
a lifted symbol-rate maximum, more back-offs, the full catalogue)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray

from solver import equipment
from solver.model import Demand, EquipmentProfile, Problem, format_code_rate
from solver.physics import distortion

__all__ = [
    "BACKOFF_REACH_DB",
    "Links",
    "closes",
    "links",
    "outside_table",
    "reach",
    "relaxed_backoffs",
    "stated_db",
    "table",
    "target_rate",
    "thermal_needed",
    "width_rate",
]

BACKOFF_REACH_DB = 6
"""Whole dB beyond the profile's largest back-off the equipment test tries."""


@dataclass(frozen=True)
class Links:
    """MODCOD entries × back-off options as parallel arrays (no spectra: the link only)."""

    names: tuple[str, ...]
    backoff_db: tuple[float | None, ...]
    net: NDArray[np.float64]
    needed_db: NDArray[np.float64]
    """Threshold plus the demand's margin (dB effective Es/N0)."""
    offset_db: NDArray[np.float64]
    evm_pct: NDArray[np.float64]


def links(
    demand: Demand,
    entries: Sequence[equipment.TableEntry],
    options: Sequence[equipment.BackoffOption],
    profile: EquipmentProfile,
) -> Links:
    """Each (entry, back-off) pair of ``profile`` for ``demand``.  The EVM floor is taken at
    the profile's widest roll-off, where the amplifier's distortion is least: the lenient
    figure, as these links answer what *could* carry a target."""
    pairs = [(e, o) for e in entries for o in options]
    rolloff = max(profile.rolloffs)
    return Links(
        names=tuple(_name(e) for e, _ in pairs),
        backoff_db=tuple(o.output_backoff_db for _, o in pairs),
        net=np.array([e.net_bits_per_symbol for e, _ in pairs], dtype=np.float64),
        needed_db=np.array([e.required_esn0_db + demand.margin_db for e, _ in pairs]),
        offset_db=np.array([o.esn0_offset_db for _, o in pairs], dtype=np.float64),
        evm_pct=np.array(
            [
                equipment.carrier_evm_pct(profile, o.output_backoff_db, e.modulation, rolloff)
                for e, o in pairs
            ],
            dtype=np.float64,
        ),
    )


def _name(entry: equipment.TableEntry) -> str:
    return f"{entry.modulation.value} {format_code_rate(entry.code_rate)}"


def stated_db(demand: Demand, rate_baud: NDArray[np.float64]) -> NDArray[np.float64]:
    """The demand's Es/N0 (dB) at ``rate_baud``, at its profile's reference back-off."""
    if demand.cn0_dbhz is not None:
        with np.errstate(divide="ignore"):
            return np.asarray(demand.cn0_dbhz - 10.0 * np.log10(rate_baud))
    esn0 = -math.inf if demand.esn0_db is None else demand.esn0_db
    return np.full(np.shape(rate_baud), esn0)


def closes(demand: Demand, links: Links, rate_baud: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Whether each (entry, back-off) closes with the demand's margin at ``rate_baud``."""
    thermal = stated_db(demand, rate_baud) + links.offset_db
    effective = np.asarray(distortion.effective_esn0_db(thermal, links.evm_pct))
    return np.asarray(effective >= links.needed_db - 1e-9)


def target_rate(demand: Demand, profile: EquipmentProfile, links: Links) -> NDArray[np.float64]:
    """R_T of each entry: the least rate on the profile's grid that carries the target."""
    wanted = np.maximum(demand.target_rate_bps / links.net, profile.symbol_rate_min_baud)
    return equipment.grid_ceil(wanted, profile.symbol_rate_step_baud)


def reach(demand: Demand, profile: EquipmentProfile, links: Links) -> NDArray[np.bool_]:
    """Which (entry, back-off) carry the target at some width, within the rate maximum."""
    rate = target_rate(demand, profile, links)
    return np.asarray(closes(demand, links, rate) & (rate <= profile.symbol_rate_max_baud))


def table(
    problem: Problem, profile: EquipmentProfile, demand: Demand
) -> list[equipment.TableEntry]:
    return list(equipment.modcod_table(profile, problem.coding, tuple(demand.modulations)))


def outside_table(
    problem: Problem, profile: EquipmentProfile, demand: Demand
) -> list[equipment.TableEntry]:
    """Catalogue entries (``"full"``, the profile's implementation loss) not in its table."""
    own = {(e.modulation, e.code_rate) for e in table(problem, profile, demand)}
    full = replace(profile, modcods=(), modcod_set="full")
    return [e for e in table(problem, full, demand) if (e.modulation, e.code_rate) not in own]


def relaxed_backoffs(profile: EquipmentProfile) -> list[equipment.BackoffOption]:
    """The profile's back-offs and every whole dB from 1 to :data:`BACKOFF_REACH_DB` beyond its
    largest (its own only, for a linear transmitter)."""
    own = list(equipment.backoff_options(profile))
    if profile.amplifier is None:
        return own
    top = max(o.output_backoff_db or 0.0 for o in own)
    extra = [float(b) for b in range(1, int(top) + BACKOFF_REACH_DB + 1)]
    return own + [equipment.backoff_option(profile, b) for b in extra]


def thermal_needed(links: Links) -> NDArray[np.float64]:
    """Thermal Es/N0 (dB) each (entry, back-off) needs: inf where the EVM floor caps it."""
    values = [
        distortion.thermal_esn0_needed_db(float(n), float(e))
        for n, e in zip(links.needed_db, links.evm_pct, strict=True)
    ]
    return np.array(values, dtype=np.float64)


def width_rate(profile: EquipmentProfile, width_hz: float, rolloff: float) -> float:
    """The highest symbol rate on the profile's grid that fits ``width_hz`` at ``rolloff``
    (0 when below the profile's minimum)."""
    top = min(width_hz / (1 + rolloff), profile.symbol_rate_max_baud)
    rate = float(equipment.grid_floor(np.array([top]), profile.symbol_rate_step_baud)[0])
    return rate if rate >= profile.symbol_rate_min_baud and rate > 0 else 0.0
