"""The amplifier's distortion of a carrier's own waveform, at the decisions (solver.physics.inband).

Checked against the analytic Bussgang decomposition for a Gaussian input (itself checked
against published values in tests/test_distortion.py) and against an independent chain built
from scikit-commpy's modem and RRC filter with the Rapp formula written out here.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from commpy.filters import rrcosfilter
from commpy.modulation import PSKModem, QAMModem
from scipy import optimize, signal

from solver.model import Amplifier, AmplifierModel, Modulation
from solver.physics import distortion, inband, profilecache
from solver.physics.amplifier import amplify, solve_drive
from solver.physics.emission import EmissionKey
from solver.physics.pulses import rrc_taps

SPAN = 16


def _key(
    modulation: Modulation, backoff_db: float, *, rolloff: float = 0.2, **amp: object
) -> EmissionKey:
    amplifier = Amplifier(output_backoff_db=backoff_db, **amp)  # type: ignore[arg-type]
    return EmissionKey(rolloff, SPAN, amplifier=amplifier, modulation=modulation)


def _gaussian(count: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (rng.standard_normal(count) + 1j * rng.standard_normal(count)) / math.sqrt(2.0)


@pytest.mark.parametrize("backoff_db", [2.0, 4.0, 6.0, 8.0])
def test_the_sampled_gain_matches_bussgang_for_a_gaussian_signal(backoff_db: float) -> None:
    # Bussgang (1952): for a Gaussian input the least-squares gain is the Bussgang gain and the
    # residual is the distortion; before any receive filter the sampled figure must agree with
    # the quadrature of solver.physics.distortion (same Rapp model, p = 2).
    amplifier = Amplifier(smoothness=2.0, output_backoff_db=backoff_db)
    taps = rrc_taps(0.2, SPAN, inband.SAMPLES_PER_SYMBOL)
    shaped = signal.upfirdn(taps, _gaussian(1 << 16, 5), up=inband.SAMPLES_PER_SYMBOL)
    shaped = shaped[taps.size : -taps.size]  # a stationary stretch: no filter ramps
    drive = solve_drive(shaped.real**2 + shaped.imag**2, amplifier)
    sampled = inband.sampled_distortion(drive * shaped, amplify(drive * shaped, amplifier))
    analytic = distortion.bussgang(amplifier)
    assert sampled.signal_to_distortion_db == pytest.approx(
        analytic.signal_to_distortion_db, abs=0.25
    )


def test_the_matched_filter_keeps_only_the_in_band_part() -> None:
    # The distortion spreads over about three times the channel (third-order products); the
    # matched filter passes only the channel, so at the decisions the error is smaller than on
    # the full-band waveform, and for a Gaussian input smaller than the Bussgang figure.
    key = _key(Modulation.QPSK, 4.0, smoothness=2.0)
    reference, received, _ = inband.decision_samples(_gaussian(1 << 15, 6), key)
    at_decisions = inband.sampled_distortion(reference, received)
    assert key.amplifier is not None
    full_band = distortion.bussgang(key.amplifier)
    assert 0.5 * full_band.evm_pct < at_decisions.evm_pct < full_band.evm_pct


def test_a_linear_chain_leaves_no_error() -> None:
    # 30 dB below saturation a Rapp p = 2 amplifier is linear to about 1e-6 in amplitude; any
    # misalignment of the reference and the decisions would show as tens of percent.
    assert inband.decision_distortion(_key(Modulation.QAM64, 30.0, smoothness=2.0)).evm_pct < 0.01


def _rapp(x: np.ndarray, p: float) -> np.ndarray:
    """Rapp (1991) AM/AM with unit gain and unit saturation amplitude, no AM/PM."""
    r = np.abs(x)
    return np.asarray(x / (1.0 + r ** (2 * p)) ** (1.0 / (2 * p)))


def _independent_evm(symbols: np.ndarray, rolloff: float, p: float, backoff_db: float) -> float:
    """EVM at the decisions built only from scikit-commpy's RRC filter, numpy and scipy."""
    sps = 8
    _, h = rrcosfilter(SPAN * sps, rolloff, 1.0, float(sps))
    h = h / np.sqrt(np.sum(h**2))
    up = np.zeros(symbols.size * sps, dtype=complex)
    up[::sps] = symbols
    x = np.convolve(up, h)
    target = 10 ** (-backoff_db / 10)  # mean output power re the saturation output power 1

    def excess(log_drive: float) -> float:
        return float(np.mean(np.abs(_rapp(np.exp(log_drive) * x, p)) ** 2)) - target

    drive = math.exp(optimize.brentq(excess, -20.0, 5.0, xtol=1e-12))
    y = _rapp(drive * x, p)
    peak = h.size - 1
    rx = np.convolve(y, h)[peak::sps][SPAN : symbols.size - SPAN]
    ref = np.convolve(drive * x, h)[peak::sps][SPAN : symbols.size - SPAN]
    gain = np.vdot(ref, rx) / np.vdot(ref, ref)
    return float(
        100 * np.sqrt(np.mean(np.abs(rx - gain * ref) ** 2) / np.mean(np.abs(gain * ref) ** 2))
    )


