"""Raised-cosine pulse family: impulse responses, truncated filter taps and ideal spectra.

Time is measured in symbol periods T and frequency in multiples of the symbol rate Rs = 1/T,
so every function here is independent of the actual symbol rate.  A carrier at symbol rate
``symbol_rate_baud`` is obtained by scaling time by 1/Rs and frequency by Rs.

The singular points of the closed forms (t = 0, t = ±1/(2α) for the raised cosine,
t = ±1/(4α) for the root raised cosine) are replaced by their analytic limits, and α = 0
gives the ideal Nyquist (sinc) pulse.
"""

from __future__ import annotations

import math
from typing import Final

import numpy as np
import numpy.typing as npt
from scipy import signal

from solver.model import Window

__all__ = [
    "KAISER_BETA",
    "raised_cosine",
    "raised_cosine_spectrum",
    "rectangular_pulse_spectrum",
    "root_raised_cosine",
    "rrc_taps",
]

FloatArray = npt.NDArray[np.float64]

KAISER_BETA: Final = 8.6
"""Kaiser window shape parameter; β ≈ 8.6 gives side lobes close to a Blackman window
(Oppenheim & Schafer, *Discrete-Time Signal Processing*, §7.5; from memory)."""

SINGULAR_TOLERANCE: Final = 1e-9
"""Distance (symbol periods) within which a singular point is replaced by its limit; the
closed form loses about 1e-16/δ relative precision at distance δ, the limit is off by O(δ)."""

_MIN_SAMPLES_PER_SYMBOL: Final = 2


def _check_rolloff(rolloff: float) -> float:
    if not (isinstance(rolloff, int | float) and 0.0 <= rolloff <= 1.0):
        raise ValueError(f"{rolloff=} must be a number in [0, 1]")
    return float(rolloff)


def raised_cosine(t: npt.ArrayLike, rolloff: float) -> FloatArray:
    """Raised-cosine (Nyquist) impulse response, peak value 1 at t = 0.

    h(t) = sinc(t)·cos(παt) / (1 − (2αt)²), with the limit (π/4)·sinc(1/(2α)) at
    |t| = 1/(2α).

    Parameters
    ----------
    t : array_like
        Time in symbol periods (dimensionless, t/T).
    rolloff : float
        Roll-off (excess bandwidth) factor α in [0, 1].

    Returns
    -------
    ndarray
        Impulse response samples (dimensionless), same shape as ``t``.

    References
    ----------
    Proakis & Salehi, *Digital Communications*, 5th ed. (2008), §9.2 (raised-cosine
    spectrum and its impulse response; zero crossings at t = nT, n ≠ 0).

    Examples
    --------
    >>> np.abs(raised_cosine([0.0, 1.0, 2.0], 0.35)).round(12).tolist()
    [1.0, 0.0, 0.0]
    """
    alpha = _check_rolloff(rolloff)
    tt = np.asarray(t, dtype=np.float64)
    if alpha == 0.0:
        return np.asarray(np.sinc(tt), dtype=np.float64)
    denominator = 1.0 - (2.0 * alpha * tt) ** 2
    singular = np.abs(np.abs(tt) - 1.0 / (2.0 * alpha)) < SINGULAR_TOLERANCE
    safe = np.where(singular, 1.0, denominator)
    regular = np.sinc(tt) * np.cos(np.pi * alpha * tt) / safe
    if not singular.any():  # also avoids evaluating the limit for a subnormal α
        return np.asarray(regular, dtype=np.float64)
    limit = (np.pi / 4.0) * np.sinc(1.0 / (2.0 * alpha))
    return np.asarray(np.where(singular, limit, regular), dtype=np.float64)


