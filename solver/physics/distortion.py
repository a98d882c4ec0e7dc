"""In-band distortion of a memoryless amplifier as an error-vector floor.

A filtered multi-level carrier's complex envelope is modelled as a circular complex Gaussian
signal x.  Bussgang's theorem splits the amplifier output into a scaled copy of the input and
a distortion term uncorrelated with it, y = α·x + d; the distortion power sets a floor on the
error-vector magnitude that no increase of thermal Es/N0 removes.  Everything here is computed
by one-dimensional quadrature over the Rayleigh envelope (no sampling).

Normalisation follows :mod:`solver.physics.amplifier`: the Rapp model has unit small-signal
gain and unit saturation amplitude; the Saleh model uses the published fit, whose small-signal
gain is α_a and whose saturation input amplitude is 1/√β_a.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Final, overload

import numpy as np
import numpy.typing as npt
from scipy import integrate, optimize

from solver.model import Amplifier, AmplifierModel, ProblemError
from solver.physics.amplifier import (
    SALEH_ALPHA_A,
    SALEH_ALPHA_PHI,
    SALEH_BETA_A,
    SALEH_BETA_PHI,
    saturation_power,
)

__all__ = [
    "Distortion",
    "bussgang",
    "combined_evm_pct",
    "effective_esn0_db",
    "output_p1db_db",
    "thermal_esn0_needed_db",
]

FloatArray = npt.NDArray[np.float64]

logger = logging.getLogger(__name__)

QUAD_RELATIVE_TOLERANCE: Final = 1e-11
QUAD_LIMIT: Final = 200
# Summed error estimate accepted, relative (4e-4 dB) plus an absolute floor on these unit-scale
# expectations (a residual below 1e-24 means an SDR above 240 dB, not resolved); beyond: logged.
QUAD_ACCEPTED_ERROR: Final = 1e-4
QUAD_ERROR_FLOOR: Final = 1e-24
# Break points of the exponential weight e^(−u) (u = envelope power / mean input power): the
# quadrature is split there and at the amplifier's knee, so no segment hides a narrow peak.
WEIGHT_BREAKS: Final = (0.5, 2.0, 8.0, 32.0, 128.0)
WEIGHT_END: Final = 745.0  # e^(−745) is the last double above zero
# Drive search, as mean input power relative to the saturation input power (dB).
DRIVE_LOW_DB: Final = -80.0
DRIVE_HIGH_DB: Final = 300.0  # Rapp p = 0.1 needs +196 dB of drive for 0.5 dB, +267 dB for 0.1 dB
DRIVE_RELATIVE_TOLERANCE: Final = 1e-13
COMPRESSION_DB: Final = 1.0
CACHE_SIZE: Final = 1024  # amplifiers (model, smoothness, back-off) kept in memory


@dataclass(frozen=True)
class Distortion:
    """Bussgang decomposition of an amplifier driven by a complex Gaussian signal.

    Attributes
    ----------
    gain : complex
        Bussgang gain α = E[y·x*]/E[|x|²] of the normalised model (output amplitude per input
        amplitude; its phase is the mean AM/PM rotation, 0 for Rapp).
    signal_to_distortion_db : float
        |α|²·E[|x|²] / E[|y − α·x|²] in dB.
    evm_pct : float
        Error-vector magnitude after the best complex gain, 100/√SDR (% rms).
    input_backoff_db : float
        Saturation input power over the mean input power (dB): 10·log10(v_sat²/E[|x|²]).
    """

    gain: complex
    signal_to_distortion_db: float
    evm_pct: float
    input_backoff_db: float


def bussgang(amplifier: Amplifier) -> Distortion:
    """Bussgang gain, signal-to-distortion ratio and EVM floor for a complex Gaussian input.

    The input is scaled so that the mean output power lies ``output_backoff_db`` below the
    saturated output power (the definition :func:`solver.physics.amplifier.solve_drive` uses).

    Parameters
    ----------
    amplifier : Amplifier
        Model (Rapp with smoothness p, or Saleh) and output back-off in dB (> 0).

    Returns
    -------
    Distortion
        Bussgang gain, SDR (dB), EVM floor (% rms) and input back-off (dB).  Cached per
        amplifier (``functools.lru_cache``, the last 1024).

    Raises
    ------
    ProblemError
        The back-off is not a finite number > 0, the Rapp smoothness is not finite and > 0,
        or the Saleh amplifier cannot reach the back-off with a Gaussian input.

    Notes
    -----
    With s = |x|² exponentially distributed (Rayleigh envelope) and the complex gain
    G(s) = y/x = g₀·(1 + Δ(s)), σ² = E[s], u = s/σ²:
    α = g₀·(1 + δ) with δ = E[u·Δ], and D = g₀²·σ²·E[u·|Δ − δ|²], so
    SDR = |1 + δ|² / E[u·|Δ − δ|²].  Working with Δ avoids the cancellation of
    E[|y|²] − |α|²·σ² at large back-off.  Expectations are ``scipy.integrate.quad`` over
    u ∈ [0, ∞) with weight e^(−u); the drive σ² is found by ``scipy.optimize.brentq``.

    References
    ----------
    J. J. Bussgang, "Crosscorrelation functions of amplitude-distorted Gaussian signals,"
    MIT RLE Tech. Rep. 216, 1952.
    C. Rapp, Proc. 2nd ECSC, Liège, 1991, ESA SP-332, pp. 179–184.
    A. A. M. Saleh, IEEE Trans. Commun. COM-29(11):1715–1720, 1981.

    Examples
    --------
    >>> from solver.model import Amplifier
    >>> floor = bussgang(Amplifier(smoothness=1e6, output_backoff_db=3.0))  # near clipper
    >>> round(floor.signal_to_distortion_db, 2)
    15.3
    """
    _validate(amplifier)
    smoothness = amplifier.smoothness if amplifier.model is AmplifierModel.RAPP else 0.0
    return _bussgang(amplifier.model, float(smoothness), float(amplifier.output_backoff_db))


def _validate(amplifier: Amplifier) -> None:
    backoff = amplifier.output_backoff_db
    if not (isinstance(backoff, int | float) and math.isfinite(backoff) and backoff > 0):
        raise ProblemError("amplifier.output_backoff_db", f"{backoff} must be a finite dB > 0")
    p = amplifier.smoothness
    if amplifier.model is AmplifierModel.RAPP and not (
        isinstance(p, int | float) and math.isfinite(p) and p > 0
    ):
        raise ProblemError("amplifier.smoothness", f"{p} must be a finite number > 0")


@functools.lru_cache(maxsize=CACHE_SIZE)
def _bussgang(model: AmplifierModel, smoothness: float, backoff_db: float) -> Distortion:
    deviation = _deviation_function(model, smoothness)
    knee = _saturation_input_power(model)
    sigma2 = _solve_drive(model, deviation, backoff_db)
    u_knee = knee / sigma2

    def deviation_at(u: float) -> complex:
        return deviation(sigma2 * u)

    delta = complex(
        _expect(lambda u: u * deviation_at(u).real, u_knee),
        _expect(lambda u: u * deviation_at(u).imag, u_knee),
    )
    residual = _expect(lambda u: u * abs(deviation_at(u) - delta) ** 2, u_knee)
    sdr = abs(1.0 + delta) ** 2 / residual if residual > 0 else math.inf
    return Distortion(
        gain=_small_signal_gain(model) * (1.0 + delta),
        signal_to_distortion_db=10.0 * math.log10(sdr),
        evm_pct=100.0 / math.sqrt(sdr),
        input_backoff_db=10.0 * math.log10(u_knee),
    )


def _small_signal_gain(model: AmplifierModel) -> float:
    return SALEH_ALPHA_A if model is AmplifierModel.SALEH else 1.0


def _saturation_input_power(model: AmplifierModel) -> float:
    """Input power at which the AM/AM curve saturates (Rapp 1, Saleh 1/β_a)."""
    return 1.0 / SALEH_BETA_A if model is AmplifierModel.SALEH else 1.0


def _deviation_function(model: AmplifierModel, smoothness: float) -> Callable[[float], complex]:
    """Δ(s) = G(s)/g₀ − 1 as a function of the instantaneous input power s."""
    if model is AmplifierModel.SALEH:
        return _saleh_deviation
    return functools.partial(_rapp_deviation, smoothness=smoothness)


def _rapp_deviation(s: float, smoothness: float) -> complex:
    """Rapp: (1 + s^p)^(−1/(2p)) − 1, through log1p and expm1 (accurate for s^p ≪ 1)."""
    if s <= 0.0:
        return 0j
    exponent = smoothness * math.log(s)
    if exponent > 30.0:  # log1p(s^p) = p·ln s + log1p(s^−p), without overflow
        log_term = exponent + math.log1p(math.exp(-exponent))
    else:
        log_term = math.log1p(math.exp(exponent))
    return complex(math.expm1(-log_term / (2.0 * smoothness)), 0.0)


def _saleh_deviation(s: float) -> complex:
    """Saleh: e^(jΦ)/(1 + β_a·s) − 1 = (e^(jΦ) − 1 − β_a·s)/(1 + β_a·s)."""
    phase = SALEH_ALPHA_PHI * s / (1.0 + SALEH_BETA_PHI * s)
    half = math.sin(0.5 * phase)
    denominator = 1.0 + SALEH_BETA_A * s
    return complex(-2.0 * half * half - SALEH_BETA_A * s, math.sin(phase)) / denominator


def _expect(function: Callable[[float], float], u_knee: float) -> float:
    """E[f(u)] for u ~ Exp(1), split at the weight's break points and the knee.

    A segment where f is almost zero (below a sharp knee) may miss the relative tolerance
    without harm, so quad's own warnings are replaced by one check of the summed error.
    """
    breaks = sorted({0.0, *WEIGHT_BREAKS, *([u_knee] if 0.0 < u_knee < WEIGHT_END else [])})
    total = error = 0.0
    for low, high in zip(breaks, [*breaks[1:], WEIGHT_END], strict=True):
        value, abserr, *_ = integrate.quad(
            lambda u: function(u) * math.exp(-u),
            low,
            high,
            epsabs=0.0,
            epsrel=QUAD_RELATIVE_TOLERANCE,
            limit=QUAD_LIMIT,
            full_output=1,
        )
        total += value
        error += abserr
    if error > QUAD_ACCEPTED_ERROR * abs(total) + QUAD_ERROR_FLOOR:
        logger.warning("quadrature error %.3g on an expectation of %.6g", error, total)
    return total


def _mean_output_power(
    sigma2: float, model: AmplifierModel, deviation: Callable[[float], complex]
) -> float:
    """E[|y|²] for mean input power σ²: g₀²·σ²·E[u·|1 + Δ(σ²u)|²]."""
    knee = _saturation_input_power(model) / sigma2
    mean = _expect(lambda u: u * abs(1.0 + deviation(sigma2 * u)) ** 2, knee)
    return _small_signal_gain(model) ** 2 * sigma2 * mean


def _solve_drive(
    model: AmplifierModel, deviation: Callable[[float], complex], backoff_db: float
) -> float:
    """Mean input power σ² whose mean output power is ``backoff_db`` below saturation.

    The search runs on log σ²; the Saleh curve falls again past its peak, so the root is
    bracketed on the rising side of the peak (found by a bounded scalar minimisation).
    """
    target = saturation_power(Amplifier(model=model)) * math.pow(10.0, -backoff_db / 10.0)
    knee = _saturation_input_power(model)

    def excess(log_sigma2: float) -> float:
        return _mean_output_power(math.exp(log_sigma2), model, deviation) / target - 1.0

    low = math.log(knee) + DRIVE_LOW_DB / 10.0 * math.log(10.0)
    high = math.log(knee) + DRIVE_HIGH_DB / 10.0 * math.log(10.0)
    if model is AmplifierModel.SALEH:
        peak = optimize.minimize_scalar(
            lambda t: -excess(t), bounds=(low, math.log(knee) + 5.0), method="bounded"
        )
        high = float(peak.x)
    if excess(high) < 0.0:
        closest_db = backoff_db - 10.0 * math.log10(1.0 + excess(high))
        raise ProblemError(
            "amplifier.output_backoff_db",
            f"{backoff_db} dB cannot be reached with a Gaussian input: the mean output power "
            f"comes at best {closest_db:.3f} dB below saturation",
        )
    log_sigma2 = optimize.brentq(excess, low, high, xtol=1e-14, rtol=DRIVE_RELATIVE_TOLERANCE)
    return math.exp(float(log_sigma2))


def output_p1db_db(amplifier: Amplifier) -> float:
    """Single-tone output power at 1 dB gain compression, relative to saturated output power.

    Parameters
    ----------
    amplifier : Amplifier
        Model and smoothness (the back-off is not used).

    Returns
    -------
    float
        Output P1dB relative to the saturated output power (dB, ≤ 0).

    Notes
    -----
    Solves |G(s)/g₀| = 10^(−1/20) for the input power s of a constant-envelope tone with
    ``scipy.optimize.brentq`` on the same gain function :func:`bussgang` integrates.

    References
    ----------
    C. Rapp, Proc. 2nd ECSC, Liège, 1991, ESA SP-332, pp. 179–184.

    Examples
    --------
    >>> from solver.model import Amplifier
    >>> round(output_p1db_db(Amplifier(smoothness=2.0)), 3)
    -2.165
    """
    p = amplifier.smoothness
    if amplifier.model is AmplifierModel.RAPP and not (
        isinstance(p, int | float) and math.isfinite(p) and p > 0
    ):
        raise ProblemError("amplifier.smoothness", f"{p} must be a finite number > 0")
    deviation = _deviation_function(amplifier.model, float(p))
    compressed = math.pow(10.0, -COMPRESSION_DB / 20.0)

    def excess(log_s: float) -> float:
        return abs(1.0 + deviation(math.exp(log_s))) - compressed

    log_s = float(optimize.brentq(excess, -60.0, 60.0, xtol=1e-14))
    g0 = _small_signal_gain(amplifier.model)
    output = g0**2 * math.exp(log_s) * compressed**2
    return 10.0 * math.log10(output / saturation_power(amplifier))


def combined_evm_pct(*floors_pct: float) -> float:
    """Root-sum-square of independent error-vector floors.

    Parameters
    ----------
    *floors_pct : float
        EVM contributions (% rms, each finite and ≥ 0).

    Returns
    -------
    float
        Combined EVM (% rms); 0 for no arguments.

    Notes
    -----
    Independent zero-mean error vectors add in power: EVM² = Σ EVMᵢ².

    Examples
    --------
    >>> combined_evm_pct(3.0, 4.0)
    5.0
    """
    for floor in floors_pct:
        if not (math.isfinite(floor) and floor >= 0):
            raise ValueError(f"{floor=} must be a finite EVM in % ≥ 0")
    return math.sqrt(math.fsum(floor * floor for floor in floors_pct))


@overload
def effective_esn0_db(esn0_db: float, evm_pct: float) -> float: ...


@overload
def effective_esn0_db(esn0_db: npt.ArrayLike, evm_pct: npt.ArrayLike) -> FloatArray: ...


def effective_esn0_db(esn0_db: npt.ArrayLike, evm_pct: npt.ArrayLike) -> float | FloatArray:
    """Es/N0 seen by the demodulator when thermal noise and an EVM floor add.

    Parameters
    ----------
    esn0_db : float or array_like
        Thermal Es/N0 (dB); +inf means no thermal noise.
    evm_pct : float or array_like
        Error-vector floor (% rms, ≥ 0); broadcast against ``esn0_db``.

    Returns
    -------
    float or ndarray
        1 / (1/(Es/N0) + (EVM/100)²) in dB; a float when both inputs are scalars.

    Notes
    -----
    The distortion is treated as additive noise uncorrelated with the symbols (Bussgang), so
    its power EVM² (relative to the symbol energy) adds to N0/Es.

    Examples
    --------
    >>> round(effective_esn0_db(20.0, 10.0), 3)  # two equal halves: 3.010 dB down
    16.99
    >>> effective_esn0_db([10.0, np.inf], [0.0, 1.0]).tolist()
    [10.0, 40.0]
    """
    esn0 = np.asarray(esn0_db, dtype=np.float64)
    evm = np.asarray(evm_pct, dtype=np.float64)
    if np.any(np.isnan(esn0)) or np.any(~(evm >= 0)) or np.any(np.isinf(evm)):
        raise ValueError(f"{esn0_db=} must not be NaN and {evm_pct=} must be finite and ≥ 0")
    with np.errstate(divide="ignore"):
        noise = 10.0 ** (-esn0 / 10.0) + (evm / 100.0) ** 2
        result = -10.0 * np.log10(noise)
    if result.ndim == 0:
        return float(result)
    return np.asarray(result, dtype=np.float64)


def thermal_esn0_needed_db(required_effective_db: float, evm_pct: float) -> float:
    """Thermal Es/N0 at which the effective Es/N0 just reaches a requirement.

    Parameters
    ----------
    required_effective_db : float
        Effective Es/N0 the MODCOD needs (dB).
    evm_pct : float
        Error-vector floor (% rms, ≥ 0).

    Returns
    -------
    float
        −10·log10(1/required − (EVM/100)²) in dB; ``math.inf`` when the floor alone already
        reaches the requirement, (EVM/100)² ≥ 1/required.

    Examples
    --------
    >>> thermal_esn0_needed_db(20.0, 0.0)
    20.0
    >>> thermal_esn0_needed_db(20.0, 10.0)
    inf
    """
    if not (math.isfinite(evm_pct) and evm_pct >= 0) or math.isnan(required_effective_db):
        raise ValueError(f"{evm_pct=} must be finite and ≥ 0; {required_effective_db=}")
    headroom = math.pow(10.0, -required_effective_db / 10.0) - (evm_pct / 100.0) ** 2
    if headroom <= 0.0:
        return math.inf
    return -10.0 * math.log10(headroom)
