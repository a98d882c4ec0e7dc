"""Carrier emission: power spectral density, occupied bandwidth, leakage and guard needs.

Spectra are computed once per :class:`EmissionKey` *normalised to symbol rate 1* and cached; a
carrier at Rs is the same profile with frequencies × Rs.  Linear transmitter: |P(f)|² of the
truncated, optionally windowed RRC taps (zero-padded FFT) — truncation makes leakage finite.
With an amplifier: random constellation symbols, shaped, amplified at the requested mean
output back-off, Welch estimate — regrowth then depends on the peak-to-average ratio.
Leakage follows the ACLR convention (3GPP TS 38.104 §6.6.3): own nominal band power over the
power in an adjacent band of the same width, positive dB.  Band powers interpolate cumulative
sums linearly, so the ratio is exact for the piecewise-constant density and the guard for a
limit is found on a precomputed monotone envelope without scanning.
"""

from __future__ import annotations

import functools
import logging
import math
import os
from collections.abc import Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import ClassVar, Final, Literal, overload

import numpy as np
import numpy.typing as npt
from scipy import fft as sp_fft
from scipy import signal

from solver.model import Amplifier, AmplifierModel, Modulation, ProblemError, Transmitter, Window
from solver.physics import profilecache
from solver.physics.amplifier import (
    BRACKET_DECIMATION,
    DRIVE_GRID_DB,
    DRIVE_REFINE,
    SALEH_ALPHA_A,
    SALEH_ALPHA_PHI,
    SALEH_BETA_A,
    SALEH_BETA_PHI,
    amplify,
    rapp_am_am,
    saleh,
    solve_drive,
)
from solver.physics.constellations import constellation
from solver.physics.pulses import rrc_taps

__all__ = [
    "DEFAULT_SEED",
    "PROFILE_VERSION",
    "EmissionKey",
    "Side",
    "SpectrumProfile",
    "build_profile",
    "get_profile",
    "guard_needed_hz",
    "leakage_ratio_db_at",
    "occupied_bandwidth_hz",
    "rapp_am_am",
    "saleh",
    "simulate_amplifier_psd",
    "warm_profiles",
]

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]
Side = Literal["below", "above", "worst"]
_SIDES: Final = ("below", "above", "worst")

# Linear PSD: 32 samples/symbol puts the grid at ±16 Rs (≥ ±8 Rs needed; aliasing of the
# truncation side lobes only touches the outer few Rs); the FFT size gives a step of Rs/1024,
# 51 bins across an α = 0.05 roll-off and far below the 1/span ripple of any allowed span.
LINEAR_SAMPLES_PER_SYMBOL: Final = 32
LINEAR_FFT_SIZE: Final = 32_768
MAX_SPAN_SYMBOLS: Final = 512
# Amplifier: 16 samples/symbol (±8 Rs, far beyond 5th-order regrowth), 2^19 samples, Welch
# segments of 16384 (step Rs/1024, 63 half-overlapping averages) with a Blackman-Harris window
# whose −92 dB side lobes keep the estimator's own leakage far below 60 dB.
AMPLIFIER_SAMPLES_PER_SYMBOL: Final = 16
AMPLIFIER_SYMBOLS: Final = 32_768
AMPLIFIER_SEGMENT: Final = 16_384
WELCH_WINDOW: Final = "blackmanharris"
DEFAULT_SEED: Final = 20_011
PROFILE_VERSION: Final = 1
"""Version of the amplifier simulation in stored profiles (:mod:`solver.physics.profilecache`):
raise it whenever a change to :func:`simulate_amplifier_psd` or :mod:`solver.physics.amplifier`
changes a spectrum.  Filter taps, constellation points, the constants above, the seed and the
numpy and scipy versions enter the file name by themselves."""


