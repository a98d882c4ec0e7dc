"""Memoryless power-amplifier models and the drive that sets a given output back-off.

Rapp (1991) AM/AM for solid-state amplifiers, Saleh (1981) AM/AM and AM/PM for travelling-wave
tubes.  :mod:`solver.physics.emission` passes shaped symbols through them to estimate spectral
regrowth.
"""

from __future__ import annotations

import math
from typing import Final

import numpy as np
import numpy.typing as npt
from scipy import optimize

from solver.model import Amplifier, AmplifierModel, ProblemError

__all__ = [
    "SALEH_ALPHA_A",
    "SALEH_ALPHA_PHI",
    "SALEH_BETA_A",
    "SALEH_BETA_PHI",
    "amplify",
    "rapp_am_am",
    "saleh",
    "saturation_power",
    "solve_drive",
]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]

# Drive bracketing: coarse grid of RMS input (dB re saturation input) on every 16th sample,
# then the secant method on the full envelope from the decimated solution (second point +0.1 %).
DRIVE_GRID_DB: Final = (-60.0, 40.0, 26)
BRACKET_DECIMATION: Final = 16
DRIVE_REFINE: Final = 1e-3

SALEH_ALPHA_A: Final = 2.1587
SALEH_BETA_A: Final = 1.1517
SALEH_ALPHA_PHI: Final = 4.0033
SALEH_BETA_PHI: Final = 9.1040
"""Saleh's fitted TWT parameters (Saleh 1981, IEEE Trans. Commun. COM-29(11))."""


def rapp_am_am(v: npt.ArrayLike, smoothness: float) -> FloatArray:
    """Rapp solid-state amplifier AM/AM curve with unit gain and unit saturation amplitude.

    A(v) = v / (1 + v^(2p))^(1/(2p)), evaluated without dividing by v and with the exact
    limit A(v) → 1 where v^(2p) overflows.

    Parameters
    ----------
    v : array_like
        Input amplitude relative to the saturation amplitude (≥ 0, dimensionless).
    smoothness : float
        Rapp's smoothness p (> 0); p → ∞ is an ideal limiter.

    Returns
    -------
    ndarray
        Output amplitude relative to the saturation amplitude (saturated output power 1).

    References
    ----------
    C. Rapp, "Effects of HPA-nonlinearity on a 4-DPSK/OFDM-signal for a digital sound
    broadcasting system," Proc. 2nd ECSC, Liège, 1991, ESA SP-332, pp. 179–184.

    Examples
    --------
    >>> rapp_am_am([0.0, 1.0, 1e6], 2.0).round(6).tolist()
    [0.0, 0.840896, 1.0]
    """
    if not (isinstance(smoothness, int | float) and smoothness > 0 and math.isfinite(smoothness)):
        raise ValueError(f"{smoothness=} must be a finite number > 0")
    vv = np.asarray(v, dtype=np.float64)
    return np.asarray(vv * _rapp_gain(vv, float(smoothness)), dtype=np.float64)


def _rapp_gain(v: FloatArray, smoothness: float) -> FloatArray:
    """A(v)/v = (1 + v^(2p))^(−1/(2p)); where v^(2p) overflows the limit 1/v is exact."""
    with np.errstate(over="ignore"):
        powered = (v * v) ** smoothness
    gain = (1.0 + powered) ** (-0.5 / smoothness)
    overflow = np.isinf(powered)
    if overflow.any():
        gain = np.where(overflow, 1.0 / np.where(overflow, v, 1.0), gain)
    return np.asarray(gain, dtype=np.float64)


def saleh(r: npt.ArrayLike) -> tuple[FloatArray, FloatArray]:
    """Saleh travelling-wave-tube amplifier model with the published fitted parameters.

    A(r) = α_a·r/(1 + β_a·r²) and Φ(r) = α_φ·r²/(1 + β_φ·r²) with α_a = 2.1587,
    β_a = 1.1517, α_φ = 4.0033, β_φ = 9.1040; saturation at r = 1/√β_a.

    Parameters
    ----------
    r : array_like
        Normalised input amplitude (≥ 0, dimensionless).

    Returns
    -------
    amplitude : ndarray
        Output amplitude (normalised; peak α_a/(2√β_a) ≈ 1.0058).
    phase : ndarray
        Output phase shift in radians.

    References
    ----------
    A. A. M. Saleh, "Frequency-independent and frequency-dependent nonlinear models of TWT
    amplifiers," IEEE Trans. Commun. COM-29(11):1715–1720, Nov. 1981.

    Examples
    --------
    >>> amplitude, phase = saleh(1.0)
    >>> round(float(amplitude), 4), round(float(phase), 4)
    (1.0033, 0.3962)
    """
    rr = np.asarray(r, dtype=np.float64)
    amplitude = SALEH_ALPHA_A * rr / (1.0 + SALEH_BETA_A * rr**2)
    phase = SALEH_ALPHA_PHI * rr**2 / (1.0 + SALEH_BETA_PHI * rr**2)
    return np.asarray(amplitude, dtype=np.float64), np.asarray(phase, dtype=np.float64)


