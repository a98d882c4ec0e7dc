"""The figures of what more spectrum is worth, as a plan carries them (computed by
:mod:`solver.spectrum_value`).  A leaf module: :mod:`solver.model` holds these in a plan's
summary without importing the computation."""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

__all__ = [
    "LEAST_FREED_HZ",
    "MHZ",
    "ExclusionValue",
    "SpectrumGain",
    "SpectrumValue",
    "ValueMethod",
]

MHZ = 1e6
"""Hz in a MHz: the unit the per-MHz figures are given in."""


class ValueMethod(StrEnum):
    """How a figure was obtained."""

    RELAXATION_DUAL = "relaxation-dual"
    """Bound: λ⁺ (bit/s per Hz) × freed width, where that is exact over the step (see
    :mod:`solver.spectrum_value`)."""
    RELAXATION_RESOLVE = "relaxation-resolve"
    """Bound: the relaxation solved again with the freed width, and differenced."""
    PLAN_UPGRADE = "plan-upgrade"
    """Achieved: the plan verified in the widened request and improved by local search."""


@dataclass(frozen=True)
class SpectrumGain:
    """What one change of spectrum is worth.

    Attributes
    ----------
    freed_hz : float
        Width the change adds to the usable block, Hz.
    bound_gain_bps : float
        Gain of the physical bound (Shannon–Nyquist relaxation), bit/s.
    bound_method : ValueMethod
        ``relaxation-dual`` or ``relaxation-resolve``.
    achieved_gain_bps : float or None
        Gain this plan reaches with the change (target-capped bit/s), None when not computed.
    achieved_method : ValueMethod or None
        ``plan-upgrade`` when ``achieved_gain_bps`` is given.
    """

    freed_hz: float
    bound_gain_bps: float
    bound_method: ValueMethod
    achieved_gain_bps: float | None = None
    achieved_method: ValueMethod | None = None

    @property
    def bound_bps_per_mhz(self) -> float | None:
        """Bound gain per MHz freed, bit/s per MHz (None when under :data:`LEAST_FREED_HZ`)."""
        return _per_mhz(self.bound_gain_bps, self.freed_hz)

    @property
    def achieved_bps_per_mhz(self) -> float | None:
        """Achieved gain per MHz freed, bit/s per MHz (None when not computed, or when the
        width is under :data:`LEAST_FREED_HZ`)."""
        if self.achieved_gain_bps is None:
            return None
        return _per_mhz(self.achieved_gain_bps, self.freed_hz)


LEAST_FREED_HZ = 1.0
"""Freed widths narrower than this (Hz) get no per-MHz figure: a rate per MHz of a sliver
that narrow is meaningless (and its quotient may overflow)."""


def _per_mhz(gain_bps: float, freed_hz: float) -> float | None:
    return gain_bps / freed_hz * MHZ if freed_hz >= LEAST_FREED_HZ else None


@dataclass(frozen=True)
class ExclusionValue:
    """What removing one exclusion is worth."""

    index: int
    """Position of the exclusion in the request's ``block.exclusions``."""
    note: str
    gain: SpectrumGain


@dataclass(frozen=True)
class SpectrumValue:
    """The marginal throughput of spectrum for one plan."""

    step_hz: float
    """Width added at each edge, Hz (1 MHz on the raster)."""
    lower_edge: SpectrumGain
    upper_edge: SpectrumGain
    exclusions: tuple[ExclusionValue, ...]
    achieved_note: str = ""
    """Why achieved figures are missing, if any are (empty when all were computed)."""