@dataclass(frozen=True)
class EmissionKey:
    """Everything a normalised spectrum depends on; hashable, used as the cache key.

    The modulation only matters through an amplifier (the linear PSD of i.i.d. zero-mean
    symbols does not depend on the constellation), so it is dropped when ``amplifier`` is
    ``None``; with an amplifier it is required.

    Attributes
    ----------
    rolloff : float
        Roll-off factor α in [0, 1].
    span_symbols : int
        RRC filter span in symbol periods (1 … :data:`MAX_SPAN_SYMBOLS`).
    window : Window
        Window on the truncated filter.
    amplifier : Amplifier or None
        Amplifier model and mean output back-off; ``None`` for a linear transmitter.
    modulation : Modulation or None
        Constellation driving the amplifier (``None`` when there is no amplifier).
    """

    rolloff: float
    span_symbols: int
    window: Window = Window.NONE
    amplifier: Amplifier | None = None
    modulation: Modulation | None = None

    @classmethod
    def for_carrier(
        cls, tx: Transmitter, modulation: Modulation, rolloff: float, *, linear: bool = False
    ) -> EmissionKey:
        """The key of a carrier sent by ``tx``; ``linear`` drops the amplifier (the shape of
        the carrier's own matched receive filter)."""
        return cls(
            rolloff=rolloff,
            span_symbols=tx.filter_span_symbols,
            window=tx.window,
            amplifier=None if linear else tx.amplifier,
            modulation=modulation,
        )

    def __post_init__(self) -> None:
        if not (isinstance(self.rolloff, int | float) and 0.0 <= self.rolloff <= 1.0):
            raise ProblemError("rolloff", f"{self.rolloff!r} must be a number in [0, 1]")
        span = self.span_symbols
        if isinstance(span, bool) or not isinstance(span, int):
            raise ProblemError("filter_span_symbols", f"{span!r} must be an integer")
        if not 1 <= span <= MAX_SPAN_SYMBOLS:
            raise ProblemError("filter_span_symbols", f"{span} must be in 1…{MAX_SPAN_SYMBOLS}")
        if not isinstance(self.window, Window):
            raise ProblemError("window", f"{self.window!r} is not a Window")
        object.__setattr__(self, "rolloff", float(self.rolloff))
        if self.amplifier is None:
            object.__setattr__(self, "modulation", None)
            return
        _check_amplifier(self.amplifier)
        if self.modulation is None:
            raise ProblemError("modulation", "is required when an amplifier is given")
        object.__setattr__(self, "modulation", Modulation(self.modulation))


def _check_amplifier(amplifier: Amplifier) -> None:
    if not isinstance(amplifier.model, AmplifierModel):
        raise ProblemError("amplifier.model", f"{amplifier.model!r} is not an AmplifierModel")
    backoff = amplifier.output_backoff_db
    if not (isinstance(backoff, int | float) and math.isfinite(backoff) and backoff > 0):
        raise ProblemError("amplifier.output_backoff_db", f"{backoff!r} must be finite and > 0")
    smooth = amplifier.smoothness
    if not (isinstance(smooth, int | float) and math.isfinite(smooth) and smooth > 0):
        raise ProblemError("amplifier.smoothness", f"{smooth!r} must be finite and > 0")


@dataclass(frozen=True, eq=False)
class _LeakageTable:
    """Adjacent-to-own power ratios (linear) at every breakpoint of the band-power functions.

    Between consecutive gaps both band powers are linear in the gap, so the ratio is monotone
    there and its running maximum from the right (the envelope) is exact.  One (6, G) array
    holds, per breakpoint: gap, leak below, leak above, and −envelope below, above and worst
    (ascending, ready for a binary search); one column slice gives a lookup all it needs.
    """

    rows: FloatArray

    GAP: ClassVar[int] = 0
    LEAK: ClassVar[dict[str, int]] = {"below": 1, "above": 2}
    RISING: ClassVar[dict[str, int]] = {"below": 3, "above": 4, "worst": 5}

    @property
    def gaps(self) -> FloatArray:
        return np.asarray(self.rows[self.GAP])

    def envelope(self, side: str) -> FloatArray:
        return np.asarray(-self.rows[self.RISING[side]])