def root_raised_cosine(t: npt.ArrayLike, rolloff: float) -> FloatArray:
    """Root-raised-cosine impulse response with unit energy per symbol period.

    h(t) = [sin(πt(1−α)) + 4αt·cos(πt(1+α))] / [πt(1 − (4αt)²)], with h(0) = 1 − α + 4α/π
    and h(±1/(4α)) = (α/√2)·[(1 + 2/π)·sin(π/(4α)) + (1 − 2/π)·cos(π/(4α))].

    Parameters
    ----------
    t : array_like
        Time in symbol periods (dimensionless, t/T).
    rolloff : float
        Roll-off factor α in [0, 1].

    Returns
    -------
    ndarray
        Impulse response samples (units of 1/√T with T = 1), same shape as ``t``.

    References
    ----------
    3GPP TS 25.104, §6.8.1 "Transmit pulse shape filter" (same closed form with T = Tc);
    Proakis & Salehi, *Digital Communications*, 5th ed. (2008), §9.2.

    Examples
    --------
    >>> round(float(root_raised_cosine(0.0, 0.25)), 6)
    1.06831
    """
    alpha = _check_rolloff(rolloff)
    tt = np.asarray(t, dtype=np.float64)
    if alpha == 0.0:
        return np.asarray(np.sinc(tt), dtype=np.float64)
    at_zero = np.abs(tt) < SINGULAR_TOLERANCE
    at_quarter = np.abs(np.abs(tt) - 1.0 / (4.0 * alpha)) < SINGULAR_TOLERANCE
    singular = at_zero | at_quarter
    ts = np.where(singular, 1.0, tt)
    numerator = np.sin(np.pi * ts * (1.0 - alpha)) + 4.0 * alpha * ts * np.cos(
        np.pi * ts * (1.0 + alpha)
    )
    denominator = np.pi * ts * (1.0 - (4.0 * alpha * ts) ** 2)
    denominator = np.where(singular, 1.0, denominator)
    regular = numerator / denominator
    value_zero = 1.0 - alpha + 4.0 * alpha / np.pi
    out = np.where(at_zero, value_zero, regular)
    if at_quarter.any():  # also avoids evaluating the limit for a subnormal α
        quarter = np.pi / (4.0 * alpha)
        value_quarter = (alpha / math.sqrt(2.0)) * (
            (1.0 + 2.0 / np.pi) * np.sin(quarter) + (1.0 - 2.0 / np.pi) * np.cos(quarter)
        )
        out = np.where(at_quarter, value_quarter, out)
    return np.asarray(out, dtype=np.float64)


def _window_values(window: Window, length: int) -> FloatArray:
    if not isinstance(window, Window):
        raise ValueError(f"{window=} must be a solver.model.Window")
    if window is Window.NONE:
        return np.ones(length, dtype=np.float64)
    spec: str | tuple[str, float] = (
        ("kaiser", KAISER_BETA) if window is Window.KAISER else window.value
    )
    return np.asarray(signal.get_window(spec, length, fftbins=False), dtype=np.float64)


def rrc_taps(
    rolloff: float,
    span_symbols: int,
    samples_per_symbol: int,
    window: Window = Window.NONE,
) -> FloatArray:
    """Truncated, optionally windowed root-raised-cosine FIR taps with unit energy.

    The taps sample :func:`root_raised_cosine` at t = k/``samples_per_symbol`` for
    |t| ≤ ``span_symbols``/2, multiply by a symmetric window and scale so that Σ h² = 1.

    Parameters
    ----------
    rolloff : float
        Roll-off factor α in [0, 1].
    span_symbols : int
        Filter length in symbol periods (≥ 1); the taps cover ±span/2 symbols.
    samples_per_symbol : int
        Oversampling factor (samples per symbol period, ≥ 2).
    window : Window, optional
        Window applied over the whole span (Kaiser uses :data:`KAISER_BETA`).

    Returns
    -------
    ndarray
        ``span_symbols * samples_per_symbol + 1`` symmetric taps, Σ h² = 1.

    References
    ----------
    Proakis & Salehi, *Digital Communications*, 5th ed. (2008), §9.2; windows as defined in
    :func:`scipy.signal.get_window`.

    Examples
    --------
    >>> h = rrc_taps(0.2, 8, 4)
    >>> h.size, round(float(np.sum(h**2)), 12)
    (33, 1.0)
    """
    _check_rolloff(rolloff)
    if isinstance(span_symbols, bool) or not isinstance(span_symbols, int) or span_symbols < 1:
        raise ValueError(f"{span_symbols=} must be an integer ≥ 1")
    if (
        isinstance(samples_per_symbol, bool)
        or not isinstance(samples_per_symbol, int)
        or samples_per_symbol < _MIN_SAMPLES_PER_SYMBOL
    ):
        raise ValueError(f"{samples_per_symbol=} must be an integer ≥ {_MIN_SAMPLES_PER_SYMBOL}")
    length = span_symbols * samples_per_symbol + 1
    t = (np.arange(length) - (length - 1) / 2.0) / samples_per_symbol
    taps = root_raised_cosine(t, rolloff) * _window_values(window, length)
    return np.asarray(taps / math.sqrt(float(np.sum(taps**2))), dtype=np.float64)


