"""In-band amplifier distortion of the carrier's own waveform, at the receiver's decisions.

:mod:`solver.physics.distortion` gives the Bussgang decomposition for a complex Gaussian input,
the right model for a multi-carrier signal.  A planned carrier is a single RRC-shaped carrier
of one constellation: its envelope peaks far less (a few dB above the mean, against ten and
more for a Gaussian signal), and the receiver's matched filter removes the part of the
distortion that falls outside the channel (that part is the spectral regrowth, counted as
leakage by :mod:`solver.physics.emission`).  This module measures what a receiver sees:

1. random symbols of the constellation, shaped by the transmitter's truncated RRC filter and
   driven into the same Rapp or Saleh model, at the same mean output back-off, as the
   regrowth simulation (:func:`solver.physics.emission.simulate_amplifier_psd`);
2. the amplifier output and the undistorted waveform both pass the matched filter and are
   sampled at the symbol instants, so the filters' own inter-symbol interference is common
   to both and cancels;
3. the error is what remains after the best complex gain g = ⟨s, r⟩/⟨s, s⟩ (least squares,
   the Bussgang gain of the sampled decisions), and EVM = √(E|r − g·s|² / E|g·s|²).

This is the error-vector magnitude of 3GPP TS 38.104 §6.5.2 (after equalisation by one complex
gain) with the amplifier as the only impairment.  The symbols are drawn from a fixed seed, the
same for every back-off, so the figure is deterministic and decreases smoothly with back-off.
"""

from __future__ import annotations

import functools
import math
from typing import Final

import numpy as np
import numpy.typing as npt
from scipy import signal

from solver.model import AmplifierModel
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
    solve_drive,
)
from solver.physics.constellations import constellation
from solver.physics.distortion import Distortion
from solver.physics.emission import EmissionKey
from solver.physics.pulses import rrc_taps

__all__ = [
    "SAMPLES_PER_SYMBOL",
    "SYMBOLS",
    "decision_distortion",
    "decision_samples",
    "sampled_distortion",
]

ComplexArray = npt.NDArray[np.complex128]

SAMPLES_PER_SYMBOL: Final = 8
"""±4 Rs: the third- and fifth-order products of a carrier up to α = 1 stay inside the
simulated band, so none fold back into the channel."""
SYMBOLS: Final = 8192
"""Decisions averaged: the EVM estimate's relative standard error is about 1/√(2·8192) ≈ 0.8 %."""
SEED: Final = 20_011
VERSION: Final = 1
"""Version of this computation in stored figures; raise it when a change here alters them."""


@functools.lru_cache(maxsize=1024)
def decision_distortion(key: EmissionKey, seed: int = SEED) -> Distortion:
    """Distortion of the carrier of ``key`` after its matched filter, at the symbol decisions.

    Parameters
    ----------
    key : EmissionKey
        Roll-off, filter span and window of the carrier's RRC pair, its modulation, and the
        amplifier with its mean output back-off (``key.amplifier`` must not be ``None``).
    seed : int, optional
        Seed of the random symbols.

    Returns
    -------
    Distortion
        Complex gain of the decisions, their signal-to-distortion ratio, EVM (% rms) and the
        input back-off the drive needed (saturation input power over mean input power, dB).

    References
    ----------
    J. J. Bussgang, "Crosscorrelation functions of amplitude-distorted Gaussian signals,"
    MIT RLE Tech. Rep. 216, 1952 (the decomposition y = g·x + d); 3GPP TS 38.104 §6.5.2
    (EVM after one complex gain, from memory).
    """
    if key.amplifier is None or key.modulation is None:
        raise ValueError(f"{key=} needs an amplifier and a modulation")
    points = np.asarray(constellation(key.modulation).points, dtype=np.complex128)
    fields = _stored_fields(key, seed, points)
    stored = profilecache.load_arrays(fields, ("figures",))
    if stored is not None and stored["figures"].size == len(_FIGURES):
        gain_re, gain_im, sdr, evm, ibo = (float(v) for v in stored["figures"])
        return Distortion(complex(gain_re, gain_im), sdr, evm, ibo)
    rng = np.random.default_rng(seed)
    reference, received, input_backoff = decision_samples(
        points[rng.integers(0, points.size, SYMBOLS)], key
    )
    distortion = sampled_distortion(reference, received)
    figures = (
        distortion.gain.real,
        distortion.gain.imag,
        distortion.signal_to_distortion_db,
        distortion.evm_pct,
        input_backoff,
    )
    profilecache.store_arrays(fields, {"figures": np.array(figures, dtype=np.float64)})
    return Distortion(
        gain=distortion.gain,
        signal_to_distortion_db=distortion.signal_to_distortion_db,
        evm_pct=distortion.evm_pct,
        input_backoff_db=input_backoff,
    )