@dataclass(frozen=True, eq=False)
class SpectrumProfile:
    """Normalised power spectral density of one emission (symbol rate 1).

    Attributes
    ----------
    freq : ndarray
        Bin centres in multiples of the symbol rate, uniform, centred on 0.
    psd : ndarray
        Power spectral density per unit of normalised frequency; ∫ psd df = 1.
    edges : ndarray
        Bin edges (one more than ``freq``).
    cumulative : ndarray
        Fraction of the total power below each edge (0 … 1).
    upper_tail : ndarray
        Fraction above each edge, summed from the top so that far upper bands keep full
        relative precision (1 − ``cumulative`` would lose it below about 1e-13).
    nominal_bandwidth : float
        Nominal (allocated) width in multiples of Rs: 1 + α for an RRC carrier.
    """

    freq: FloatArray
    psd: FloatArray
    edges: FloatArray
    cumulative: FloatArray
    upper_tail: FloatArray
    nominal_bandwidth: float
    _table: _LeakageTable = field(repr=False)
    _guard_cache: dict[tuple[float, str], float] = field(default_factory=dict, repr=False)

    @classmethod
    def from_density(
        cls, freq: npt.ArrayLike, density: npt.ArrayLike, nominal_bandwidth: float
    ) -> SpectrumProfile:
        """Build a profile from a density sampled on a uniform grid of bin centres.

        Parameters
        ----------
        freq : array_like
            Uniformly spaced bin centres, multiples of Rs, increasing.
        density : array_like
            Non-negative density at ``freq`` (any scale; normalised to unit power here).
        nominal_bandwidth : float
            Nominal width of the carrier and of the adjacent measurement band (Rs units).

        Returns
        -------
        SpectrumProfile
        """
        f = np.asarray(freq, dtype=np.float64)
        d = np.asarray(density, dtype=np.float64)
        if f.ndim != 1 or f.shape != d.shape or f.size < 2:
            raise ValueError(f"freq {f.shape} and density {d.shape} must be equal 1-D arrays")
        step = float(f[1] - f[0])
        if step <= 0 or not np.allclose(np.diff(f), step, rtol=1e-9, atol=0):
            raise ValueError("freq must be uniformly spaced and increasing")
        if np.any(d < 0) or not np.all(np.isfinite(d)) or float(d.sum()) <= 0:
            raise ValueError("density must be finite, non-negative and not all zero")
        if not 0 < nominal_bandwidth <= 2 * float(f[-1]):
            raise ValueError(f"{nominal_bandwidth=} must be > 0 and fit in the grid")
        psd = d / (float(d.sum()) * step)
        edges = np.concatenate([f - step / 2, [f[-1] + step / 2]])
        cumulative = np.concatenate([[0.0], np.cumsum(psd)])
        upper_tail = np.concatenate([np.cumsum(psd[::-1])[::-1], [0.0]])
        cumulative, upper_tail = cumulative / cumulative[-1], upper_tail / upper_tail[0]
        width = float(nominal_bandwidth)
        table = _leakage_table(_Bands(edges, cumulative, upper_tail), width)
        return cls(f, psd, edges, cumulative, upper_tail, width, table)

    @property
    def max_gap(self) -> float:
        """Largest gap (Rs units) for which the adjacent band lies inside the grid."""
        return float(self._table.gaps[-1])

    def power_in(self, f_lo: float, f_hi: float) -> float:
        """Fraction of the total power between ``f_lo`` and ``f_hi`` (Rs units).

        >>> profile = get_profile(EmissionKey(rolloff=0.2, span_symbols=32))
        >>> round(profile.power_in(-0.6, 0.6), 4)
        1.0
        """
        if not f_lo <= f_hi:
            raise ValueError(f"{f_lo=} must not exceed {f_hi=}")
        return float(self._bands.power(np.float64(f_lo), np.float64(f_hi)))

    def occupied_bandwidth(self, fraction: float = 0.99) -> float:
        """Occupied bandwidth (Rs units): (1 − fraction)/2 of the power below and above.

        ITU Radio Regulations No. 1.153 with β/2 = 0.5 % for the default ``fraction``.

        >>> profile = get_profile(EmissionKey(rolloff=0.2, span_symbols=32))
        >>> round(profile.occupied_bandwidth(), 2)
        1.07
        """
        if not 0.0 < fraction < 1.0:
            raise ValueError(f"{fraction=} must lie strictly between 0 and 1")
        tail = (1.0 - fraction) / 2.0
        lo, hi = np.interp([tail, 1.0 - tail], self.cumulative, self.edges)
        return float(hi - lo)

    def level_width(self, level_db: float) -> float:
        """Width (Rs units) between the outermost points where the PSD is ``level_db`` below
        its peak, interpolated linearly between bins (``level_db`` < 0, e.g. −3)."""
        if not level_db < 0:
            raise ValueError(f"{level_db=} must be negative (dB below the peak)")
        threshold = float(self.psd.max()) * 10.0 ** (level_db / 10.0)
        above = np.nonzero(self.psd >= threshold)[0]
        lo, hi = int(above[0]), int(above[-1])
        if lo == 0 or hi == self.psd.size - 1:
            raise ValueError(f"{level_db=} is not reached inside the profile's grid")
        f_lo = np.interp(threshold, self.psd[[lo - 1, lo]], self.freq[[lo - 1, lo]])
        f_hi = np.interp(threshold, self.psd[[hi + 1, hi]], self.freq[[hi + 1, hi]])
        return float(f_hi - f_lo)

    def psd_at(self, f: npt.ArrayLike) -> FloatArray:
        """Density (per unit Rs, ∫ = 1) at ``f`` (Rs units), linearly interpolated; 0 outside
        the grid (±``freq[-1]``)."""
        where = np.asarray(f, dtype=np.float64)
        return np.asarray(np.interp(where, self.freq, self.psd, left=0.0, right=0.0))

    @property
    def _bands(self) -> _Bands:
        return _Bands(self.edges, self.cumulative, self.upper_tail)

    def _leak(self, gap: FloatArray, side: str) -> FloatArray:
        return _adjacent_to_own(self._bands, self.nominal_bandwidth, gap, side)

    def _checked_gap(self, gap: npt.ArrayLike, side: str) -> FloatArray:
        if side not in _SIDES:
            raise ValueError(f"{side=} must be one of {_SIDES}")
        g = np.asarray(gap, dtype=np.float64)
        if np.any(~np.isfinite(g)) or np.any(g < 0) or np.any(g > self.max_gap):
            raise ValueError(f"gap={gap!r} must lie in [0, {self.max_gap:.4f}] (Rs units)")
        return g

    @overload
    def leakage_ratio_db(self, gap: float, side: Side = "worst") -> float: ...
    @overload
    def leakage_ratio_db(
        self, gap: FloatArray | Sequence[float], side: Side = "worst"
    ) -> FloatArray: ...
    def leakage_ratio_db(
        self, gap: float | FloatArray | Sequence[float], side: Side = "worst"
    ) -> float | FloatArray:
        """Own-band to adjacent-band power ratio (dB, positive; larger is better).

        The adjacent band has the carrier's nominal width and starts ``gap`` (Rs units) beyond
        the nominal edge ±(1+α)/2; ``side`` is ``"below"``, ``"above"`` or ``"worst"``.

        >>> profile = get_profile(EmissionKey(rolloff=0.2, span_symbols=16))
        >>> bool(profile.leakage_ratio_db(0.5) > profile.leakage_ratio_db(0.0) > 20)
        True
        """
        g = self._checked_gap(gap, side)
        sides = ("below", "above") if side == "worst" else (side,)
        leak = np.max([self._leak(g, s) for s in sides], axis=0)
        with np.errstate(divide="ignore"):
            ratio = -10.0 * np.log10(leak)
        return float(ratio) if ratio.ndim == 0 else np.asarray(ratio)

    @overload
    def leakage_envelope_db(self, gap: float, side: Side = "worst") -> float: ...
    @overload
    def leakage_envelope_db(
        self, gap: FloatArray | Sequence[float], side: Side = "worst"
    ) -> FloatArray: ...
    def leakage_envelope_db(
        self, gap: float | FloatArray | Sequence[float], side: Side = "worst"
    ) -> float | FloatArray:
        """Smallest leakage ratio (dB) over every gap ≥ ``gap``: non-decreasing in the gap.

        >>> profile = get_profile(EmissionKey(rolloff=0.2, span_symbols=16))
        >>> bool(profile.leakage_envelope_db(1.0) <= profile.leakage_ratio_db(1.0))
        True
        """
        g = self._checked_gap(gap, side)
        sides = ("below", "above") if side == "worst" else (side,)
        table = self._table
        index = np.searchsorted(table.gaps, g, side="right")
        worst = np.zeros(g.shape)
        for s in sides:
            beyond = table.envelope(s)[np.minimum(index, table.gaps.size - 1)]
            beyond = np.where(index < table.gaps.size, beyond, 0.0)
            worst = np.maximum(worst, np.maximum(self._leak(g, s), beyond))
        with np.errstate(divide="ignore"):
            ratio = -10.0 * np.log10(worst)
        return float(ratio) if ratio.ndim == 0 else np.asarray(ratio)

    def guard_needed(self, limit_db: float, side: Side = "worst") -> float:
        """Smallest gap (Rs units) beyond which the leakage ratio never drops below the limit.

        Found by binary search on the precomputed envelope and exact linear interpolation
        inside the bracketing interval; cached per (limit, side).  0.0 if the ratio meets the
        limit at every gap, ``math.inf`` if it is not met within :attr:`max_gap`.

        >>> profile = get_profile(EmissionKey(rolloff=0.2, span_symbols=16))
        >>> g = profile.guard_needed(60.0)
        >>> bool(0 < g < 1 and profile.leakage_envelope_db(g) >= 60.0 - 1e-6)
        True
        """
        cached = self._guard_cache.get((limit_db, side))
        if cached is not None:
            return cached
        if not math.isfinite(limit_db):
            raise ValueError(f"{limit_db=} must be finite")
        if side not in _SIDES:
            raise ValueError(f"{side=} must be one of {_SIDES}")
        threshold = math.pow(10.0, -limit_db / 10.0)
        table = self._table
        # First breakpoint from which the envelope stays within the threshold; for "worst"
        # the larger of the two sides' guards lies in the same interval of the merged one.
        i = int(table.rows[table.RISING[side]].searchsorted(-threshold))
        if i == 0:
            result = 0.0
        elif i == table.rows.shape[1]:
            result = math.inf
        else:
            column: list[list[float]] = table.rows[:, i - 1 : i + 1].tolist()
            (g0, g1) = column[table.GAP]
            result = 0.0
            for s in ("below", "above") if side == "worst" else (side,):
                if -column[table.RISING[s]][0] > threshold:  # this side binds here
                    l0, l1 = column[table.LEAK[s]]
                    result = max(result, g0 + (l0 - threshold) / (l0 - l1) * (g1 - g0))
        self._guard_cache[(limit_db, side)] = result
        return result


