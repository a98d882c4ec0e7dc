"""Modulation and coding: uncoded error rates, constellation-constrained capacity, coded
thresholds at a finite block length, and the MODCOD catalogue.

Conventions: Es/N0 is the energy per symbol over the one-sided noise density, in dB; every
constellation has unit mean energy (:mod:`solver.physics.constellations`).  One-dimensional formats
(BPSK, M-PAM) only see the in-phase noise (variance N0/2).  Capacities and information
densities are in bits per symbol (per complex channel use for two-dimensional formats).

Coded thresholds use the normal approximation of Polyanskiy, Poor & Verdú (2010) applied to
the constellation-constrained channel with uniform inputs: with n = block length / log2 M
symbols and rate R = r·log2 M bits per symbol, the threshold is the smallest Es/N0 with
n·C − √(n·V)·Q⁻¹(ε) + ½·log2 n ≥ n·R, where C = I(X;Y) and V = Var[i(X;Y)] is the variance of
the information density under the uniform input (the dispersion we use for every format).
C and V are tabulated once per modulation on an Es/N0 grid by Gauss–Hermite quadrature and
interpolated with a cubic spline.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Iterable
from dataclasses import dataclass
from fractions import Fraction
from functools import cache

import numpy as np
import numpy.typing as npt
from scipy import optimize, special
from scipy.interpolate import CubicSpline

from solver.model import CodeRate, Coding, Modulation
from solver.physics.constellations import (
    SQUARE_QAM,
    Constellation,
    axis_geometry,
    bit_error_rate,
    check_finite,
    constellation,
    ebn0_from_esn0_db,
    esn0_from_ebn0_db,
    symbol_error_rate,
)

__all__ = [
    "CODE_RATES",
    "Constellation",
    "ModcodEntry",
    "bicm_capacity",
    "bit_error_rate",
    "catalogue",
    "cm_capacity",
    "cm_dispersion",
    "constellation",
    "ebn0_from_esn0_db",
    "esn0_from_ebn0_db",
    "gaussian_capacity_dispersion",
    "normal_approximation_bits",
    "required_esn0_db",
    "symbol_error_rate",
]

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]
ArrayLike = npt.ArrayLike

CODE_RATES: tuple[Fraction, ...] = tuple(
    Fraction(text)
    for text in ("1/4", "1/3", "2/5", "1/2", "3/5", "2/3", "3/4", "4/5", "5/6", "8/9", "9/10")
)
"""Forward-error-correction code rates of the catalogue (the DVB-S2 set, EN 302 307-1)."""

LOG2E = math.log2(math.e)
GRID_ESN0_DB: FloatArray = np.arange(-20.0, 40.0 + 0.5, 1.0)
"""Es/N0 grid (dB) on which capacity and dispersion are tabulated (spline error < 2e-4)."""
HERMITE_NODES_1D = 96
HERMITE_NODES_2D = 32
UNCODED_SEARCH_DB = (-10.0, 70.0)
_ANGLE_TOL = 1e-9


# --------------------------------------------------------------------------- capacity


@cache
def _quadrature(dims: int) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Gauss–Hermite nodes (in-phase, quadrature) and weights for averages over the noise.

    Nodes are noise components in units of √N0 (variance ½ each); the weights sum to one.
    One-dimensional formats use the in-phase axis only (quadrature nodes 0).
    """
    count = HERMITE_NODES_1D if dims == 1 else HERMITE_NODES_2D
    nodes, weights = special.roots_hermite(count)
    weights = weights / math.sqrt(math.pi)
    if dims == 1:
        return np.asarray(nodes), np.zeros(count), np.asarray(weights)
    in_phase, quadrature = np.meshgrid(nodes, nodes, indexing="ij")
    return in_phase.ravel(), quadrature.ravel(), np.outer(weights, weights).ravel()


def _log_sum_exp(exponent: FloatArray) -> FloatArray:
    """ln Σ_j exp(a_j) over axis 1, shifted by the maximum.

    Written out rather than calling ``scipy.special.logsumexp`` because this is the inner loop
    of the capacity tables, where the general routine costs about three times as much.
    """
    peak = exponent.max(axis=1, keepdims=True)
    total = np.exp(exponent - peak).sum(axis=1)
    return np.asarray(peak[:, 0, :] + np.log(total))


