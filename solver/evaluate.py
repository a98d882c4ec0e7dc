"""Figures for one carrier configuration: bandwidths, leakage, guard, link margin, throughput.

Composes :mod:`solver.physics.emission` (spectrum), :mod:`solver.physics.modcod`
(thresholds) and :mod:`solver.physics.link` (link budget) for a single carrier, without placing
it in a block.  This is what ``POST /v1/carriers/evaluate`` answers.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from solver.model import Amplifier, CodeRate, Coding, Modulation, ProblemError, Window
from solver.physics import emission, link, modcod
from solver.physics.constellations import constellation

__all__ = ["CarrierEvaluation", "LeakageAtGap", "evaluate_carrier"]


@dataclass(frozen=True)
class LeakageAtGap:
    """Leakage ratio ``ratio_db`` (dB) into an adjacent band ``gap_hz`` (Hz) away."""

    gap_hz: float
    ratio_db: float


@dataclass(frozen=True)
class CarrierEvaluation:
    """What :func:`evaluate_carrier` computes; every field carries its unit in its name."""

    occupied_bandwidth_hz: float
    allocated_bandwidth_hz: float
    leakage_ratio_db: tuple[LeakageAtGap, ...]
    guard_needed_hz: float | None
    esn0_db: float
    required_esn0_db: float
    margin_db: float
    link_closes: bool
    bits_per_symbol: int
    throughput_bps: float


def _link_esn0_db(symbol_rate_baud: float, cn0_dbhz: float | None, esn0_db: float | None) -> float:
    if esn0_db is not None and cn0_dbhz is None:
        return esn0_db
    if cn0_dbhz is not None and esn0_db is None:
        return float(link.esn0_from_cn0_db(cn0_dbhz, symbol_rate_baud))
    raise ProblemError("cn0_dbhz", "give exactly one of cn0_dbhz or esn0_db")


def _check_inputs(symbol_rate_baud: float, gaps_hz: Sequence[float]) -> None:
    if not (math.isfinite(symbol_rate_baud) and symbol_rate_baud > 0):
        raise ProblemError("symbol_rate_baud", f"{symbol_rate_baud=} must be finite and > 0")
    for index, gap in enumerate(gaps_hz):
        if not (math.isfinite(gap) and gap >= 0):
            raise ProblemError(f"gaps_hz[{index}]", f"{gap=} must be finite and ≥ 0")


def evaluate_carrier(
    *,
    symbol_rate_baud: float,
    rolloff: float,
    modulation: Modulation,
    code_rate: CodeRate,
    filter_span_symbols: int = 12,
    window: Window = Window.NONE,
    amplifier: Amplifier | None = None,
    cn0_dbhz: float | None = None,
    esn0_db: float | None = None,
    coding: Coding | None = None,
    margin_db: float = 3.0,
    gaps_hz: Sequence[float] = (),
    leakage_limit_db: float | None = 30.0,
) -> CarrierEvaluation:
    """Evaluate one carrier configuration in isolation.

    Parameters
    ----------
    symbol_rate_baud : float
        Symbol rate Rs (baud), > 0.
    rolloff : float
        Roll-off factor α of the root-raised-cosine filter, in (0, 1].
    modulation : Modulation
        Constellation.
    code_rate : Fraction or None
        FEC code rate r; ``None`` for uncoded.
    filter_span_symbols : int
        Span of the truncated filter (symbols).
    window : Window
        Window applied to the truncated filter.
    amplifier : Amplifier or None
        Memoryless amplifier model; ``None`` for a linear transmitter.
    cn0_dbhz, esn0_db : float or None
        Exactly one: C/N0 (dB-Hz) of a power-limited link, or a fixed Es/N0 (dB).
    coding : Coding, optional
        Block length, target error rates, implementation loss (dB), framing overhead.
    margin_db : float
        Margin (dB) the link must keep above the threshold to count as closing.
    gaps_hz : sequence of float
        Edge-to-edge gaps (Hz) at which to report the leakage ratio.
    leakage_limit_db : float or None
        Leakage limit (dB) for the guard needed; ``None``: no limit applies, and no guard is
        computed.

    Returns
    -------
    CarrierEvaluation
        Occupied (99 % power) and allocated (Rs(1+α)) bandwidths (Hz), the worst-side leakage
        ratio (dB) at each gap, the guard (Hz) for the limit (``None`` without a limit,
        ``math.inf`` when the limit is not met within the profile's reach), Es/N0, required
        Es/N0 and their difference (dB), whether that difference reaches ``margin_db``, and the
        throughput Rs·log2(M)·r·(1 − overhead) (bit/s) when it does, 0 when it does not: a link
        that does not close carries nothing.

    Raises
    ------
    ProblemError
        Naming the bad input (for example neither or both of ``cn0_dbhz`` and ``esn0_db``).

    References
    ----------
    .. [1] ITU Radio Regulations, Article 1, No. 1.153 (occupied bandwidth, 99 % of the power).
    .. [2] Y. Polyanskiy, H. V. Poor, S. Verdú, "Channel coding rate in the finite blocklength
       regime", IEEE Trans. Inf. Theory 56(5), 2010 (coded thresholds, via solver.physics.modcod).

    Examples
    --------
    >>> from fractions import Fraction
    >>> e = evaluate_carrier(symbol_rate_baud=1e6, rolloff=0.2, modulation=Modulation.QPSK,
    ...                      code_rate=Fraction(3, 4), esn0_db=10.0)
    >>> round(e.allocated_bandwidth_hz)
    1200000
    >>> evaluate_carrier(symbol_rate_baud=1e6, rolloff=0.2, modulation=Modulation.QPSK,
    ...                  code_rate=Fraction(3, 4), esn0_db=-5.0).throughput_bps
    0.0
    """
    _check_inputs(symbol_rate_baud, gaps_hz)
    coding = Coding() if coding is None else coding
    key = emission.EmissionKey(
        rolloff, filter_span_symbols, window, amplifier, modulation if amplifier else None
    )
    profile = emission.get_profile(key)
    esn0 = _link_esn0_db(symbol_rate_baud, cn0_dbhz, esn0_db)
    required = float(modcod.required_esn0_db(modulation, code_rate, coding))
    bits = constellation(modulation).bits_per_symbol
    margin = float(link.margin_db(esn0, required))
    closes = margin >= margin_db
    guard_hz = (
        None
        if leakage_limit_db is None
        else emission.guard_needed_hz(key, symbol_rate_baud, leakage_limit_db)
    )
    return CarrierEvaluation(
        occupied_bandwidth_hz=emission.occupied_bandwidth_hz(key, symbol_rate_baud),
        allocated_bandwidth_hz=profile.nominal_bandwidth * symbol_rate_baud,
        leakage_ratio_db=_leakage(profile, gaps_hz, symbol_rate_baud),
        guard_needed_hz=guard_hz,
        esn0_db=esn0,
        required_esn0_db=required,
        margin_db=margin,
        link_closes=closes,
        bits_per_symbol=bits,
        throughput_bps=(
            float(link.throughput_bps(symbol_rate_baud, bits, code_rate, coding.framing_overhead))
            if closes
            else 0.0
        ),
    )


def _leakage(
    profile: emission.SpectrumProfile, gaps_hz: Sequence[float], symbol_rate_baud: float
) -> tuple[LeakageAtGap, ...]:
    """The leakage ratio at each gap; infinite beyond the profile's reach, where the model puts
    no power (the wire reports that as null: no leakage modelled)."""
    gaps = np.asarray(gaps_hz, dtype=np.float64)
    with np.errstate(over="ignore"):  # a gap of many symbols at a tiny rate: beyond reach
        gaps_rs = gaps / symbol_rate_baud
    ratios = np.full(gaps_rs.shape, np.inf)
    inside = gaps_rs <= profile.max_gap
    if np.any(inside):
        ratios[inside] = profile.leakage_ratio_db(gaps_rs[inside])
    return tuple(LeakageAtGap(float(g), float(r)) for g, r in zip(gaps, ratios, strict=True))