def raised_cosine_spectrum(f: npt.ArrayLike, rolloff: float) -> FloatArray:
    """Ideal raised-cosine spectrum (peak 1), frequency normalised to the symbol rate.

    1 for |f| ≤ f1, ½[1 + cos(π(|f| − f1)/(B − f1))] for f1 < |f| < B and 0 beyond, with
    f1 = (1 − α)/2 and B = (1 + α)/2.  It is the power spectral density shape of an
    RRC-shaped signal and the amplitude response of the RRC·RRC cascade.

    Parameters
    ----------
    f : array_like
        Frequency in multiples of the symbol rate (f/Rs, dimensionless).
    rolloff : float
        Roll-off factor α in [0, 1].

    Returns
    -------
    ndarray
        Spectrum values in [0, 1], same shape as ``f``.

    References
    ----------
    Roddy, *Satellite Communications*, 4th ed., Eq. (10.9)–(10.12); Proakis & Salehi,
    *Digital Communications*, 5th ed. (2008), §9.2.

    Examples
    --------
    >>> raised_cosine_spectrum([0.0, 0.5, 0.7], 0.35).round(12).tolist()
    [1.0, 0.5, 0.0]
    """
    alpha = _check_rolloff(rolloff)
    af = np.abs(np.asarray(f, dtype=np.float64))
    f1 = (1.0 - alpha) / 2.0
    edge = (1.0 + alpha) / 2.0
    if alpha == 0.0:
        return np.asarray(np.where(af <= edge, 1.0, 0.0), dtype=np.float64)
    with np.errstate(over="ignore"):  # a subnormal α overflows the ratio; clip handles it
        position = np.clip((af - f1) / alpha, 0.0, 1.0)
    transition = 0.5 * (1.0 + np.cos(np.pi * position))
    out = np.where(af <= f1, 1.0, np.where(af < edge, transition, 0.0))
    return np.asarray(out, dtype=np.float64)


def rectangular_pulse_spectrum(f: npt.ArrayLike) -> FloatArray:
    """Power spectral density shape of a rectangular (NRZ) pulse of one symbol: sinc²(f).

    Parameters
    ----------
    f : array_like
        Frequency in multiples of the symbol rate (f·T, dimensionless).

    Returns
    -------
    ndarray
        sinc²(fT) (peak 1 at f = 0; integral 1 over all f), same shape as ``f``.

    References
    ----------
    Sklar, *Digital Communications*, 2nd ed., §1.7.2 (bandwidth definitions for a sinc²
    spectrum); Proakis & Salehi, *Digital Communications*, 5th ed. (2008), §3.4.

    Examples
    --------
    >>> rectangular_pulse_spectrum([0.0, 1.0, 2.0]).round(12).tolist()
    [1.0, 0.0, 0.0]
    """
    return np.asarray(np.sinc(np.asarray(f, dtype=np.float64)) ** 2, dtype=np.float64)