def _exponents(
    sent: npt.NDArray[np.complex128], points: npt.NDArray[np.complex128], esn0: float, dims: int
) -> tuple[FloatArray, FloatArray]:
    """a_ij(n) = −(|x_i − x_j + n|² − |n|²)/N0 at the quadrature nodes, and the node weights.

    Shape (len(sent), len(points), nodes); distances in units of √N0 (Es = 1).  The cross
    term 2·Re((x_i − x_j)·conj(n)) is one matrix product over the (in-phase, quadrature) pair.
    """
    noise_i, noise_q, weight = _quadrature(dims)
    diff = ((sent[:, None] - points[None, :]) * math.sqrt(esn0)).ravel()
    exponent = np.stack([diff.real, diff.imag], axis=1) @ np.stack([noise_i, noise_q])
    exponent *= -2.0
    exponent -= (np.abs(diff) ** 2)[:, None]
    return exponent.reshape(sent.size, points.size, weight.size), weight


def _density_samples(
    sent: npt.NDArray[np.complex128], points: npt.NDArray[np.complex128], esn0: float, dims: int
) -> FloatArray:
    """Information density i(x; y) (bits) at the quadrature nodes, shape (len(sent), nodes).

    i(x; y) = log2 M − log2 Σ_j exp(−(|x − x_j + n|² − |n|²)/N0).
    """
    exponent, _ = _exponents(sent, points, esn0, dims)
    return np.asarray(math.log2(points.size) - _log_sum_exp(exponent) * LOG2E)


def _on_point_set(moved: npt.NDArray[np.complex128], points: npt.NDArray[np.complex128]) -> bool:
    gap = np.abs(moved[:, None] - points[None, :]).min(axis=1)
    return bool(np.all(gap < _ANGLE_TOL))


def _rotation_order(points: npt.NDArray[np.complex128]) -> int:
    """Largest s such that rotating the point set by 2π/s maps it onto itself."""
    for order in range(points.size, 1, -1):
        rotated = points * np.exp(2j * math.pi / order)
        if points.size % order == 0 and _on_point_set(rotated, points):
            return order
    return 1


@cache
def _orbit_representatives(
    modulation: Modulation, ring_ratios: tuple[float, ...] = ()
) -> tuple[npt.NDArray[np.complex128], FloatArray]:
    """One point per symmetry orbit of a 2-D constellation, weighted by orbit size.

    The mean of any rotation- and reflection-invariant quantity over the M points equals the
    weighted mean over these.  With rotation order s and mirror symmetry (x → conj x), the
    fundamental sector is 0 ≤ angle ≤ π/s; points on a mirror line (angle 0 or π/s) have
    half the orbit of the others.  Without mirror symmetry the sector is [0, 2π/s).
    """
    points = constellation(modulation, ring_ratios).points
    order = _rotation_order(points)
    angle = np.mod(np.angle(points) + _ANGLE_TOL, 2.0 * math.pi) - _ANGLE_TOL
    if not _on_point_set(points.conj(), points):
        chosen = angle < 2.0 * math.pi / order - _ANGLE_TOL
        return points[chosen], np.full(int(chosen.sum()), 1.0 / chosen.sum())
    edge = math.pi / order
    chosen = angle <= edge + _ANGLE_TOL
    on_mirror = (np.abs(angle) < _ANGLE_TOL) | (np.abs(angle - edge) < _ANGLE_TOL)
    weight = np.where(on_mirror, 1.0, 2.0)[chosen]
    return points[chosen], weight / weight.sum()


def _capacity_moments(
    sent: npt.NDArray[np.complex128],
    sent_weight: FloatArray,
    points: npt.NDArray[np.complex128],
    esn0: float,
    dims: int,
) -> FloatArray:
    """(I(X;Y), Var[i(X;Y)]) in bits and bits² per use, uniform inputs."""
    density = _density_samples(sent, points, esn0, dims)
    weight = sent_weight[:, None] * _quadrature(dims)[2][None, :]
    mean = float(np.sum(weight * density))
    return np.array([mean, float(np.sum(weight * (density - mean) ** 2))])


