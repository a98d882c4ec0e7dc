"""Unit words and scaling for what people read: the command's table and the spectrum picture.

One place decides how a frequency, a bandwidth or a data rate is written, so the table printed
by ``bandwright plan`` and the picture say the same thing in the same words: ``kHz``/``MHz``
for frequencies and bandwidths, ``kbit/s``/``Mbit/s`` for data rates, ``Mbaud`` for symbol
rates.  The wire carries SI units only (``_hz``, ``_bps``, ``_baud``); these are for display.
"""

from __future__ import annotations

import math
from typing import Final

__all__ = [
    "FREQUENCY_UNITS",
    "KHZ",
    "MBAUD",
    "MBIT_S",
    "MHZ",
    "RATE_UNITS",
    "Unit",
    "format_frequency",
    "format_rate",
    "format_shift",
    "frequency_unit",
    "rate_unit",
]

Unit = tuple[str, float]
"""A unit's word and its size in SI units (``("MHz", 1e6)``)."""

KHZ: Final[Unit] = ("kHz", 1e3)
MHZ: Final[Unit] = ("MHz", 1e6)
MBAUD: Final[Unit] = ("Mbaud", 1e6)
MBIT_S: Final[Unit] = ("Mbit/s", 1e6)

FREQUENCY_UNITS: Final[tuple[Unit, ...]] = (("GHz", 1e9), MHZ, KHZ, ("Hz", 1.0))
"""Largest first: a value is written in the largest unit it reaches."""
RATE_UNITS: Final[tuple[Unit, ...]] = (("Gbit/s", 1e9), MBIT_S, ("kbit/s", 1e3), ("bit/s", 1.0))


def _unit_for(value: float, units: tuple[Unit, ...]) -> Unit:
    """The largest of ``units`` that ``|value|`` reaches; the smallest unit for values below
    every unit, zero and non-finite values."""
    magnitude = abs(value)
    if math.isfinite(magnitude):
        for unit in units:
            if magnitude >= unit[1]:
                return unit
    return units[-1]


def _format(value: float, units: tuple[Unit, ...], digits: int) -> str:
    """``value`` in the largest unit it reaches, to ``digits`` significant digits; a value that
    rounds up to 1000 of one unit is written as 1 of the next (``1 Mbit/s``, not ``1e+03
    kbit/s``)."""
    word, size = _unit_for(value, units)
    text = f"{value / size:.{digits}g}"
    index = units.index((word, size))
    if index > 0 and math.isfinite(value) and abs(float(text)) >= 1000:
        word, size = units[index - 1]
        text = f"{value / size:.{digits}g}"
    return f"{text} {word}"


def frequency_unit(width_hz: float) -> Unit:
    """The unit of a frequency axis ``width_hz`` wide: kHz below 1 MHz, else MHz.

    >>> frequency_unit(200e3)
    ('kHz', 1000.0)
    >>> frequency_unit(20e6)
    ('MHz', 1000000.0)
    """
    return MHZ if width_hz >= MHZ[1] else KHZ


def rate_unit(rate_bps: float) -> Unit:
    """The unit a data rate is written in (``kbit/s`` below 1 Mbit/s, ...)."""
    return _unit_for(rate_bps, RATE_UNITS)


def format_rate(rate_bps: float, digits: int = 3) -> str:
    """A data rate with ``digits`` significant digits in the largest unit it reaches.

    >>> format_rate(21_240.0)
    '21.2 kbit/s'
    >>> format_rate(2.004e6)
    '2 Mbit/s'
    """
    return _format(rate_bps, RATE_UNITS, digits)


def format_frequency(value_hz: float, digits: int = 4, largest: str = "MHz") -> str:
    """A bandwidth or frequency difference in the largest unit it reaches (up to ``largest``).

    >>> format_frequency(20_980.0)
    '20.98 kHz'
    >>> format_frequency(18.4034e6)
    '18.4 MHz'
    """
    units = FREQUENCY_UNITS[[word for word, _ in FREQUENCY_UNITS].index(largest) :]
    return _format(value_hz, units, digits)


def format_shift(shift_hz: float, digits: int = 3) -> str:
    """A signed frequency shift, ``+250 kHz`` or ``−1.2 MHz`` (a minus sign, not a hyphen).

    >>> format_shift(-1.2e6)
    '−1.2 MHz'
    """
    sign = "+" if shift_hz >= 0 else "−"
    return sign + format_frequency(abs(shift_hz), digits)
