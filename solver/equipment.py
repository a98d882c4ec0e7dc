"""Equipment profiles resolved for planning: the MODCOD table, back-off options, symbol-rate grid.

A request may name equipment profiles (:class:`~solver.model.EquipmentProfile`) and each demand
the profile it uses.  A demand that names none uses the request's own transmitter and coding
(:func:`default_profile`), with the :data:`DEFAULT_SET` of MODCODs.

For each profile this module gives

* its MODCOD table (:func:`modcod_table`): the named set or the equipment's own rows, each with
  the threshold the physics core computes or the one the data sheet gives, used exactly;
* its back-off options (:func:`backoff_options`): for each allowed amplifier output back-off,
  how far Es/N0 and the carrier's level fall from the reference back-off (dB for dB);
* a carrier's error-vector floor (:func:`carrier_evm_pct`): the root-sum of the transmitter's
  floor, the amplifier's in-band distortion of that carrier's own waveform at that back-off,
  measured at the decisions (:func:`solver.physics.inband.decision_distortion`), and the
  receiver's floor;
* its symbol-rate grid (:func:`grid_floor`, :func:`grid_ceil`);
* the emission key of a carrier sent by it (:func:`carrier_emission_key`).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray

from solver.model import (
    CarrierConfig,
    CodeRate,
    Coding,
    Demand,
    EquipmentProfile,
    ModcodRow,
    Modulation,
    Problem,
    ProblemError,
    Transmitter,
)
from solver.physics import distortion, emission, inband, modcod, modcodsets

__all__ = [
    "DEFAULT_SET",
    "BackoffOption",
    "TableEntry",
    "backoff_option",
    "backoff_options",
    "carrier_emission_key",
    "carrier_evm_pct",
    "default_profile",
    "grid_ceil",
    "grid_floor",
    "level_offset_db",
    "modcod_table",
    "profile_for",
    "profile_named",
    "quieter",
    "reference_backoff_db",
    "strongest_level_db",
    "transmitter_at",
]

DEFAULT_SET = "standard"
"""The MODCOD set of a request that names no profile: published entries only."""


def default_profile(problem: Problem) -> EquipmentProfile:
    """The profile of a demand that names none: the request's transmitter and coding."""
    return _default_profile(problem.transmitter, problem.coding.implementation_loss_db)


@functools.lru_cache(maxsize=64)
def _default_profile(tx: Transmitter, implementation_loss_db: float) -> EquipmentProfile:
    return EquipmentProfile(
        name="",
        modcod_set=DEFAULT_SET,
        implementation_loss_db=implementation_loss_db,
        rolloffs=tx.rolloffs,
        filter_span_symbols=tx.filter_span_symbols,
        window=tx.window,
        amplifier=tx.amplifier,
        amplifier_distortion=False,
    )


def profile_named(problem: Problem, name: str) -> EquipmentProfile:
    """The profile called ``name`` (empty: :func:`default_profile`)."""
    if not name:
        return default_profile(problem)
    for profile in problem.profiles:
        if profile.name == name:
            return profile
    known = ", ".join(repr(p.name) for p in problem.profiles) or "none"
    raise ProblemError("profile", f"{name!r} is not one of the request's profiles ({known})")


def profile_for(problem: Problem, demand: Demand) -> EquipmentProfile:
    """The profile ``demand`` uses."""
    return profile_named(problem, demand.profile)


# ----------------------------------------------------------------------------- MODCOD table


@dataclass(frozen=True)
class TableEntry:
    """One MODCOD a profile offers, with what it carries and needs.

    Attributes
    ----------
    modulation : Modulation
    code_rate : Fraction or None
    bits_per_symbol : int
        log2 M.
    net_bits_per_symbol : float
        Information bits per symbol after framing (bit/s per baud).
    required_esn0_db : float
        The threshold (dB Es/N0): the data sheet's if given, else the physics core's with the
        profile's implementation loss.
    label : str
        The table's own name of the entry ("MCS 17"), or empty.
    """

    modulation: Modulation
    code_rate: CodeRate
    bits_per_symbol: int
    net_bits_per_symbol: float
    required_esn0_db: float
    label: str = ""