def _moments_direct(
    modulation: Modulation, esn0_db: float, ring_ratios: tuple[float, ...] = ()
) -> FloatArray:
    """(C, V) of a modulation at one Es/N0; square QAM as two √M-PAM axes at half energy."""
    esn0 = 10.0 ** (esn0_db / 10.0)
    if modulation in SQUARE_QAM:
        levels, _ = axis_geometry(modulation)
        axis = levels.astype(np.complex128) * math.sqrt(2.0)
        uniform = np.full(axis.size, 1.0 / axis.size)
        return 2.0 * _capacity_moments(axis, uniform, axis, esn0 / 2.0, 1)
    points = constellation(modulation, ring_ratios)
    if points.dimensions == 1:
        line = points.points.real.astype(np.complex128)
        uniform = np.full(line.size, 1.0 / line.size)
        return _capacity_moments(line, uniform, line, esn0, 1)
    sent, weight = _orbit_representatives(points.modulation, points.ring_ratios)
    return _capacity_moments(sent, weight, points.points, esn0, 2)


@cache
def _capacity_table(
    modulation: Modulation, ring_ratios: tuple[float, ...] = ()
) -> tuple[CubicSpline, CubicSpline]:
    moments = np.array([_moments_direct(modulation, float(x), ring_ratios) for x in GRID_ESN0_DB])
    logger.debug("tabulated capacity of %s %s on %d points", modulation, ring_ratios, len(moments))
    return CubicSpline(GRID_ESN0_DB, moments[:, 0]), CubicSpline(GRID_ESN0_DB, moments[:, 1])


def _tabulated(
    modulation: Modulation | str, esn0_db: ArrayLike, column: int, ring_ratios: Iterable[float]
) -> FloatArray:
    points = constellation(modulation, ring_ratios)
    mod, ratios = points.modulation, points.ring_ratios
    values = check_finite("esn0_db", esn0_db)
    flat = values.ravel()
    spline = _capacity_table(mod, ratios)[column]
    inside = (flat >= GRID_ESN0_DB[0]) & (flat <= GRID_ESN0_DB[-1])
    result = np.where(inside, spline(np.clip(flat, GRID_ESN0_DB[0], GRID_ESN0_DB[-1])), 0.0)
    for index in np.flatnonzero(~inside):
        result[index] = _moments_direct(mod, float(flat[index]), ratios)[column]
    upper = math.log2(points.order) if column == 0 else math.inf
    return np.asarray(np.clip(result, 0.0, upper).reshape(values.shape))


def cm_capacity(
    modulation: Modulation | str, esn0_db: ArrayLike, ring_ratios: Iterable[float] = ()
) -> FloatArray:
    """Constellation-constrained (coded-modulation) capacity I(X;Y), uniform inputs, AWGN.

    Parameters
    ----------
    modulation : Modulation or str
        Catalogue modulation.
    esn0_db : array_like
        Es/N0 in dB (finite).
    ring_ratios : iterable of float, optional
        APSK ring ratios (dimensionless), as for :func:`constellation`; empty for the default
        geometry.  Each new geometry is tabulated once (cached).

    Returns
    -------
    ndarray
        Bits per symbol (per complex channel use), same shape as ``esn0_db``; at most log2 M.

    Notes
    -----
    C = log2 M − (1/M)·Σ_i E_n[log2 Σ_j exp(−(|x_i − x_j + n|² − |n|²)/N0)], evaluated by
    Gauss–Hermite quadrature (96 nodes per real axis for one-dimensional formats, 32 × 32 for
    two-dimensional ones, averaging over one point per rotation orbit).  Square QAM is two
    independent √M-PAM axes, each with half the symbol energy; BPSK and M-PAM see only the
    in-phase noise.  Tabulated on :data:`GRID_ESN0_DB` and interpolated (cubic spline);
    values off the grid are computed directly.

    References
    ----------
    G. Ungerboeck, "Channel coding with multilevel/phase signals," IEEE Trans. Inf. Theory
    IT-28(1):55–67, 1982 (the constellation-constrained capacity curves).

    Examples
    --------
    >>> round(float(cm_capacity("QPSK", 5.0)), 3)  # check-values §2: 1.7184
    1.718
    """
    return _tabulated(modulation, esn0_db, 0, ring_ratios)


