"""The least spacing the verifier's interference rule asks of a carrier, whatever its neighbour.

:func:`solver.verify.verify_plan` holds every carrier's margin after the interference of all
others, through its matched filter, within the interference allowance of the margin its
demand asked for.  So the gap between a carrier (the *victim*) and its neighbour is at least
the gap at which the neighbour alone puts the victim's whole allowance into its filter.  A
bound that must hold for every plan the verifier passes cannot know the neighbour, so it takes
the *quietest* one: at each distance (Hz) beyond a neighbour's nominal edge, the least power
spectral density any carrier of any other demand can have there.  A carrier's density at a
given distance beyond its edge is its profile's, at that distance in units of its own symbol
rate, so it is least at the demand's least symbol rate; taking the running minimum of each
profile outwards makes it fall with the distance, so a narrower carrier is never louder there
and the interference of the envelope falls as the gap grows.  Hence the claim "gap γ is
needed" is made only where the envelope's interference still exceeds the allowance at γ.

Everything is measured on the verifier's own grid (the victim's matched filter response on
its linear profile, trapezoid weights), with each term rounded towards a smaller interference
and a larger allowance.  The result is per half-width unit of a family on its grid and holds
for every width the family can take, including wider carriers than its top (see
:func:`spacing_per_half`).
"""

from __future__ import annotations

import functools
import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from solver.model import Demand, Problem
from solver.packing.families import Family
from solver.physics import emission
from solver.verify import INTERFERENCE_ALLOWANCE_DB, _needed_c_over_i_db

__all__ = ["Neighbour", "QuietEnvelope", "envelopes", "spacing_per_half"]

FloatArray = NDArray[np.float64]

_STEP = 1.001
"""Ratio between neighbouring distances of an envelope's table (a 0.1 % step)."""

_BLOCK = 8
"""Filter grid points taken together (the least density over the block's reach counts)."""

_RESPONSE_FLOOR = 1e-6
"""Matched-filter points weaker than this (relative to its centre) are left out: less
interference, so the gap claimed is never larger."""

_PIECE = 1.25
"""Widest ratio of symbol rates one evaluation of a power-limited family covers."""

_ROUNDS = 14
"""Bisection steps on the gap (its range halves each step)."""

_SAFETY = 1e-6
"""Relative slack on the allowance (floating-point sums in a different order)."""


@dataclass(frozen=True)
class Neighbour:
    """One kind of carrier another demand may place: its spectrum, linear level and least
    symbol rate."""

    owner: str
    key: emission.EmissionKey
    level: float
    rate_baud: float


@functools.lru_cache(maxsize=512)
def _skirt(key: emission.EmissionKey, side: str) -> tuple[FloatArray, FloatArray]:
    """Distances (Rs units) beyond the nominal edge on ``side`` and the least normalised
    density from the edge out to each of them (non-increasing; 0 beyond the profile)."""
    profile = emission.get_profile(key)
    edge = (1.0 + key.rolloff) / 2.0
    sign = 1.0 if side == "above" else -1.0
    offset = sign * profile.freq - edge
    outside = offset > 0
    order = np.argsort(offset[outside])
    x = np.concatenate([[0.0], offset[outside][order]])
    start = profile.psd_at(np.array([sign * edge]))
    density = np.concatenate([start, profile.psd[outside][order]])
    return x, np.minimum.accumulate(density)


class QuietEnvelope:
    """The least density (linear, relative units) any of ``neighbours`` puts at each distance
    (Hz) beyond its own nominal edge, on the side facing the victim, tabulated on a geometric
    grid and read at the next larger distance of the table (never above the true least)."""

    def __init__(self, neighbours: Sequence[Neighbour]) -> None:
        self.empty = not neighbours
        rates = [n.rate_baud for n in neighbours if n.rate_baud > 0]
        self.start = 1e-6 * min(rates, default=1.0)
        reach = min(
            (float(_skirt(n.key, "above")[0][-1]) * n.rate_baud for n in neighbours),
            default=0.0,
        )
        count = max(2, math.ceil(math.log(max(reach, self.start) / self.start) / math.log(_STEP)))
        grid = self.start * _STEP ** np.arange(count + 1)
        self.reach_hz = float(grid[-1])
        self.tables: dict[str, FloatArray] = {}
        for side in ("below", "above"):
            least = np.full(grid.size, np.inf)
            for n in neighbours:
                x, q = _skirt(n.key, side)
                scaled = grid / n.rate_baud if n.rate_baud > 0 else np.full(grid.size, np.inf)
                least = np.minimum(least, n.level * np.interp(scaled, x, q, right=0.0))
            self.tables[side] = np.where(np.isfinite(least), least, 0.0)

    def at(self, distance_hz: FloatArray, side: str) -> FloatArray:
        """Lower bound of the least density at ``distance_hz`` (≥ 0) beyond the edge on
        ``side`` of the neighbour (0 beyond the table)."""
        table = self.tables[side]
        ratio = np.maximum(distance_hz, self.start) / self.start
        index = np.ceil(np.log(ratio) / math.log(_STEP) + 1e-9).astype(np.int64)
        inside = index < table.size
        return np.where(inside, table[np.minimum(index, table.size - 1)], 0.0)

    def reach_baud(self, rate_baud: float) -> float:
        """The table's reach in units of ``rate_baud`` (the envelope is 0 beyond it)."""
        return self.reach_hz / rate_baud