def saturation_power(amplifier: Amplifier) -> float:
    """Saturated output power of the normalised model (amplitude squared)."""
    if amplifier.model is AmplifierModel.SALEH:
        return float(saleh(1.0 / math.sqrt(SALEH_BETA_A))[0]) ** 2
    return 1.0


def amplify(x: ComplexArray, amplifier: Amplifier) -> ComplexArray:
    magnitude = np.abs(x)
    if amplifier.model is AmplifierModel.SALEH:
        amplitude, phase = saleh(magnitude)
        gain = np.where(magnitude > 0, amplitude / np.where(magnitude > 0, magnitude, 1.0), 0)
        return np.asarray(x * gain * np.exp(1j * phase), dtype=np.complex128)
    return np.asarray(x * _rapp_gain(magnitude, amplifier.smoothness), dtype=np.complex128)


def _output_power(power: FloatArray, drive: float, amplifier: Amplifier) -> float:
    """Mean output power for instantaneous input powers ``power`` scaled by ``drive``²."""
    u = (drive * drive) * power
    if amplifier.model is AmplifierModel.SALEH:  # A(r)² = α_a²·u/(1 + β_a·u)², u = r²
        return float(np.mean(SALEH_ALPHA_A**2 * u / (1.0 + SALEH_BETA_A * u) ** 2))
    p = amplifier.smoothness
    with np.errstate(over="ignore"):
        powered = u**p
    out = u * (1.0 + powered) ** (-1.0 / p)  # Rapp A(v)² with u = v²; → 1 where u^p overflows
    return float(np.mean(np.where(np.isinf(powered), 1.0, out)))


def solve_drive(power: FloatArray, amplifier: Amplifier) -> float:
    """Input scale that puts the mean output power ``output_backoff_db`` below saturation.

    A coarse grid of drives on a decimated copy of the envelope brackets the root on the
    rising part of the mean output power (Saleh's falls again past saturation); brentq then
    solves on the full envelope.
    """
    saturation = saturation_power(amplifier)
    target = saturation * math.pow(10.0, -amplifier.output_backoff_db / 10.0)
    rms = math.sqrt(float(np.mean(power)))
    saturation_input = (
        1.0 / math.sqrt(SALEH_BETA_A) if amplifier.model is AmplifierModel.SALEH else 1.0
    )
    low_db, high_db, count = DRIVE_GRID_DB
    drives = saturation_input * 10.0 ** (np.linspace(low_db, high_db, count) / 20.0) / rms
    coarse = power[::BRACKET_DECIMATION]
    powers = np.array([_output_power(coarse, float(d), amplifier) for d in drives])
    peak = int(np.argmax(powers))
    first = int(np.argmax(powers[: peak + 1] >= target))
    lo = float(drives[first - 1]) if first > 0 else float(drives[0]) / 10.0
    hi = float(drives[min(first + 1, peak)])

    def excess(drive: float, samples: FloatArray = power) -> float:
        return _output_power(samples, drive, amplifier) - target

    try:
        if powers[peak] < target:
            raise ValueError("target above the largest mean output")
        # Solve on the decimated envelope first, then refine on the full one by the secant
        # method from that guess (3–4 evaluations); brentq on the bracket if it strays.
        guess = float(optimize.brentq(excess, lo, hi, args=(coarse,), rtol=1e-6))
        secant = optimize.newton(
            excess,
            guess,
            x1=guess * (1 + DRIVE_REFINE),
            tol=guess * 1e-10,
            full_output=True,
            disp=False,  # not converged (a drive near saturation): brentq below
        )
        if secant[1].converged and lo <= secant[0] <= hi:
            return float(secant[0])
        return float(optimize.brentq(excess, lo, hi, rtol=1e-10))
    except ValueError as exc:
        best_db = 10 * math.log10(max(float(powers[peak]) / saturation, 1e-300))
        raise ProblemError(
            "amplifier.output_backoff_db",
            f"{amplifier.output_backoff_db} dB cannot be reached: the largest mean output is "
            f"{best_db:.2f} dB re saturation",
        ) from exc