def cm_dispersion(
    modulation: Modulation | str, esn0_db: ArrayLike, ring_ratios: Iterable[float] = ()
) -> FloatArray:
    """Channel dispersion of the constellation-constrained channel, V = Var[i(X;Y)] (bits²).

    The variance of the information density i(x; y) = log2(p(y|x)/p(y)) under uniform inputs
    and AWGN, per symbol; computed in the same quadrature pass as :func:`cm_capacity` and
    tabulated the same way (per modulation and ``ring_ratios``, which have the same meaning
    as there).  It vanishes at high Es/N0, where i(X;Y) → log2 M.

    References
    ----------
    Y. Polyanskiy, H. V. Poor and S. Verdú, "Channel coding rate in the finite blocklength
    regime," IEEE Trans. Inf. Theory 56(5):2307–2359, 2010 (dispersion as the variance of the
    information density).

    Examples
    --------
    >>> round(float(cm_dispersion("16QAM", 40.0)), 6)
    0.0
    """
    return _tabulated(modulation, esn0_db, 1, ring_ratios)


def _bicm_terms(
    sent: npt.NDArray[np.complex128],
    labels: npt.NDArray[np.int64],
    bits: int,
    esn0: float,
    dims: int,
) -> float:
    """Σ_b I(B_b; Y) with every point sent (labellings need not be rotation invariant)."""
    exponent, weight = _exponents(sent, sent, esn0, dims)
    total = _log_sum_exp(exponent)
    loss = 0.0
    for bit in range(bits):
        value = (labels >> bit) & 1
        same = value[:, None] == value[None, :]
        partial = _log_sum_exp(np.where(same[:, :, None], exponent, -np.inf))
        loss += float(np.sum((total - partial) * weight[None, :])) / sent.size
    return bits - loss * LOG2E


@cache
def _bicm_direct(modulation: Modulation, esn0_db: float) -> float:
    esn0 = 10.0 ** (esn0_db / 10.0)
    if modulation in SQUARE_QAM:
        levels, labels = axis_geometry(modulation)
        axis = levels.astype(np.complex128) * math.sqrt(2.0)
        bits = int(levels.size).bit_length() - 1
        return 2.0 * _bicm_terms(axis, labels, bits, esn0 / 2.0, 1)
    points = constellation(modulation)
    sent = points.points.real.astype(np.complex128) if points.dimensions == 1 else points.points
    return _bicm_terms(sent, points.labels, points.bits_per_symbol, esn0, points.dimensions)


def bicm_capacity(modulation: Modulation | str, esn0_db: ArrayLike) -> FloatArray:
    """Bit-interleaved coded-modulation capacity Σ_b I(B_b; Y) with the catalogue labelling.

    Parameters
    ----------
    modulation : Modulation or str
        Catalogue modulation.
    esn0_db : array_like
        Es/N0 in dB (finite).

    Returns
    -------
    ndarray
        Bits per symbol, never above :func:`cm_capacity`.

    Notes
    -----
    Same Gauss–Hermite quadrature as :func:`cm_capacity`, every point sent (labellings are not
    rotation invariant); computed directly for each requested value (cached per value), not
    tabulated, because no threshold depends on it.

    References
    ----------
    G. Caire, G. Taricco and E. Biglieri, "Bit-interleaved coded modulation," IEEE Trans. Inf.
    Theory 44(3):927–946, 1998.

    Examples
    --------
    >>> round(float(bicm_capacity("BPSK", 0.0)), 3) == round(float(cm_capacity("BPSK", 0.0)), 3)
    True
    """
    mod = constellation(modulation).modulation
    values = check_finite("esn0_db", esn0_db)
    flat = [_bicm_direct(mod, float(x)) for x in values.ravel()]
    return np.asarray(flat, dtype=np.float64).reshape(values.shape)


# --------------------------------------------------------------------------- finite length


