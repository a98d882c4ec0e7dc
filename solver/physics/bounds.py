"""The physical bound of a plan: the Shannon–Nyquist split of the usable block.

Each demand i gets a width Bᵢ of ideal (brick-wall) spectrum with no guard bands and carries
at most the Shannon rate of that width, capped at its target rate (or, for the block's
capacity, not capped at all: ``capped=False``, an infinite target):

* a power-limited demand (C/N0 given) has SNR Pᵢ/Bᵢ with Pᵢ = C/N0 (Hz) after its margin, so
  rᵢ(B) = B·log2(1 + Pᵢ/B) — concave, rising to Pᵢ·log2 e as B → ∞;
* a fixed demand (Es/N0 given) keeps its SNR γᵢ whatever the width, so rᵢ(B) = B·log2(1 + γᵢ)
  — linear.

The bound is max Σ min(rᵢ(Bᵢ), Tᵢ) subject to Σ Bᵢ ≤ W: a separable concave resource
allocation.  It is solved exactly from its optimality conditions (water-filling on a common
marginal rate λ, bit/s per Hz): every demand takes the width at which its marginal rate falls
to λ, up to the width that reaches its target; λ is the value at which the widths fill W.
Linear demands enter at full cap above their slope and not at all below it, so the total
width is a decreasing step-and-slope function of λ; :func:`shannon_nyquist_bound` walks the
steps in order of slope and solves each continuous piece with ``scipy.optimize.brentq``.
Without a cap a power-limited demand still carries at most Pᵢ·log2 e however wide it is, while
a fixed demand's rate grows without limit, so uncapped fixed demands of the best slope share
whatever width the power-limited demands leave at that slope: the bound stays finite.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from scipy import optimize

from solver.model import Demand

__all__ = ["BoundResult", "capacity_bound", "shannon_capacity_bps", "shannon_nyquist_bound"]

LOG2E = math.log2(math.e)
_RELATIVE_TOL = 1e-12
_LOG_RATIO_SPAN = 700.0  # brackets for log(P/B): exp(±700) stays inside float range


@dataclass(frozen=True)
class BoundResult:
    """The bound and its split.

    Attributes
    ----------
    total_bps : float
        Σ of the per-demand rates, bit/s.
    demand_ids : tuple of str
        Demand ids, in the order given.
    widths_hz : tuple of float
        Width given to each demand, Hz (Σ ≤ usable width).
    rates_bps : tuple of float
        Rate of each demand in its width, bit/s (≤ its target).
    """

    total_bps: float
    demand_ids: tuple[str, ...]
    widths_hz: tuple[float, ...]
    rates_bps: tuple[float, ...]


def shannon_capacity_bps(bandwidth_hz: float, snr_db: float) -> float:
    """Shannon capacity B·log2(1 + S/N) of an ideal AWGN channel, bit/s.

    Parameters
    ----------
    bandwidth_hz : float
        Bandwidth B, Hz (non-negative).
    snr_db : float
        Signal-to-noise ratio in B, dB.

    References
    ----------
    C. E. Shannon, "A mathematical theory of communication," Bell Syst. Tech. J. 27, 1948;
    "Communication in the presence of noise," Proc. IRE 37(1):10–21, 1949.

    Examples
    --------
    >>> shannon_capacity_bps(1e6, 0.0)
    1000000.0
    """
    if not (math.isfinite(bandwidth_hz) and bandwidth_hz >= 0):
        raise ValueError(f"{bandwidth_hz=} must be finite and non-negative")
    if not math.isfinite(snr_db):
        raise ValueError(f"{snr_db=} must be finite")
    return bandwidth_hz * math.log2(1.0 + 10.0 ** (snr_db / 10.0))


@dataclass(frozen=True)
class _Share:
    """One demand in the allocation: its width at a marginal rate λ, its cap and its rate."""

    width_at: Callable[[float], float]
    cap_hz: float
    rate_at: Callable[[float], float]
    slope: float | None  # bit/s per Hz of a fixed (linear) demand; None if power-limited


def _shannon_rate(width_hz: float, power_hz: float) -> float:
    return 0.0 if width_hz <= 0 else width_hz * math.log2(1.0 + power_hz / width_hz)


def _marginal(log_ratio: float) -> float:
    """d/dB of B·log2(1 + P/B) at x = P/B = exp(log_ratio): log2(1 + x) − x/((1 + x)·ln 2)."""
    x = math.exp(log_ratio)
    return (math.log1p(x) - x / (1.0 + x)) * LOG2E


def _solve_log_ratio(function: Callable[[float], float]) -> float:
    return float(
        optimize.brentq(function, -_LOG_RATIO_SPAN, _LOG_RATIO_SPAN, xtol=1e-12, rtol=1e-14)
    )


def _power_limited(power_hz: float, target_bps: float, usable_hz: float) -> _Share:
    """Demand with rate B·log2(1 + P/B), capped at the target (and at the whole width)."""
    if target_bps >= power_hz * LOG2E:
        cap_hz = math.inf  # the rate never reaches the target
    elif target_bps <= 0:
        cap_hz = 0.0
    else:  # P·log2(1 + x)/x = T, decreasing in x = P/B

        def excess(v: float) -> float:
            return math.log1p(math.exp(v)) * LOG2E / math.exp(v) - target_bps / power_hz

        # a target so small that even x = e^span carries it: the width is below any resolution
        log_ratio = _LOG_RATIO_SPAN if excess(_LOG_RATIO_SPAN) > 0 else _solve_log_ratio(excess)
        cap_hz = power_hz / math.exp(log_ratio)
    ceiling_hz = min(cap_hz, usable_hz)
    steepest = _marginal(_LOG_RATIO_SPAN)

    def width_at(level: float) -> float:
        if level <= 0:
            return ceiling_hz
        if level >= steepest:
            return 0.0
        log_ratio = _solve_log_ratio(lambda v: _marginal(v) - level)
        return min(ceiling_hz, power_hz / math.exp(log_ratio))

    return _Share(width_at, cap_hz, lambda b: min(_shannon_rate(b, power_hz), target_bps), None)


def _fixed(snr_linear: float, target_bps: float) -> _Share:
    """Demand with rate B·log2(1 + γ) (SNR independent of width), capped at the target
    (``math.inf``: no cap, any width is used).  A slope that underflows to 0 carries nothing
    and takes no width."""
    slope = math.log2(1.0 + snr_linear)
    cap_hz = target_bps / slope if slope > 0 and target_bps > 0 else 0.0

    def width_at(level: float) -> float:
        return cap_hz if slope > level else 0.0

    return _Share(width_at, cap_hz, lambda b: min(b * slope, target_bps), slope)


def _finite_field(demand: Demand, name: str, value: float) -> float:
    if not math.isfinite(value):
        raise ValueError(f"demand {demand.id!r}: {name}={value!r} must be finite")
    return value


def _share_of(demand: Demand, usable_hz: float, capped: bool) -> _Share:
    if (demand.cn0_dbhz is None) == (demand.esn0_db is None):
        raise ValueError(f"demand {demand.id!r} must give exactly one of cn0_dbhz and esn0_db")
    target = _finite_field(demand, "target_rate_bps", demand.target_rate_bps)
    if target < 0:
        raise ValueError(f"demand {demand.id!r}: {demand.target_rate_bps=} must be >= 0")
    if not capped:
        target = math.inf
    margin = _finite_field(demand, "margin_db", demand.margin_db)
    if demand.cn0_dbhz is not None:
        cn0 = _finite_field(demand, "cn0_dbhz", demand.cn0_dbhz)
        return _power_limited(10.0 ** ((cn0 - margin) / 10.0), target, usable_hz)
    esn0 = _finite_field(demand, "esn0_db", float(demand.esn0_db or 0.0))
    return _fixed(10.0 ** ((esn0 - margin) / 10.0), target)


def _solve_level(
    shares: Sequence[_Share], base_hz: float, usable_hz: float, low: float, high: float
) -> float:
    """λ in [low, high] at which the power-limited widths plus ``base_hz`` fill the block."""

    def excess(level: float) -> float:
        return sum(s.width_at(level) for s in shares if s.slope is None) + base_hz - usable_hz

    if math.isinf(high):
        high = max(2.0 * low, 1.0)
        while excess(high) > 0:
            high *= 2.0
    return float(optimize.brentq(excess, low, high, xtol=1e-15, rtol=_RELATIVE_TOL))


def _allocate(shares: Sequence[_Share], usable_hz: float) -> list[float]:
    """Water-filling on the marginal rate λ over the fixed demands' slopes, highest first.

    Walking down the slopes, the width taken at each slope (the power-limited widths there,
    plus every fixed demand of a higher slope at its cap, plus those tied at it) only grows, so
    the first slope at which the block is full is found by bisection; the solution lies
    strictly above it, or at it with the tied demands sharing the rest.
    """
    if sum(s.cap_hz for s in shares) <= usable_hz:
        return [s.cap_hz for s in shares]
    slopes = [*sorted({s.slope for s in shares if s.slope is not None}, reverse=True), 0.0]
    tied = [sum(s.cap_hz for s in shares if s.slope == level) for level in slopes]
    before = list(itertools.accumulate(tied[:-1], initial=0.0))  # caps of higher slopes

    def below(k: int) -> float:  # at slope k, without the demands tied there
        level = slopes[k]
        return sum(s.width_at(level) for s in shares if s.slope is None) + before[k]

    lo, hi = 0, len(slopes)  # first k full with its tied demands at their caps, if any
    while lo < hi:
        mid = (lo + hi) // 2
        if below(mid) + tied[mid] >= usable_hz:
            hi = mid
        else:
            lo = mid + 1
    if lo == len(slopes):
        return [s.cap_hz for s in shares]
    level, upper = slopes[lo], (slopes[lo - 1] if lo else math.inf)
    at_level = below(lo)
    if at_level >= usable_hz:  # the solution lies strictly above this slope
        found = _solve_level(shares, before[lo], usable_hz, level, upper)
        return [
            s.width_at(found) if s.slope is None else (s.cap_hz if s.slope >= upper else 0.0)
            for s in shares
        ]
    return [_width_at_tie(s, level, upper, usable_hz - at_level, tied[lo], shares) for s in shares]


def _width_at_tie(
    share: _Share,
    level: float,
    upper: float,
    rest_hz: float,
    tied_hz: float,
    shares: Sequence[_Share],
) -> float:
    """Width of one demand when λ* equals the slope ``level``: the fixed demands tied there
    share ``rest_hz`` in proportion to their caps, or, when some have no cap (``tied_hz``
    infinite), in equal parts among those without one (any split of a tie is optimal)."""
    if share.slope is None:
        return share.width_at(level)
    if share.slope != level:
        return share.cap_hz if share.slope >= upper else 0.0
    if math.isfinite(tied_hz):
        return share.cap_hz * (rest_hz / tied_hz)
    if math.isfinite(share.cap_hz):
        return 0.0
    uncapped = sum(1 for s in shares if s.slope == level and math.isinf(s.cap_hz))
    return rest_hz / uncapped


def shannon_nyquist_bound(
    usable_width_hz: float, demands: Sequence[Demand], *, capped: bool = True
) -> BoundResult:
    """Largest total rate of ideal carriers sharing the block, each capped at its target.

    Maximises Σᵢ min(Bᵢ·log2(1 + SNRᵢ(Bᵢ)), Tᵢ) over Σᵢ Bᵢ ≤ W (no guards, ideal pulses),
    where SNRᵢ = (C/N0)ᵢ/Bᵢ for a power-limited demand and the fixed Es/N0 otherwise, each
    reduced by the demand's margin_db.  With ``capped=False`` every Tᵢ is infinite: what the
    block could carry for these links, whatever was asked.

    Parameters
    ----------
    usable_width_hz : float
        Usable width W of the block (exclusions removed), Hz.
    demands : sequence of Demand
        Each with exactly one of ``cn0_dbhz`` / ``esn0_db``, a ``target_rate_bps`` and
        ``margin_db``; ``min_rate_bps`` plays no part in the bound.
    capped : bool, optional
        Cap each demand at its ``target_rate_bps`` (default); ``False``: no cap.

    Returns
    -------
    BoundResult
        Total rate (bit/s) and each demand's width (Hz) and rate (bit/s).

    Notes
    -----
    Exact solution of the concave allocation by its Karush–Kuhn–Tucker conditions: all
    demands below their cap share one marginal rate λ (bit/s/Hz), found by ``brentq``; see
    the module docstring.  Width is left unused only when every demand reaches its target.
    Uncapped, the bound stays finite: a power-limited demand tends to Pᵢ·log2 e and the
    width is finite.

    References
    ----------
    C. E. Shannon, Proc. IRE 37(1):10–21, 1949 (capacity of a band-limited AWGN channel).
    S. Boyd and L. Vandenberghe, *Convex Optimization*, Cambridge University Press, 2004,
    §5.5.3 (water-filling from the KKT conditions).

    Examples
    --------
    >>> a = Demand("a", min_rate_bps=0.0, target_rate_bps=1e9, cn0_dbhz=60.0, margin_db=0.0)
    >>> round(shannon_nyquist_bound(1e6, [a]).total_bps)  # 1 MHz at 0 dB SNR
    1000000
    """
    if not (math.isfinite(usable_width_hz) and usable_width_hz >= 0):
        raise ValueError(f"{usable_width_hz=} must be finite and non-negative")
    shares = [_share_of(demand, usable_width_hz, capped) for demand in demands]
    widths = _allocate(shares, usable_width_hz) if usable_width_hz > 0 else [0.0] * len(shares)
    rates = [share.rate_at(width) for share, width in zip(shares, widths, strict=True)]
    return BoundResult(
        total_bps=float(sum(rates)),
        demand_ids=tuple(demand.id for demand in demands),
        widths_hz=tuple(float(w) for w in widths),
        rates_bps=tuple(float(r) for r in rates),
    )


def capacity_bound(usable_width_hz: float, demands: Sequence[Demand]) -> BoundResult:
    """What the block could carry for these links: :func:`shannon_nyquist_bound` uncapped.

    Examples
    --------
    >>> a = Demand("a", min_rate_bps=0.0, target_rate_bps=1e5, esn0_db=10.0, margin_db=0.0)
    >>> round(capacity_bound(1e6, [a]).total_bps)  # 1 MHz at 10 dB: 1e6·log2(11)
    3459432
    """
    return shannon_nyquist_bound(usable_width_hz, demands, capped=False)
