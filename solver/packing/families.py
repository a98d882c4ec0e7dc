"""A carrier configuration on the raster (:class:`Candidate`) and a family of them over a range
of widths (:class:`Family`), with the spectral-mask guard that protects a neighbour."""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field, replace

import numpy as np

from solver.model import CarrierConfig, Demand
from solver.physics import distortion, emission

__all__ = ["Candidate", "DemandOptions", "Family", "mask_guard_per_baud", "settings_of"]


@dataclass(frozen=True)
class Candidate:
    """A carrier configuration with its cost on the solver's raster grid."""

    config: CarrierConfig
    width_units: int
    guard_units: int
    edge_units: int

    @property
    def throughput_bps(self) -> float:
        return self.config.throughput_bps

    @classmethod
    def on_raster(cls, config: CarrierConfig, width_units: int, raster_hz: float) -> Candidate:
        """``config`` taking ``width_units`` raster steps, its guards rounded up to the raster."""
        return cls(
            config,
            width_units,
            _guard_units(config.guard_hz, raster_hz),
            _guard_units(config.edge_guard_hz, raster_hz),
        )


ALONE_UNITS = 2**53
"""Raster steps standing for a guard no gap meets (a bound's family may keep such a carrier: it
can only sit alone); more steps than any block holds, and exact as a float."""


def _guard_units(guard_hz: float, raster_hz: float) -> int:
    if math.isinf(guard_hz):
        return ALONE_UNITS
    return math.ceil(guard_hz / raster_hz - 1e-9)


@functools.lru_cache(maxsize=8192)
def mask_guard_per_baud(key: emission.EmissionKey, level_db: float) -> float:
    """Smallest gap (Rs units, from the nominal edge) beyond which the carrier's normalised
    power spectral density stays ``level_db`` or more below its in-band level, on both sides.

    A neighbour just past that gap sees this carrier's skirt at most ``level_db`` below the
    carrier's own density, whatever its own width (a narrow neighbour sees the density, not a
    band average).  ``math.inf`` when the skirt never falls that low within the profile.
    """
    if level_db <= 0.0:  # no skirt outside the band rises above the in-band level
        return 0.0
    profile = emission.get_profile(key)
    threshold = float(profile.psd_at(np.zeros(1))[0]) * 10.0 ** (-min(level_db, 3000.0) / 10.0)
    edge = profile.nominal_bandwidth / 2
    worst = 0.0
    for sign in (1.0, -1.0):
        offset = sign * profile.freq
        outside = offset > edge
        order = np.argsort(offset[outside])
        f, p = offset[outside][order], profile.psd[outside][order]
        loud = np.flatnonzero(p >= threshold)
        if loud.size == 0:
            continue
        if loud[-1] == f.size - 1:
            return math.inf
        worst = max(worst, float(f[loud[-1] + 1]) - edge)
    return worst