@dataclass(frozen=True, eq=False)
class _Bands:
    """Band powers from cumulative sums: the lower sum for bands reaching below 0, the upper
    sum for bands wholly above 0, so that a far band's power keeps full relative precision."""

    edges: FloatArray
    below: FloatArray
    above: FloatArray

    def power(self, lo: npt.ArrayLike, hi: npt.ArrayLike) -> FloatArray:
        lo_, hi_ = np.asarray(lo, dtype=np.float64), np.asarray(hi, dtype=np.float64)
        from_below = np.interp(hi_, self.edges, self.below) - np.interp(lo_, self.edges, self.below)
        from_above = np.interp(lo_, self.edges, self.above) - np.interp(hi_, self.edges, self.above)
        band = np.where(lo_ >= 0, from_above, from_below)
        return np.asarray(np.maximum(band, 0.0), dtype=np.float64)


def _adjacent_to_own(bands: _Bands, width: float, gap: FloatArray, side: str) -> FloatArray:
    """Adjacent-band power over own-band power (linear) at edge-to-edge ``gap`` (Rs units)."""
    half = width / 2.0
    if side == "above":
        adjacent = bands.power(half + gap, half + gap + width)
    else:
        adjacent = bands.power(-half - gap - width, -half - gap)
    return np.asarray(adjacent / bands.power(-half, half), dtype=np.float64)


