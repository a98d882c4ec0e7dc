"""Link arithmetic: Es/N0 from C/N0 and symbol rate, margins, throughput.

A power-limited link is described by its carrier-to-noise-density ratio C/N0 (dB·Hz); the
energy per symbol is then Es = C/Rs, so Es/N0 = C/N0 − 10·log10(Rs): a wider carrier (higher
symbol rate) has a lower Es/N0.  All functions validate their arguments and raise
``ValueError`` naming the bad value.
"""

from __future__ import annotations

import math

from solver.model import CodeRate

__all__ = [
    "cn0_from_esn0_db",
    "esn0_from_cn0_db",
    "margin_db",
    "max_symbol_rate_for_esn0",
    "throughput_bps",
]


def _finite(name: str, value: float) -> float:
    if not math.isfinite(value):
        raise ValueError(f"{name}={value!r} must be finite")
    return float(value)


def _positive(name: str, value: float) -> float:
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"{name}={value!r} must be positive and finite")
    return float(value)


def esn0_from_cn0_db(cn0_dbhz: float, symbol_rate_baud: float) -> float:
    """Es/N0 (dB) of a carrier with a given C/N0 (dB·Hz) and symbol rate (baud).

    Es/N0 = C/N0 − 10·log10(Rs).

    Parameters
    ----------
    cn0_dbhz : float
        Carrier power over one-sided noise density, dB·Hz.
    symbol_rate_baud : float
        Symbol rate Rs, baud (positive).

    Returns
    -------
    float
        Es/N0 in dB.

    References
    ----------
    D. Roddy, *Satellite Communications*, 4th ed., McGraw-Hill, 2006, §12 (C/N0 and Eb/N0
    relations; from memory); Proakis & Salehi, *Digital Communications*, 5th ed., §4.3.

    Examples
    --------
    >>> esn0_from_cn0_db(80.0, 1e6)
    20.0
    """
    return _finite("cn0_dbhz", cn0_dbhz) - 10.0 * math.log10(
        _positive("symbol_rate_baud", symbol_rate_baud)
    )


def cn0_from_esn0_db(esn0_db: float, symbol_rate_baud: float) -> float:
    """C/N0 (dB·Hz) from Es/N0 (dB) and symbol rate (baud); inverse of :func:`esn0_from_cn0_db`.

    References
    ----------
    Roddy, 4th ed., §12 (from memory).

    Examples
    --------
    >>> cn0_from_esn0_db(20.0, 1e6)
    80.0
    """
    return _finite("esn0_db", esn0_db) + 10.0 * math.log10(
        _positive("symbol_rate_baud", symbol_rate_baud)
    )


def margin_db(esn0_db: float, required_esn0_db: float) -> float:
    """Link margin (dB): available Es/N0 minus required Es/N0.

    ``required_esn0_db`` may be ``math.inf`` (a format that never closes): the margin is then
    ``-inf``.

    References
    ----------
    Roddy, 4th ed., §12 (link margin; from memory).

    Examples
    --------
    >>> margin_db(12.5, 9.0)
    3.5
    """
    available = _finite("esn0_db", esn0_db)
    if math.isnan(required_esn0_db) or required_esn0_db == -math.inf:
        raise ValueError(f"{required_esn0_db=} must be a number or +inf")
    return available - float(required_esn0_db)


def throughput_bps(
    symbol_rate_baud: float, bits_per_symbol: int, code_rate: CodeRate, framing_overhead: float
) -> float:
    """Information throughput (bit/s): Rs · log2 M · r · (1 − framing overhead).

    Parameters
    ----------
    symbol_rate_baud : float
        Symbol rate Rs, baud (positive).
    bits_per_symbol : int
        log2 M (positive).
    code_rate : Fraction or None
        Code rate r in (0, 1); ``None`` for uncoded (r = 1).
    framing_overhead : float
        Fraction of symbols spent on headers and pilots, in [0, 1).

    Returns
    -------
    float
        Throughput in bit/s.

    References
    ----------
    Common practice (information rate of a coded, framed carrier).

    Examples
    --------
    >>> from fractions import Fraction
    >>> throughput_bps(1e6, 2, Fraction(1, 2), 0.0)
    1000000.0
    """
    rate_baud = _positive("symbol_rate_baud", symbol_rate_baud)
    if isinstance(bits_per_symbol, bool) or not isinstance(bits_per_symbol, int):
        raise ValueError(f"{bits_per_symbol=} must be a positive integer")
    if bits_per_symbol <= 0:
        raise ValueError(f"{bits_per_symbol=} must be a positive integer")
    if code_rate is not None and not 0 < code_rate < 1:
        raise ValueError(f"{code_rate=} must be None (uncoded) or lie strictly in (0, 1)")
    if not 0 <= framing_overhead < 1:
        raise ValueError(f"{framing_overhead=} must lie in [0, 1)")
    rate = 1.0 if code_rate is None else float(code_rate)
    return rate_baud * bits_per_symbol * rate * (1.0 - framing_overhead)


def max_symbol_rate_for_esn0(cn0_dbhz: float, required_esn0_db: float) -> float:
    """Largest symbol rate (baud) at which a power-limited link still meets an Es/N0.

    Rs_max = 10^((C/N0 − Es/N0 required)/10); pass the requirement with the margin added.
    Returns 0.0 when the requirement is ``+inf`` (never closes).

    Parameters
    ----------
    cn0_dbhz : float
        Carrier power over noise density, dB·Hz.
    required_esn0_db : float
        Es/N0 that must be met (threshold plus margin), dB; may be ``+inf``.

    Returns
    -------
    float
        Symbol rate in baud.

    References
    ----------
    Follows from Es/N0 = C/N0 − 10·log10(Rs) (Roddy, 4th ed., §12; from memory).

    Examples
    --------
    >>> max_symbol_rate_for_esn0(70.0, 10.0)
    1000000.0
    """
    cn0 = _finite("cn0_dbhz", cn0_dbhz)
    if required_esn0_db == math.inf:
        return 0.0
    required = _finite("required_esn0_db", required_esn0_db)
    return float(10.0 ** ((cn0 - required) / 10.0))