_FIGURES: Final = ("gain_re", "gain_im", "sdr_db", "evm_pct", "input_backoff_db")
"""What :func:`decision_distortion` stores per key (:mod:`solver.physics.profilecache`)."""


def _stored_fields(key: EmissionKey, seed: int, points: ComplexArray) -> dict[str, object]:
    """Everything the figures of ``key`` depend on (raise :data:`VERSION` when the code here
    or in :mod:`solver.physics.amplifier` changes them)."""
    parameters: dict[str, object] = {
        "what": "decision distortion",
        "figures": _FIGURES,
        "seed": seed,
        "samples_per_symbol": SAMPLES_PER_SYMBOL,
        "symbols": SYMBOLS,
        "drive": (DRIVE_GRID_DB, BRACKET_DECIMATION, DRIVE_REFINE),
        "saleh": (SALEH_ALPHA_A, SALEH_BETA_A, SALEH_ALPHA_PHI, SALEH_BETA_PHI),
    }
    taps = rrc_taps(key.rolloff, key.span_symbols, SAMPLES_PER_SYMBOL, key.window)
    inputs = {"points": points, "taps": taps}
    return profilecache.key_fields(version=VERSION, key=key, parameters=parameters, inputs=inputs)


def decision_samples(
    symbols: npt.ArrayLike, key: EmissionKey
) -> tuple[ComplexArray, ComplexArray, float]:
    """``symbols`` sent through the carrier of ``key`` with and without its amplifier.

    Returns the matched-filter outputs at the symbol instants without the amplifier (the
    reference, at the amplifier's input scale) and with it, the ramps at both ends dropped, and
    the input back-off (dB) the drive needed.
    """
    if key.amplifier is None:
        raise ValueError(f"{key=} has no amplifier")
    symbols = np.asarray(symbols, dtype=np.complex128)
    taps = rrc_taps(key.rolloff, key.span_symbols, SAMPLES_PER_SYMBOL, key.window)
    shaped = signal.upfirdn(taps, symbols, up=SAMPLES_PER_SYMBOL)
    power = shaped.real**2 + shaped.imag**2
    drive = solve_drive(power, key.amplifier)
    output = amplify(drive * shaped, key.amplifier)
    start = (taps.size - 1) // SAMPLES_PER_SYMBOL  # the chain's peak: one filter length
    keep = slice(start + key.span_symbols, start + symbols.size - key.span_symbols)
    received = signal.upfirdn(taps, output, down=SAMPLES_PER_SYMBOL)[keep]
    reference = signal.upfirdn(taps, drive * shaped, down=SAMPLES_PER_SYMBOL)[keep]
    saturation_input = 1.0 / SALEH_BETA_A if key.amplifier.model is AmplifierModel.SALEH else 1.0
    input_backoff = 10.0 * math.log10(saturation_input / (drive**2 * float(np.mean(power))))
    return reference, received, input_backoff


def sampled_distortion(reference: npt.ArrayLike, received: npt.ArrayLike) -> Distortion:
    """Least-squares complex gain between two sample sequences and what it leaves.

    ``received`` ≈ g·``reference`` + error with g = ⟨reference, received⟩/⟨reference,
    reference⟩, the gain that makes the error orthogonal to the reference (Bussgang's gain
    when the reference is Gaussian).  The input back-off is not known here and is NaN.

    >>> d = sampled_distortion([1, -1, 1j, -1j], [2, -2, 2j, -2j])
    >>> d.gain, d.evm_pct
    ((2+0j), 0.0)
    """
    s = np.asarray(reference, dtype=np.complex128)
    r = np.asarray(received, dtype=np.complex128)
    gain = complex(np.vdot(s, r) / np.vdot(s, s))
    signal_power = abs(gain) ** 2 * float(np.mean(s.real**2 + s.imag**2))
    error = r - gain * s
    error_power = float(np.mean(error.real**2 + error.imag**2))
    if error_power <= 0.0:
        return Distortion(gain, math.inf, 0.0, math.nan)
    ratio = signal_power / error_power
    return Distortion(gain, 10.0 * math.log10(ratio), 100.0 / math.sqrt(ratio), math.nan)