def gaussian_capacity_dispersion(snr_db: float, dimensions: int = 2) -> tuple[float, float]:
    """Capacity (bits) and dispersion (bits²) of the Gaussian-input-optimal AWGN channel.

    Parameters
    ----------
    snr_db : float
        Signal-to-noise ratio P (per channel use), dB.
    dimensions : {1, 2}
        1 for a real channel use, 2 for a complex one (two real uses at the same SNR).

    Returns
    -------
    tuple of float
        Real: C = ½·log2(1 + P), V = P(P + 2)/(2(P + 1)²)·(log2 e)²; complex: twice both.

    References
    ----------
    Polyanskiy, Poor & Verdú 2010 (AWGN dispersion); the authors' SPECTRE toolbox,
    ``awgn/normapx_awgn.m``.

    Examples
    --------
    >>> [round(v, 4) for v in gaussian_capacity_dispersion(0.0, dimensions=2)]
    [1.0, 1.561]
    """
    if dimensions not in (1, 2):
        raise ValueError(f"{dimensions=} must be 1 (real) or 2 (complex)")
    snr = 10.0 ** (float(check_finite("snr_db", snr_db)) / 10.0)
    capacity = 0.5 * math.log2(1.0 + snr)
    dispersion = snr * (snr + 2.0) / (2.0 * (snr + 1.0) ** 2) * LOG2E**2
    return dimensions * capacity, dimensions * dispersion


def normal_approximation_bits(
    uses: float, capacity_bits: float, dispersion_bits2: float, block_error_rate: float
) -> float:
    """Normal approximation to log2 M*(n, ε), the most information bits in n channel uses.

    log2 M* ≈ n·C − √(n·V)·Q⁻¹(ε) + ½·log2 n.

    Parameters
    ----------
    uses : float
        Block length n in channel uses (positive).
    capacity_bits : float
        Capacity C per use, bits.
    dispersion_bits2 : float
        Dispersion V per use, bits² (non-negative).
    block_error_rate : float
        Target block error probability ε, 0 < ε < 1.

    References
    ----------
    Y. Polyanskiy, H. V. Poor and S. Verdú, IEEE Trans. Inf. Theory 56(5):2307–2359, 2010;
    the ½·log2 n term as in the authors' SPECTRE toolbox (``normapx_awgn.m``).

    Examples
    --------
    >>> c, v = gaussian_capacity_dispersion(0.0, dimensions=1)
    >>> round(normal_approximation_bits(100, c, v, 1e-3), 3)  # check-values §2: 26.021
    26.021
    """
    if not uses > 0:
        raise ValueError(f"{uses=} must be positive")
    if not dispersion_bits2 >= 0:
        raise ValueError(f"{dispersion_bits2=} must be non-negative")
    if not 0 < block_error_rate < 1:
        raise ValueError(f"{block_error_rate=} must lie strictly between 0 and 1")
    q_inverse = -float(special.ndtri(block_error_rate))
    spread = math.sqrt(uses * dispersion_bits2) * q_inverse
    return uses * capacity_bits - spread + 0.5 * math.log2(uses)


# --------------------------------------------------------------------------- thresholds

_LOWEST_SEARCH_DB = -60.0
_BER_FLOOR = 1e-300


def _validate_coding(coding: Coding) -> None:
    block = coding.block_length_bits
    if isinstance(block, bool) or not isinstance(block, int) or block <= 0:
        raise ValueError(f"{coding.block_length_bits=} must be a positive integer")
    if not 0 < coding.target_block_error_rate < 1:
        raise ValueError(f"{coding.target_block_error_rate=} must lie strictly in (0, 1)")
    if not 0 < coding.target_bit_error_rate < 0.5:
        raise ValueError(f"{coding.target_bit_error_rate=} must lie strictly in (0, 0.5)")
    if not math.isfinite(coding.implementation_loss_db):
        raise ValueError(f"{coding.implementation_loss_db=} must be finite")
    if not 0 <= coding.framing_overhead < 1:
        raise ValueError(f"{coding.framing_overhead=} must lie in [0, 1)")