@dataclass(frozen=True)
class _Filter:
    """A victim's matched filter inside its own nominal band, blocked: per block the summed
    trapezoid weight × response (Rs units) and the farthest distance (Rs units) from the
    victim's nominal edge on one side; and its own received signal per unit Rs.

    Points beyond the nominal edge are left out (the response there is a truncation side lobe):
    a point inside the band stays outside any neighbour whatever the gap, so the interference
    counted falls as the gap grows."""

    weight: FloatArray
    far: FloatArray
    signal: float


@functools.lru_cache(maxsize=256)
def _filter(key: emission.EmissionKey, side: str) -> _Filter:
    linear = emission.EmissionKey(key.rolloff, key.span_symbols, key.window)
    matched = emission.get_profile(linear)
    u = matched.freq
    response = matched.psd / float(matched.psd_at(np.zeros(1))[0])
    own = emission.get_profile(key).psd_at(u)
    signal = float(np.trapezoid(own * response, u))
    weights = np.full(u.size, float(u[1] - u[0]))
    weights[[0, -1]] /= 2.0
    edge = (1.0 + key.rolloff) / 2.0
    distance = edge - u if side == "above" else u + edge
    keep = np.flatnonzero((response >= _RESPONSE_FLOOR) & (distance >= 0))
    blocks = np.arange(keep[0], keep[-1] + 1)
    blocks = blocks[: blocks.size - blocks.size % _BLOCK].reshape(-1, _BLOCK)
    return _Filter(
        (weights[blocks] * response[blocks]).sum(axis=1), distance[blocks].max(axis=1), signal
    )


@dataclass(frozen=True)
class _Piece:
    """Symbol rates [narrow, wide] of a victim and the interference (per unit Rs) its whole
    allowance permits at the narrow one (the most, for a link that loses Es/N0 with width)."""

    wide_baud: float
    allowed: float


def _allowed(family: Family, demand: Demand, half: float, level: float, signal: float) -> float:
    """Interference per unit Rs the victim's whole allowance permits at ``half``."""
    top = family.top.config
    esn0 = top.esn0_db
    if family.power_limited:  # as Family.config_at re-measures the link
        esn0 -= 10.0 * math.log10(half / family.hi_half)
    floor = demand.margin_db - INTERFERENCE_ALLOWANCE_DB
    needed = _needed_c_over_i_db(esn0, top.required_esn0_db, floor)
    if math.isinf(needed):
        return 0.0
    return level * signal * math.pow(10.0, -needed / 10.0) * (1.0 + _SAFETY)


def _pieces(lo: float, hi: float, power_limited: bool) -> list[tuple[float, float]]:
    """[lo, hi] cut into ranges each within :data:`_PIECE` (one range for a fixed link)."""
    if not power_limited or hi <= lo * _PIECE:
        return [(lo, hi)]
    count = math.ceil(math.log(hi / lo) / math.log(_PIECE))
    edges = lo * (hi / lo) ** (np.arange(count + 1) / count)
    return [(float(a), float(b)) for a, b in itertools.pairwise(edges)]


def _needed_gap(
    envelope: QuietEnvelope, filt: _Filter, side: str, pieces: Sequence[_Piece]
) -> FloatArray:
    """Per piece, a gap (Rs units of its widest rate) below which the envelope's interference
    still exceeds the allowance (bisection on a non-increasing function, keeping the last
    gap found above)."""
    wide = np.array([p.wide_baud for p in pieces])[:, None]
    allowed = np.array([p.allowed for p in pieces])
    facing = "below" if side == "above" else "above"  # the neighbour's side facing the victim

    def heard(gap: FloatArray) -> FloatArray:
        density = envelope.at((filt.far[None, :] + gap[:, None]) * wide, facing)
        return np.asarray(density @ filt.weight)

    lo = np.zeros(len(pieces))
    if not np.any(heard(lo) > allowed):
        return lo  # no gap is needed: the envelope is within the allowance even at 0
    hi = np.full(len(pieces), float(filt.far.max()) + envelope.reach_baud(float(wide.min())))
    for _ in range(_ROUNDS):
        mid = (lo + hi) / 2.0
        loud = heard(mid) > allowed
        lo, hi = np.where(loud, mid, lo), np.where(loud, hi, mid)
    return lo