@dataclass(frozen=True)
class Family:
    """One (modulation, code rate, roll-off) over a range of widths.

    The allocated width is ``2·h`` raster steps for an integer ``h`` in ``[lo_half, hi_half]``
    (even, so the centre sits on the raster) and the symbol rate scales with it, so width,
    guard and throughput all grow linearly with ``h``: the packer chooses ``h`` as an integer
    variable.  ``top`` is the candidate at ``hi_half`` with its guard at its own sensitivity.

    Guards depend on the segment's *protection level* L (dB): every carrier of a segment keeps
    its skirt L below its in-band density at its guard (:func:`mask_guard_per_baud`), and never
    less than its leakage-limit guard.  ``sensitivity_db`` is the level this family needs from
    its neighbours, so it may only sit in a segment whose level is at least that.
    """

    top: Candidate
    lo_half: int
    hi_half: int
    power_limited: bool
    raster_hz: float
    sensitivity_db: float = 0.0
    leakage_guard_per_baud: float = 0.0
    key: emission.EmissionKey | None = None
    symbol_rate_step_baud: float = 0.0
    """The equipment's symbol-rate step (0: any rate); scaled rates are rounded down to it."""
    symbol_rate_max_baud: float = math.inf
    """The equipment's highest symbol rate; no scaled rate goes above it."""
    memo: dict[object, float] = field(
        default_factory=dict, init=False, compare=False, hash=False, repr=False
    )
    """Per-family results of pure functions of it (e.g. its guard towards a neighbour of
    a given sensitivity); never part of its identity."""

    @classmethod
    def single(cls, cand: Candidate, raster_hz: float = 1.0) -> Family:
        """A fixed candidate whose guards do not depend on the level (tests, pinned carriers)."""
        half = cand.width_units // 2
        return cls(cand, half, half, False, raster_hz)

    @property
    def config(self) -> CarrierConfig:
        return self.top.config

    def guard_hz(self, level_db: float | None = None) -> float:
        """Guard at the top of the range for a segment at ``level_db`` (own sensitivity if None)."""
        if self.key is None:
            return self.top.config.guard_hz
        level = self.sensitivity_db if level_db is None else level_db
        per_baud = max(self.leakage_guard_per_baud, mask_guard_per_baud(self.key, level))
        return per_baud * self.top.config.symbol_rate_baud

    def guard_per_half(self, level_db: float | None = None) -> float:
        """Guard (raster units) per half-width unit, before rounding up."""
        return self.guard_hz(level_db) / self.raster_hz / self.hi_half

    @property
    def edge_per_half(self) -> float:
        return self.top.config.edge_guard_hz / self.raster_hz / self.hi_half

    @property
    def throughput_per_half_bps(self) -> float:
        return self.top.config.throughput_bps / self.hi_half

    def config_at(self, scale: float, level_db: float | None = None) -> CarrierConfig:
        """The top configuration at ``scale`` times its symbol rate (the link re-measured
        when power-limited), guarded for a segment at ``level_db``."""
        top = self.top.config
        step = self.symbol_rate_step_baud
        rate = min(
            top.symbol_rate_baud * scale, max(self.symbol_rate_max_baud, top.symbol_rate_baud)
        )
        if step > 0 and scale != 1.0:  # the top is on the grid; a scaled rate is rounded down
            rate = max(math.floor(rate / step + 1e-9), 1) * step  # exactly k·step
        scale = rate / top.symbol_rate_baud
        thermal = top.esn0_db if top.thermal_esn0_db is None else top.thermal_esn0_db
        if self.power_limited:
            thermal -= 10.0 * math.log10(scale)
        esn0 = (
            float(distortion.effective_esn0_db(thermal, top.evm_pct))
            if top.thermal_esn0_db is not None and top.evm_pct > 0
            else thermal
        )
        return replace(
            top,
            symbol_rate_baud=rate,
            allocated_bandwidth_hz=top.allocated_bandwidth_hz * scale,
            occupied_bandwidth_hz=top.occupied_bandwidth_hz * scale,
            guard_hz=self.guard_hz(level_db) * scale,
            edge_guard_hz=top.edge_guard_hz * scale,
            throughput_bps=top.throughput_bps * scale,
            esn0_db=esn0,
            thermal_esn0_db=None if top.thermal_esn0_db is None else thermal,
        )

    def at(self, half: int, level_db: float | None = None) -> Candidate:
        """The candidate ``half`` half-width units wide, guarded for a segment at ``level_db``."""
        if not self.lo_half <= half <= self.hi_half:
            raise ValueError(f"{half=} lies outside [{self.lo_half}, {self.hi_half}]")
        config = self.config_at(half / self.hi_half, level_db)
        if self.key is None and half == self.hi_half:
            return replace(self.top, config=config)
        return Candidate.on_raster(config, 2 * half, self.raster_hz)


@dataclass(frozen=True)
class DemandOptions:
    """Every kept family of one demand, and why there are none when the list is empty."""

    demand: Demand
    candidates: tuple[Family, ...]
    best_link_detail: str

    def family_index(self, config: CarrierConfig) -> int | None:
        """The index of the family with ``config``'s settings (:func:`settings_of`)."""
        return next(
            (
                k
                for k, fam in enumerate(self.candidates)
                if settings_of(fam.config) == settings_of(config)
            ),
            None,
        )


def settings_of(config: CarrierConfig) -> tuple[object, ...]:
    """What an engineer sets on the equipment, apart from the symbol rate: modulation, code
    rate, roll-off and amplifier back-off."""
    return (config.modulation, config.code_rate, config.rolloff, config.output_backoff_db)