def _validate_code_rate(code_rate: CodeRate) -> None:
    if code_rate is None:
        return
    if not isinstance(code_rate, Fraction) or not 0 < code_rate < 1:
        raise ValueError(f"{code_rate=} must be None (uncoded) or a Fraction in (0, 1)")


def _moments_at(
    modulation: Modulation, esn0_db: float, ring_ratios: tuple[float, ...]
) -> tuple[float, float]:
    if GRID_ESN0_DB[0] <= esn0_db <= GRID_ESN0_DB[-1]:
        capacity_spline, dispersion_spline = _capacity_table(modulation, ring_ratios)
        capacity = min(float(capacity_spline(esn0_db)), math.log2(constellation(modulation).order))
        return max(capacity, 0.0), max(float(dispersion_spline(esn0_db)), 0.0)
    capacity, dispersion = _moments_direct(modulation, esn0_db, ring_ratios)
    return float(capacity), float(dispersion)


@cache
def _coded_threshold_db(
    modulation: Modulation,
    code_rate: Fraction,
    block_length_bits: int,
    block_error_rate: float,
    ring_ratios: tuple[float, ...] = (),
) -> float:
    """Ideal Es/N0 (dB) where the normal approximation first carries n·R bits."""
    bits = constellation(modulation).bits_per_symbol
    uses = block_length_bits / bits
    payload_bits = uses * bits * float(code_rate)

    def excess(esn0_db: float) -> float:
        capacity, dispersion = _moments_at(modulation, esn0_db, ring_ratios)
        achievable = normal_approximation_bits(uses, capacity, dispersion, block_error_rate)
        return achievable - payload_bits

    low, high = float(GRID_ESN0_DB[0]), float(GRID_ESN0_DB[-1])
    if excess(high) < 0:
        logger.debug("%s rate %s does not close below %.1f dB", modulation, code_rate, high)
        return math.inf
    if excess(low) > 0:
        low = _LOWEST_SEARCH_DB
        if excess(low) > 0:
            raise ValueError(
                f"{block_length_bits=} is too short: the normal approximation of {modulation} "
                f"rate {code_rate} already closes below {low} dB"
            )
    return float(optimize.brentq(excess, low, high, xtol=1e-6))


@cache
def _uncoded_threshold_db(
    modulation: Modulation, target_bit_error_rate: float, ring_ratios: tuple[float, ...] = ()
) -> float:
    """Es/N0 (dB) where the uncoded bit error rate falls to the target."""
    target_log = math.log(target_bit_error_rate)

    def excess(esn0_db: float) -> float:
        rate = float(bit_error_rate(modulation, esn0_db, ring_ratios))
        return math.log(max(rate, _BER_FLOOR)) - target_log

    low, high = UNCODED_SEARCH_DB
    if excess(high) > 0:
        return math.inf
    while excess(low) < 0:  # a lax target (towards 1/2) is met far below the usual range
        low -= 10.0 * (high - low)
    return float(optimize.brentq(excess, low, high, xtol=1e-6))