@functools.cache
def modcod_table(
    profile: EquipmentProfile, coding: Coding, modulations: tuple[Modulation, ...] = ()
) -> tuple[TableEntry, ...]:
    """The MODCODs ``profile`` offers, restricted to ``modulations`` (empty: all).

    Entries whose threshold is infinite (the format cannot reach the coding's target) are
    left out.  A named set's entries carry log2 M · r · (1 − the request's framing overhead)
    bits per symbol, the same rule for every set, so plans compare across sets.
    """
    settings = replace(coding, implementation_loss_db=profile.implementation_loss_db)
    rows = profile.modcods or tuple(
        ModcodRow(e.modulation, e.code_rate, label=e.label, ring_ratios=e.ring_ratios)
        for e in modcodsets.modcod_set(profile.modcod_set)
    )
    entries = []
    for row in rows:
        if modulations and row.modulation not in modulations:
            continue
        bits = modcod.constellation(row.modulation).bits_per_symbol
        rate = 1.0 if row.code_rate is None else float(row.code_rate)
        net = (
            bits * rate * (1.0 - coding.framing_overhead)
            if row.spectral_efficiency is None
            else row.spectral_efficiency
        )
        threshold = (
            modcod.required_esn0_db(row.modulation, row.code_rate, settings, row.ring_ratios)
            if row.required_esn0_db is None
            else row.required_esn0_db
        )
        if math.isfinite(threshold):
            entries.append(
                TableEntry(row.modulation, row.code_rate, bits, net, threshold, row.label)
            )
    return tuple(entries)


# ----------------------------------------------------------------------------- back-off


@dataclass(frozen=True)
class BackoffOption:
    """One amplifier operating point a carrier may run at.

    Attributes
    ----------
    output_backoff_db : float or None
        Mean output power below saturation (dB); None for a linear transmitter.
    esn0_offset_db : float
        Change of Es/N0 and of the carrier's level against the reference back-off (dB; more
        back-off, less power: negative).
    """

    output_backoff_db: float | None
    esn0_offset_db: float


def reference_backoff_db(profile: EquipmentProfile) -> float | None:
    """The back-off at which a profile's demands state their link (None when linear)."""
    if profile.amplifier is None:
        return None
    if profile.reference_backoff_db is not None:
        return profile.reference_backoff_db
    return profile.amplifier.output_backoff_db


@functools.cache
def backoff_option(profile: EquipmentProfile, output_backoff_db: float | None) -> BackoffOption:
    """The operating point of ``profile``'s amplifier at ``output_backoff_db`` (None: the
    reference back-off; ignored for a linear transmitter)."""
    if profile.amplifier is None:
        return BackoffOption(None, 0.0)
    reference = reference_backoff_db(profile)
    backoff = reference if output_backoff_db is None else output_backoff_db
    if reference is None or backoff is None:  # not reached: the amplifier sets both
        raise ProblemError("output_backoff_db", "an amplifier needs a back-off")
    return BackoffOption(backoff, reference - backoff)


@functools.lru_cache(maxsize=4096)
def carrier_evm_pct(
    profile: EquipmentProfile,
    output_backoff_db: float | None,
    modulation: Modulation,
    rolloff: float,
) -> float:
    """Error-vector floor (% rms) of a carrier of ``modulation`` and ``rolloff`` sent by
    ``profile`` at ``output_backoff_db`` (None: the reference): the root-sum of the
    transmitter's floor, the amplifier's distortion at the decisions when the profile counts
    it, and the receiver's floor."""
    own = 0.0
    option = backoff_option(profile, output_backoff_db)
    if profile.amplifier is not None and profile.amplifier_distortion:
        tx = transmitter_at(profile, option.output_backoff_db)
        key = emission.EmissionKey.for_carrier(tx, modulation, rolloff)
        own = inband.decision_distortion(key).evm_pct
    return distortion.combined_evm_pct(profile.tx_evm_pct, own, profile.rx_evm_pct)


@functools.lru_cache(maxsize=256)
def backoff_options(profile: EquipmentProfile) -> tuple[BackoffOption, ...]:
    """Every back-off ``profile`` allows, in increasing order."""
    if profile.amplifier is None:
        return (backoff_option(profile, None),)
    allowed = profile.output_backoffs_db or (profile.amplifier.output_backoff_db,)
    return tuple(backoff_option(profile, b) for b in sorted(set(allowed)))