def spacing_per_half(
    family: Family,
    demand: Demand,
    envelope: QuietEnvelope,
    level: float,
    top_half: float | None = None,
) -> tuple[float, float]:
    """Grid units per half-width unit that the gap below and above a carrier of ``family``
    (on its own grid) needs towards any neighbour the envelope stands for.

    Parameters
    ----------
    family : Family
        The victim's family; its half-widths are its grid's (``raster_hz`` per unit).
    demand : Demand
        The victim's demand (its minimum rate and margin).
    envelope : QuietEnvelope
        The quietest neighbour of any other demand.
    level : float
        The victim's linear relative level.
    top_half : float, optional
        The widest half-width the caller counts the family at (its top if not given).

    Returns
    -------
    tuple of float
        ``(below, above)``: for every symbol rate from the demand's minimum rate up, a carrier
        of ``family`` at half-width h is at least ``below · h`` and ``above · h`` grid units
        from its neighbours, or is that much wider than ``top_half`` (``h`` then that).
    """
    if envelope.empty or family.key is None:
        return 0.0, 0.0
    top = family.top.config
    rate_per_half = top.symbol_rate_baud / family.hi_half
    least = demand.min_rate_bps / (top.throughput_bps / family.hi_half)
    lo = min(max(least, 1e-9 * family.hi_half), float(family.lo_half))
    hi = float(family.hi_half if top_half is None else top_half)
    found = []
    for side in ("below", "above"):
        filt = _filter(family.key, side)
        pieces = [
            _Piece(b * rate_per_half, _allowed(family, demand, a, level, filt.signal))
            for a, b in _pieces(lo, hi, family.power_limited)
        ]
        per_half = float(_needed_gap(envelope, filt, side, pieces).min()) * rate_per_half
        per_half /= family.raster_hz
        if per_half <= 0:
            found.append(0.0)
            continue
        wider = _Piece(
            hi * (1.0 + per_half / 2.0) * rate_per_half,
            _allowed(family, demand, hi, level, filt.signal),
        )
        beyond = float(_needed_gap(envelope, filt, side, [wider])[0]) * rate_per_half
        found.append(min(per_half, beyond / family.raster_hz))
    return found[0], found[1]


def _front(neighbours: Sequence[Neighbour]) -> tuple[Neighbour, ...]:
    """Per spectrum, the neighbours no other is both narrower and quieter than (the others
    are never the quietest at any distance)."""
    kept: list[Neighbour] = []
    by_key: dict[emission.EmissionKey, list[Neighbour]] = {}
    for n in neighbours:
        by_key.setdefault(n.key, []).append(n)
    for group in by_key.values():
        quietest = math.inf
        for n in sorted(group, key=lambda n: (n.rate_baud, n.level)):
            if n.level < quietest:
                kept.append(n)
                quietest = n.level
    return tuple(sorted(kept, key=lambda n: (n.rate_baud, n.level, n.owner)))


@functools.lru_cache(maxsize=64)
def _envelope(front: tuple[Neighbour, ...]) -> QuietEnvelope:
    return QuietEnvelope(front)


def envelopes(
    problem: Problem, rates: Mapping[str, Mapping[emission.EmissionKey, float]]
) -> dict[str, QuietEnvelope]:
    """Per demand, the quietest neighbour of every other demand.

    Parameters
    ----------
    problem : Problem
        Supplies the demands and their relative levels.
    rates : mapping
        Per demand id, the least symbol rate of each spectrum its carriers may have
        (:func:`solver.candidates.least_symbol_rates`).

    Returns
    -------
    dict
        The envelope each demand's carriers see, by demand id.
    """
    every = [
        Neighbour(d.id, key, 10.0 ** (d.relative_level_db / 10.0), rate)
        for d in problem.demands
        for key, rate in rates.get(d.id, {}).items()
    ]
    front = _front(every)
    owners = {n.owner for n in front}
    return {
        d.id: _envelope(_front([n for n in every if n.owner != d.id]) if d.id in owners else front)
        for d in problem.demands
    }
