"""Signal constellations of the catalogue, with unit mean symbol energy and their bit labels.

Every constellation is a set of complex points with mean energy E|x|² = 1 (so Es/N0 is the
SNR per symbol), an integer label per point (Gray where a Gray labelling exists) and the
number of real dimensions it occupies: one for BPSK and M-PAM (points on the real axis; the
receiver only sees the in-phase noise), two for the others.

Geometry and labelling, per modulation:

* BPSK, QPSK, 8PSK: points exp(j·2πk/M) (QPSK and 8PSK rotated by π/M), binary-reflected Gray
  label of k, so neighbouring points differ in one bit.
* 4PAM, 8PAM: levels −(M−1), …, −1, 1, …, M−1 (scaled), Gray label of the level index.
* 16QAM, 64QAM, 256QAM: the product of two √M-PAM axes, each Gray labelled; the in-phase
  label forms the high bits.
* 16APSK (4+12) and 32APSK (4+12+16): concentric rings with the ring ratios that DVB-S2
  specifies for code rate 3/4 (ETSI EN 302 307-1, §5.4.3 and §5.4.4: γ = R2/R1 = 2.85 for
  16APSK; γ1 = R2/R1 = 2.84 and γ2 = R3/R1 = 5.27 for 32APSK; values from memory).  Inner ring
  phases π/4 + kπ/2, middle ring π/12 + kπ/6, outer 32APSK ring kπ/8 (from memory).  One
  fixed geometry per modulation is used for every code rate.  The labels are our own
  documented quasi-Gray labelling, *not* DVB-S2's bit mapping: see :func:`_apsk16_labels`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache

import numpy as np
import numpy.typing as npt

from solver.model import Modulation

__all__ = [
    "APSK16_RING_RATIO",
    "APSK32_RING_RATIOS",
    "Constellation",
    "constellation",
    "gray_code",
]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]
IntArray = npt.NDArray[np.int64]

APSK16_RING_RATIO = 2.85
"""R2/R1 of 16APSK: DVB-S2 value for code rate 3/4 (EN 302 307-1 §5.4.3, from memory)."""

APSK32_RING_RATIOS = (2.84, 5.27)
"""(R2/R1, R3/R1) of 32APSK: DVB-S2 values for code rate 3/4 (EN 302 307-1 §5.4.4, from memory)."""

_QUADRANTS = 4
_GRAY_QUADRANT = (0b00, 0b01, 0b11, 0b10)
# Within-quadrant two-bit labels of 16APSK: outer ring (first, middle, last in angle), inner.
_EVEN_QUADRANT_BITS = (0b00, 0b01, 0b11, 0b10)
_ODD_QUADRANT_BITS = (0b11, 0b01, 0b00, 0b10)


@dataclass(frozen=True, eq=False)
class Constellation:
    """A constellation with unit mean symbol energy.

    Attributes
    ----------
    modulation : Modulation
        Which catalogue modulation this is.
    points : ndarray of complex, shape (M,)
        Symbol points, E|x|² = 1 (one-dimensional formats lie on the real axis).
    labels : ndarray of int, shape (M,)
        Bit label of each point (a permutation of 0 … M−1); bit i of the label is bit i of the
        symbol.
    bits_per_symbol : int
        log2 M.
    dimensions : int
        Real dimensions used: 1 for BPSK and M-PAM, 2 otherwise.
    """

    modulation: Modulation
    points: ComplexArray
    labels: IntArray
    bits_per_symbol: int
    dimensions: int

    @property
    def order(self) -> int:
        """Number of points M."""
        return int(self.points.size)

    @property
    def papr_db(self) -> float:
        """Peak-to-average power ratio of the symbol points, max|x|²/E|x|², in dB.

        This is the ratio of the constellation itself; the pulse-shaped waveform adds to it.
        """
        energy = np.abs(self.points) ** 2
        return float(10.0 * np.log10(energy.max() / energy.mean()))

    def label_bits(self) -> IntArray:
        """Bits of every label as an (M, log2 M) array of 0/1, least significant bit first."""
        shifts = np.arange(self.bits_per_symbol)
        return ((self.labels[:, None] >> shifts[None, :]) & 1).astype(np.int64)


def gray_code(index: IntArray) -> IntArray:
    """Binary-reflected Gray code of non-negative integers.

    Examples
    --------
    >>> gray_code(np.arange(4)).tolist()
    [0, 1, 3, 2]
    """
    return np.asarray(index ^ (index >> 1), dtype=np.int64)


def _unit_energy(points: ComplexArray) -> ComplexArray:
    scale = float(np.sqrt(np.mean(np.abs(points) ** 2)))
    return np.asarray(points / scale, dtype=np.complex128)


def _psk(order: int) -> tuple[ComplexArray, IntArray]:
    index = np.arange(order)
    offset = 0.0 if order == 2 else math.pi / order
    return np.exp(1j * (2 * math.pi * index / order + offset)), gray_code(index)


def _pam_levels(order: int) -> tuple[FloatArray, IntArray]:
    index = np.arange(order)
    return (2.0 * index - (order - 1)).astype(np.float64), gray_code(index)


def _pam(order: int) -> tuple[ComplexArray, IntArray]:
    levels, labels = _pam_levels(order)
    return levels.astype(np.complex128), labels


def _square_qam(order: int) -> tuple[ComplexArray, IntArray]:
    side = math.isqrt(order)
    axis_bits = side.bit_length() - 1
    levels, axis_labels = _pam_levels(side)
    in_phase, quadrature = np.meshgrid(np.arange(side), np.arange(side), indexing="ij")
    points = levels[in_phase] + 1j * levels[quadrature]
    labels = (axis_labels[in_phase] << axis_bits) | axis_labels[quadrature]
    return points.ravel(), labels.ravel()


def _ring(count: int, radius: float, phase_rad: float) -> ComplexArray:
    angles = phase_rad + 2 * math.pi * np.arange(count) / count
    return np.asarray(radius * np.exp(1j * angles), dtype=np.complex128)


def _apsk16_labels() -> IntArray:
    """Quasi-Gray labels of 16APSK, ordered as (12 outer points by angle, then 4 inner).

    The ring points are split into four quadrants of three outer points and one inner point.
    The two high bits are the Gray code of the quadrant (00, 01, 11, 10).  The two low bits
    label the position inside the quadrant — outer first/middle/last and inner — as
    00/01/11/10 in even quadrants and mirrored (11/01/00/10) in odd quadrants.  Then every pair
    of angular neighbours on the outer ring and on the inner ring differs in exactly one bit;
    only the (more distant) inner-to-middle-outer pairs differ in two.
    """
    outer = np.zeros(12, dtype=np.int64)
    inner = np.zeros(_QUADRANTS, dtype=np.int64)
    for quadrant in range(_QUADRANTS):
        bits = _EVEN_QUADRANT_BITS if quadrant % 2 == 0 else _ODD_QUADRANT_BITS
        high = _GRAY_QUADRANT[quadrant] << 2
        outer[3 * quadrant : 3 * quadrant + 3] = [high | b for b in bits[:3]]
        inner[quadrant] = high | bits[3]
    return np.concatenate([outer, inner])


def _apsk16() -> tuple[ComplexArray, IntArray]:
    outer = _ring(12, APSK16_RING_RATIO, math.pi / 12)
    inner = _ring(_QUADRANTS, 1.0, math.pi / 4)
    return np.concatenate([outer, inner]), _apsk16_labels()


def _apsk32() -> tuple[ComplexArray, IntArray]:
    """32APSK: outer ring Gray labelled by angle with high bit 0; inner 16 as 16APSK, high bit 1.

    Neighbours within the outer ring and within the 4+12 core differ in one bit; pairs across
    the middle and outer rings are not controlled (a quasi-Gray labelling).
    """
    middle_ratio, outer_ratio = APSK32_RING_RATIOS
    outer = _ring(16, outer_ratio, 0.0)
    core = np.concatenate([_ring(12, middle_ratio, math.pi / 12), _ring(4, 1.0, math.pi / 4)])
    labels = np.concatenate([gray_code(np.arange(16)), (1 << 4) | _apsk16_labels()])
    return np.concatenate([outer, core]), labels


_BUILDERS = {
    Modulation.BPSK: lambda: _psk(2),
    Modulation.QPSK: lambda: _psk(4),
    Modulation.PSK8: lambda: _psk(8),
    Modulation.QAM16: lambda: _square_qam(16),
    Modulation.QAM64: lambda: _square_qam(64),
    Modulation.QAM256: lambda: _square_qam(256),
    Modulation.PAM4: lambda: _pam(4),
    Modulation.PAM8: lambda: _pam(8),
    Modulation.APSK16: _apsk16,
    Modulation.APSK32: _apsk32,
}

_ONE_DIMENSIONAL = frozenset({Modulation.BPSK, Modulation.PAM4, Modulation.PAM8})


@cache
def constellation(modulation: Modulation | str) -> Constellation:
    """The constellation of a catalogue modulation, unit mean energy, Gray/quasi-Gray labelled.

    Parameters
    ----------
    modulation : Modulation or str
        A catalogue modulation, e.g. ``Modulation.QAM16`` or ``"16QAM"``.

    Returns
    -------
    Constellation
        Cached and read-only: the arrays must not be modified.

    Raises
    ------
    ValueError
        If ``modulation`` is not in the catalogue.

    References
    ----------
    J. G. Proakis and M. Salehi, *Digital Communications*, 5th ed., 2008, §3.2 (PAM, PSK, QAM
    signal sets).  ETSI EN 302 307-1 (DVB-S2), §5.4.3–5.4.4 (APSK ring ratios; from memory).

    Examples
    --------
    >>> c = constellation("16QAM")
    >>> c.bits_per_symbol, c.dimensions, round(float(np.mean(np.abs(c.points) ** 2)), 12)
    (4, 2, 1.0)
    >>> round(constellation(Modulation.QAM16).papr_db, 3)
    2.553
    """
    try:
        mod = Modulation(modulation)
    except ValueError as exc:
        raise ValueError(f"{modulation=} is not a catalogue modulation") from exc
    raw_points, labels = _BUILDERS[mod]()
    points = _unit_energy(np.asarray(raw_points, dtype=np.complex128))
    labels = np.asarray(labels, dtype=np.int64)
    points.setflags(write=False)
    labels.setflags(write=False)
    return Constellation(
        modulation=mod,
        points=points,
        labels=labels,
        bits_per_symbol=int(points.size).bit_length() - 1,
        dimensions=1 if mod in _ONE_DIMENSIONAL else 2,
    )