def quieter(problem: Problem) -> Problem | None:
    """``problem`` with no carrier louder than its stated link: each profile's back-offs cut to
    its reference and above (its quietest one if all are louder), or None when no profile
    offers a louder back-off.

    Every carrier's protection from its neighbours is sized for the loudest level any of
    them may run at (:func:`strongest_level_db`); a back-off louder than the reference raises
    that level for every carrier, whether a plan uses it or not.  The planner therefore also
    plans this quieter request and keeps the better plan (:func:`solver.planner.solve`).
    """
    changed = []
    for profile in problem.profiles:
        options = backoff_options(profile)
        quiet = tuple(o.output_backoff_db for o in options if o.esn0_offset_db <= 0.0)
        if len(quiet) == len(options):
            changed.append(profile)
            continue
        kept = quiet or (options[-1].output_backoff_db,)
        changed.append(replace(profile, output_backoffs_db=tuple(b for b in kept if b is not None)))
    if all(a is b for a, b in zip(changed, problem.profiles, strict=True)):
        return None
    return replace(problem, profiles=tuple(changed))


_STRONGEST: dict[int, tuple[Problem, float]] = {}
""":func:`strongest_level_db` of the last few problems, by identity (a problem is immutable)."""


def strongest_level_db(problem: Problem) -> float:
    """The highest level (dB) any carrier of the request can have: its demand's relative level
    raised by running below the reference back-off, where its profile allows that."""
    hit = _STRONGEST.get(id(problem))
    if hit is not None and hit[0] is problem:
        return hit[1]
    boost = {
        p.name: max(0.0, *(o.esn0_offset_db for o in backoff_options(p)))
        for p in (default_profile(problem), *problem.profiles)
    }
    value = max(
        (d.relative_level_db + boost.get(d.profile, 0.0) for d in problem.demands), default=0.0
    )
    if len(_STRONGEST) >= 32:
        _STRONGEST.clear()
    _STRONGEST[id(problem)] = (problem, value)
    return value


def transmitter_at(profile: EquipmentProfile, output_backoff_db: float | None) -> Transmitter:
    """The transmitter of ``profile`` with its amplifier at ``output_backoff_db``."""
    amplifier = profile.amplifier
    if amplifier is not None and output_backoff_db is not None:
        amplifier = replace(amplifier, output_backoff_db=output_backoff_db)
    return Transmitter(
        filter_span_symbols=profile.filter_span_symbols,
        rolloffs=profile.rolloffs,
        window=profile.window,
        amplifier=amplifier,
    )


def carrier_emission_key(
    problem: Problem, config: CarrierConfig, *, linear: bool = False
) -> emission.EmissionKey:
    """The spectrum-profile key of a carrier (``linear``: its matched receive filter's)."""
    tx = transmitter_at(profile_named(problem, config.profile), config.output_backoff_db)
    return emission.EmissionKey.for_carrier(tx, config.modulation, config.rolloff, linear=linear)


def level_offset_db(problem: Problem, config: CarrierConfig) -> float:
    """How far (dB) the carrier's level sits from its demand's ``relative_level_db``, which is
    stated at the profile's reference back-off."""
    if config.output_backoff_db is None:
        return 0.0
    reference = reference_backoff_db(profile_named(problem, config.profile))
    return 0.0 if reference is None else reference - config.output_backoff_db


# ----------------------------------------------------------------------------- symbol rates


def grid_floor(rate_baud: NDArray[np.float64], step_baud: float) -> NDArray[np.float64]:
    """Each rate rounded down to a multiple of ``step_baud`` (unchanged when the step is 0)."""
    rates = np.asarray(rate_baud, dtype=np.float64)
    if step_baud <= 0:
        return rates
    return np.asarray(np.floor(rates / step_baud + 1e-9) * step_baud, dtype=np.float64)


def grid_ceil(rate_baud: NDArray[np.float64], step_baud: float) -> NDArray[np.float64]:
    """Each rate rounded up to a multiple of ``step_baud`` (unchanged when the step is 0)."""
    rates = np.asarray(rate_baud, dtype=np.float64)
    if step_baud <= 0:
        return rates
    return np.asarray(np.ceil(rates / step_baud - 1e-9) * step_baud, dtype=np.float64)