@pytest.mark.parametrize(
    ("modem", "modulation", "backoff_db"),
    [
        (PSKModem(4), Modulation.QPSK, 3.0),
        (PSKModem(4), Modulation.QPSK, 6.0),
        (QAMModem(16), Modulation.QAM16, 4.0),
        (QAMModem(64), Modulation.QAM64, 6.0),
    ],
)
def test_the_decision_evm_agrees_with_an_independent_commpy_chain(
    modem: PSKModem | QAMModem, modulation: Modulation, backoff_db: float
) -> None:
    # scikit-commpy draws the constellation (its own labelling and scale, normalised here) and
    # the RRC filter; different symbols and a different filter implementation, so the figures
    # agree to the Monte-Carlo spread (a few percent of the EVM), not bit for bit.
    rng = np.random.default_rng(11)
    bits = rng.integers(0, 2, 16384 * modem.num_bits_symbol)
    symbols = modem.modulate(bits)
    symbols = symbols / np.sqrt(np.mean(np.abs(symbols) ** 2))
    theirs = _independent_evm(symbols, 0.2, 2.0, backoff_db)
    ours = inband.decision_distortion(_key(modulation, backoff_db, smoothness=2.0)).evm_pct
    assert ours == pytest.approx(theirs, rel=0.06)


@pytest.mark.parametrize("model", [AmplifierModel.RAPP, AmplifierModel.SALEH])
@pytest.mark.parametrize(
    "modulation",
    [Modulation.QPSK, Modulation.PSK8, Modulation.APSK16, Modulation.APSK32, Modulation.QAM256],
)
def test_more_backoff_never_worsens_the_floor(
    model: AmplifierModel, modulation: Modulation
) -> None:
    floors = [
        inband.decision_distortion(_key(modulation, b, model=model, smoothness=2.0)).evm_pct
        for b in (2.0, 4.0, 6.0, 8.0, 12.0)
    ]
    assert floors == sorted(floors, reverse=True)


def test_peakier_constellations_distort_more() -> None:
    # Common practice: the peak-to-average ratio of a filtered carrier grows with the
    # constellation's own (QPSK 0 dB, 16QAM 2.55 dB, 64QAM 3.68 dB, 256QAM 4.23 dB; from
    # memory), so at one back-off the floor orders the same way.
    floors = [
        inband.decision_distortion(_key(m, 4.0, smoothness=2.0)).evm_pct
        for m in (Modulation.QPSK, Modulation.QAM16, Modulation.QAM64, Modulation.QAM256)
    ]
    assert floors == sorted(floors)


def test_a_gentler_rolloff_peaks_more() -> None:
    # A smaller roll-off gives longer pulse tails, a higher peak-to-average ratio and so more
    # distortion at the same back-off (common practice).
    tight, wide = (
        inband.decision_distortion(_key(Modulation.QPSK, 4.0, rolloff=a, smoothness=2.0)).evm_pct
        for a in (0.05, 0.35)
    )
    assert tight > wide


def test_stored_figures_are_read_back_exactly_and_a_new_version_is_a_miss(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv(profilecache.CACHE_DIR_ENV, str(tmp_path))
    key = _key(Modulation.APSK16, 5.0, model=AmplifierModel.SALEH)
    inband.decision_distortion.cache_clear()
    fresh = inband.decision_distortion(key)
    assert len(list(tmp_path.rglob("*.npz"))) == 1
    inband.decision_distortion.cache_clear()
    calls: list[object] = []
    monkeypatch.setattr(inband, "decision_samples", lambda *a: calls.append(a))  # must not run
    assert inband.decision_distortion(key) == fresh
    assert not calls
    monkeypatch.undo()
    monkeypatch.setenv(profilecache.CACHE_DIR_ENV, str(tmp_path))
    monkeypatch.setattr(inband, "VERSION", inband.VERSION + 1)
    inband.decision_distortion.cache_clear()
    assert inband.decision_distortion(key) == fresh  # recomputed, bit for bit
    assert len(list(tmp_path.rglob("*.npz"))) == 2
    inband.decision_distortion.cache_clear()