def _leakage_table(bands: _Bands, width: float) -> _LeakageTable:
    edges, half = bands.edges, width / 2.0
    max_gap = min(float(edges[-1]) - half - width, -half - width - float(edges[0]))
    if max_gap <= 0:
        raise ValueError(f"the grid (±{edges[-1]:.3f} Rs) is too narrow for width {width}")
    candidates = np.concatenate(
        [edges - half, edges - half - width, -half - edges, -half - width - edges, [0, max_gap]]
    )
    gaps = np.unique(candidates[(candidates >= 0) & (candidates <= max_gap)])
    rows = np.empty((6, gaps.size))
    rows[_LeakageTable.GAP] = gaps
    for side in ("below", "above"):
        leak = _adjacent_to_own(bands, width, gaps, side)
        rows[_LeakageTable.LEAK[side]] = leak
        rows[_LeakageTable.RISING[side]] = -np.maximum.accumulate(leak[::-1])[::-1]
    rising = _LeakageTable.RISING
    rows[rising["worst"]] = np.minimum(rows[rising["below"]], rows[rising["above"]])
    return _LeakageTable(rows)


def _linear_profile(key: EmissionKey) -> SpectrumProfile:
    taps = rrc_taps(key.rolloff, key.span_symbols, LINEAR_SAMPLES_PER_SYMBOL, key.window)
    spectrum = np.abs(sp_fft.fft(taps, LINEAR_FFT_SIZE)) ** 2
    freq = sp_fft.fftfreq(LINEAR_FFT_SIZE, d=1.0 / LINEAR_SAMPLES_PER_SYMBOL)
    # fftshift, then drop the lone −Nyquist bin so that the grid is symmetric about 0.
    return SpectrumProfile.from_density(
        sp_fft.fftshift(freq)[1:], sp_fft.fftshift(spectrum)[1:], 1.0 + key.rolloff
    )