def required_esn0_db(
    modulation: Modulation | str,
    code_rate: CodeRate,
    coding: Coding | None = None,
    ring_ratios: Iterable[float] = (),
) -> float:
    """Es/N0 (dB) a MODCOD needs on an AWGN channel, implementation loss included.

    Parameters
    ----------
    modulation : Modulation or str
        Catalogue modulation.
    code_rate : Fraction or None
        Code rate r in (0, 1); ``None`` for an uncoded carrier.
    coding : Coding, optional
        Block length n (bits), target block error rate ε, target bit error rate (uncoded),
        implementation loss (dB).  Defaults to ``Coding()``.
    ring_ratios : iterable of float, optional
        APSK only: ring radii over the inner radius, (γ,) for 16APSK or (γ1, γ2) for 32APSK,
        e.g. a DVB-S2 code rate's own ratios (:mod:`solver.physics.modcodsets`); empty for the
        default geometry of :func:`constellation`.

    Returns
    -------
    float
        Required Es/N0 in dB; ``math.inf`` when the format cannot reach the target.

    Notes
    -----
    Coded: the smallest Es/N0 at which the normal approximation of Polyanskiy, Poor & Verdú,
    applied to the constellation-constrained channel (capacity :func:`cm_capacity`,
    dispersion :func:`cm_dispersion`) with n = block length / log2 M symbols, satisfies
    n·C − √(nV)·Q⁻¹(ε) + ½·log2 n ≥ n·r·log2 M (``scipy.optimize.brentq``).  It assumes an
    ideal code of that length, so real codes need more (the implementation loss covers it).
    Uncoded: the Es/N0 where :func:`bit_error_rate` equals the target bit error rate.

    References
    ----------
    Y. Polyanskiy, H. V. Poor and S. Verdú, IEEE Trans. Inf. Theory 56(5):2307–2359, 2010.

    Examples
    --------
    >>> ideal = Coding(implementation_loss_db=0.0, target_bit_error_rate=1e-5)
    >>> round(required_esn0_db("BPSK", None, ideal), 2)  # Eb/N0 = Es/N0 = 9.59 dB at 1e-5
    9.59
    """
    points = constellation(modulation, ring_ratios)
    mod, ratios = points.modulation, points.ring_ratios
    settings = Coding() if coding is None else coding
    _validate_coding(settings)
    _validate_code_rate(code_rate)
    if code_rate is None:
        ideal = _uncoded_threshold_db(mod, float(settings.target_bit_error_rate), ratios)
    else:
        ideal = _coded_threshold_db(
            mod,
            code_rate,
            settings.block_length_bits,
            float(settings.target_block_error_rate),
            ratios,
        )
    return ideal + settings.implementation_loss_db


# --------------------------------------------------------------------------- catalogue


@dataclass(frozen=True)
class ModcodEntry:
    """One modulation and code rate with its AWGN requirement.

    Attributes
    ----------
    modulation : Modulation
    code_rate : Fraction or None
        ``None`` for uncoded.
    bits_per_symbol : int
        log2 M.
    spectral_efficiency_bps_per_hz : float
        Information bits per symbol, log2 M·r (before framing overhead); bit/s per baud.
    required_esn0_db : float
        Es/N0 (dB) needed, implementation loss included (:func:`required_esn0_db`).
    """

    modulation: Modulation
    code_rate: CodeRate
    bits_per_symbol: int
    spectral_efficiency_bps_per_hz: float
    required_esn0_db: float


@cache
def _catalogue(coding: Coding, modulations: tuple[Modulation, ...]) -> tuple[ModcodEntry, ...]:
    entries = []
    for mod in modulations:
        bits = constellation(mod).bits_per_symbol
        for rate in (*CODE_RATES, None):
            efficiency = bits * (1.0 if rate is None else float(rate))
            threshold = required_esn0_db(mod, rate, coding)
            entries.append(ModcodEntry(mod, rate, bits, efficiency, threshold))
    return tuple(entries)


def catalogue(
    coding: Coding | None = None, modulations: Iterable[Modulation | str] | None = None
) -> tuple[ModcodEntry, ...]:
    """Every MODCOD (modulation × :data:`CODE_RATES` and uncoded) with its threshold.

    Parameters
    ----------
    coding : Coding, optional
        Coding assumptions (default ``Coding()``); the catalogue is cached per value.
    modulations : iterable of Modulation or str, optional
        Restrict to these modulations (default: all, in :class:`Modulation` order).

    Returns
    -------
    tuple of ModcodEntry
        For each modulation, the code rates in increasing order then the uncoded entry.  All
        pairs are kept, including dominated ones (the packer prunes those).

    References
    ----------
    ETSI EN 302 307-1 (DVB-S2), §5.3 (the code-rate set); Polyanskiy, Poor & Verdú 2010.

    Examples
    --------
    >>> entries = catalogue(modulations=["QPSK"])
    >>> len(entries), entries[0].spectral_efficiency_bps_per_hz
    (12, 0.5)
    """
    settings = Coding() if coding is None else coding
    _validate_coding(settings)
    chosen = tuple(Modulation) if modulations is None else tuple(modulations)
    try:
        mods = tuple(Modulation(m) for m in chosen)
    except ValueError as exc:
        raise ValueError(f"{modulations=} holds a modulation outside the catalogue") from exc
    return _catalogue(settings, mods)