def simulate_amplifier_psd(
    points: npt.ArrayLike, key: EmissionKey, rng: np.random.Generator
) -> tuple[FloatArray, FloatArray]:
    """Welch estimate of the amplified, RRC-shaped emission of random constellation symbols.

    Parameters
    ----------
    points : array_like of complex
        Constellation points (unit mean energy).
    key : EmissionKey
        Filter and amplifier settings (``key.amplifier`` must not be ``None``).
    rng : numpy.random.Generator
        Source of the i.i.d. symbols (pass ``default_rng(seed)`` for reproducibility).

    Returns
    -------
    freq : ndarray
        Bin centres in Rs units, symmetric about 0 (±8 Rs).
    psd : ndarray
        Two-sided density estimate (arbitrary scale).

    References
    ----------
    P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra,"
    IEEE Trans. Audio Electroacoust. AU-15(2):70–73, 1967 (:func:`scipy.signal.welch`).
    """
    if key.amplifier is None:
        raise ValueError(f"{key=} has no amplifier to simulate")
    sps = AMPLIFIER_SAMPLES_PER_SYMBOL
    constellation_points = np.asarray(points, dtype=np.complex128)
    symbols = constellation_points[rng.integers(0, constellation_points.size, AMPLIFIER_SYMBOLS)]
    taps = rrc_taps(key.rolloff, key.span_symbols, sps, key.window)
    shaped = signal.upfirdn(taps, symbols, up=sps)[taps.size : -taps.size]
    drive = solve_drive(shaped.real**2 + shaped.imag**2, key.amplifier)
    output = amplify(drive * shaped, key.amplifier)
    freq, density = signal.welch(
        output,
        fs=sps,
        window=WELCH_WINDOW,
        nperseg=AMPLIFIER_SEGMENT,
        detrend=False,
        return_onesided=False,
        scaling="density",
    )
    return sp_fft.fftshift(freq)[1:], sp_fft.fftshift(density)[1:]


def build_profile(key: EmissionKey, seed: int = DEFAULT_SEED) -> SpectrumProfile:
    """Compute the normalised profile of ``key`` (uncached; see :func:`get_profile`).

    Parameters
    ----------
    key : EmissionKey
        What the emission depends on.
    seed : int, optional
        Seed of the random symbols for an amplifier simulation (ignored when linear).

    Returns
    -------
    SpectrumProfile
        Spectrum normalised to symbol rate 1 and unit total power.

    References
    ----------
    Proakis & Salehi, *Digital Communications*, 5th ed. (2008), §8.1 (PSD of a linearly
    modulated signal with i.i.d. zero-mean symbols ∝ |P(f)|²); ITU RR No. 1.153.
    """
    if key.amplifier is None:
        return _linear_profile(key)
    freq, density = _amplifier_density(key, seed)
    return SpectrumProfile.from_density(freq, density, 1.0 + key.rolloff)


@functools.lru_cache(maxsize=256)
def get_profile(key: EmissionKey) -> SpectrumProfile:
    """Cached :func:`build_profile` with the default seed, bit for bit.

    In memory (thread-safe ``lru_cache``) and, for amplifier profiles, on disk across processes
    (:mod:`solver.physics.profilecache`, directory from ``BANDWRIGHT_CACHE_DIR``).  Linear profiles
    are not stored: they take milliseconds, half of it in the leakage table a load would rebuild.

    >>> get_profile(EmissionKey(0.2, 16)) is get_profile(EmissionKey(0.2, 16))
    True
    """
    if key.amplifier is None:
        return build_profile(key)
    return _stored_amplifier_profile(key, DEFAULT_SEED)


def _constellation_points(key: EmissionKey) -> ComplexArray:
    if key.modulation is None:
        raise ProblemError("modulation", "is required when an amplifier is given")
    return np.asarray(constellation(key.modulation).points, dtype=np.complex128)


def _amplifier_density(key: EmissionKey, seed: int) -> tuple[FloatArray, FloatArray]:
    points = _constellation_points(key)
    freq, density = simulate_amplifier_psd(points, key, np.random.default_rng(seed))
    logger.debug("amplifier profile computed for %s", key)
    return freq, density


def _stored_amplifier_profile(key: EmissionKey, seed: int) -> SpectrumProfile:
    """The amplifier profile from its stored density if there is a usable one, else simulated
    and stored; :meth:`SpectrumProfile.from_density` runs on the same arrays either way."""
    fields = _stored_fields(key, seed)
    stored = profilecache.load_arrays(fields, ("freq", "density"))
    if stored is not None:
        try:
            profile = SpectrumProfile.from_density(
                stored["freq"], stored["density"], 1.0 + key.rolloff
            )
        except ValueError as exc:
            logger.info("stored amplifier profile for %s rejected (%s); recomputing", key, exc)
        else:
            logger.debug("amplifier profile loaded for %s", key)
            return profile
    freq, density = _amplifier_density(key, seed)
    profilecache.store_arrays(fields, {"freq": freq, "density": density})
    return SpectrumProfile.from_density(freq, density, 1.0 + key.rolloff)


def _stored_fields(key: EmissionKey, seed: int) -> dict[str, object]:
    """Everything the simulated density of ``key`` depends on (see :data:`PROFILE_VERSION`)."""
    sps = AMPLIFIER_SAMPLES_PER_SYMBOL
    parameters: dict[str, object] = {
        "seed": seed,
        "samples_per_symbol": sps,
        "symbols": AMPLIFIER_SYMBOLS,
        "welch_segment": AMPLIFIER_SEGMENT,
        "welch_window": WELCH_WINDOW,
        "drive_grid_db": DRIVE_GRID_DB,
        "drive_decimation": BRACKET_DECIMATION,
        "drive_refine": DRIVE_REFINE,
        "saleh": (SALEH_ALPHA_A, SALEH_BETA_A, SALEH_ALPHA_PHI, SALEH_BETA_PHI),
    }
    taps = rrc_taps(key.rolloff, key.span_symbols, sps, key.window)
    inputs = {"points": _constellation_points(key), "taps": taps}
    return profilecache.key_fields(
        version=PROFILE_VERSION, key=key, parameters=parameters, inputs=inputs
    )


PROFILE_WORKERS: Final = 2
"""Threads that compute uncached profiles at once (numpy and scipy release the GIL in the
heavy loops; two threads build amplifier profiles 1.8 times as fast on this 2-core machine)."""


def warm_profiles(keys: Iterable[EmissionKey]) -> None:
    """Compute the profiles of ``keys`` that are not cached yet, a few threads at a time.

    Amplifier profiles take about 0.3 s each and a plan may need dozens, so the first plan of a
    process is dominated by them unless they are stored on disk already; results are exactly
    those of :func:`get_profile` (each profile's random symbols come from its own seeded
    generator).
    """
    todo = [k for k in dict.fromkeys(keys) if k.amplifier is not None]
    workers = min(PROFILE_WORKERS, len(os.sched_getaffinity(0)), len(todo))
    if workers < 2:
        return
    with ThreadPoolExecutor(workers, thread_name_prefix="profiles") as pool:
        for _ in pool.map(get_profile, todo):
            pass


def _check_rate(symbol_rate_baud: float) -> float:
    if not (isinstance(symbol_rate_baud, int | float) and 0 < symbol_rate_baud < math.inf):
        raise ValueError(f"{symbol_rate_baud=} must be a finite number > 0")
    return float(symbol_rate_baud)


def occupied_bandwidth_hz(key: EmissionKey, symbol_rate_baud: float) -> float:
    """99 % occupied bandwidth (Hz) of a carrier at ``symbol_rate_baud`` (baud).

    The profile's :meth:`~SpectrumProfile.occupied_bandwidth` (Rs units) times the symbol
    rate.  References: ITU Radio Regulations No. 1.153 (β/2 = 0.5 %).

    >>> round(occupied_bandwidth_hz(EmissionKey(0.2, 32), 1e6) / 1e3)
    1073
    """
    return get_profile(key).occupied_bandwidth() * _check_rate(symbol_rate_baud)


def guard_needed_hz(key: EmissionKey, symbol_rate_baud: float, limit_db: float) -> float:
    """Guard (Hz) beyond the nominal edge after which the leakage ratio stays ≥ ``limit_db``.

    ``symbol_rate_baud`` in baud, ``limit_db`` in dB (positive, ACLR convention); ``math.inf``
    when the limit is never met on the profile's grid.  References: 3GPP TS 38.104 §6.6.3
    (ratio definition); :meth:`SpectrumProfile.guard_needed`.

    >>> guard_needed_hz(EmissionKey(0.2, 16), 1e6, 10.0)
    0.0
    """
    return get_profile(key).guard_needed(limit_db) * _check_rate(symbol_rate_baud)


def leakage_ratio_db_at(
    key: EmissionKey, symbol_rate_baud: float, gap_hz: float, side: Side = "worst"
) -> float:
    """Leakage ratio (dB) into an adjacent band of the same nominal width, ``gap_hz`` away.

    ``gap_hz`` (Hz) is the edge-to-edge gap from the nominal edge; ``side`` is ``"below"``,
    ``"above"`` or ``"worst"``.  References: 3GPP TS 38.104 §6.6.3 (ratio definition).

    >>> bool(leakage_ratio_db_at(EmissionKey(0.2, 16), 1e6, 0.0) > 20)
    True
    """
    rate = _check_rate(symbol_rate_baud)
    return get_profile(key).leakage_ratio_db(float(gap_hz) / rate, side)
