"""Spacing from the pair: the gap two neighbours need, and widths refitted to those gaps.

The packing model guards every carrier of a free segment for the segment's one protection
level, so a robust carrier next to a robust neighbour is spaced as if it sat next to the most
sensitive carrier of the segment.  Here the gap between two neighbours is what *that pair*
needs: the larger of

* each one's own leakage guard (its leakage ratio at the plan's limit, or at the floor
  verification raised it to), and
* each one's spectral skirt kept below the *other's* sensitivity (the level that keeps the
  other's margin within its interference allowance;
  :func:`solver.packing.families.mask_guard_per_baud`),

and towards a block edge or exclusion the carrier's own edge guard.  Since a family's symbol
rate, and so each of these guards, grows linearly with its half-width, the width a stretch of
carriers in a fixed order needs is linear in the half-widths but for the maxima;
:func:`refit_stretch` chooses the half-widths with CP-SAT (a handful of variables per carrier,
solved in milliseconds) so that the stretch carries the most priority-weighted throughput with
every gap exact to the raster.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace

from ortools.sat.python import cp_model
from scipy import optimize, sparse

from solver.packing.families import Candidate, Family, mask_guard_per_baud

__all__ = [
    "PairMeasure",
    "Slot",
    "Stretch",
    "Wall",
    "edge_reach",
    "fill_grid",
    "layout",
    "leakage_units",
    "packed_centres",
    "pair_gap_raw",
    "pair_gap_units",
    "place_stretch",
    "refit_stretch",
    "regrid",
    "stretch_fits",
    "stretch_need",
]

_SCALE = 10_000
"""Guard rows are scaled by this so that per-half-width coefficients stay integers."""


@dataclass(frozen=True)
class Wall:
    """What bounds a stretch on one side: a block edge or exclusion (``family`` None), or a
    fixed carrier (pinned, or kept in place by a replan) with its family and half-width."""

    family: Family | None = None
    half: int = 0


@dataclass(frozen=True)
class Slot:
    """One carrier of a stretch: its family, the half-width range it may take and its value
    per half-width unit (priority-weighted throughput, capped at the target)."""

    family: Family
    lo_half: int
    hi_half: int
    value_per_half: float
    owner: int = -1
    """Index of the demand this slot serves (the caller's numbering)."""

    def clamp(self, half: int) -> int:
        return min(max(half, self.lo_half), self.hi_half)


def _per_half(family: Family, per_baud: float) -> float:
    """Raster units per half-width unit of a guard given per baud."""
    rate_per_half = family.top.config.symbol_rate_baud / family.hi_half
    return per_baud * rate_per_half / family.raster_hz


def _guard_per_half(family: Family, victim: Family) -> float:
    """Raster units per half-width unit that ``family`` needs towards neighbour ``victim``:
    its own leakage guard, or its skirt kept below the victim's sensitivity."""
    if family.key is None:  # a fixed test family: its own guard is all that is known
        return family.top.guard_units / family.hi_half
    found = family.memo.get(victim.sensitivity_db)
    if found is None:
        mask = mask_guard_per_baud(family.key, victim.sensitivity_db)
        found = _per_half(family, max(family.leakage_guard_per_baud, mask))
        family.memo[victim.sensitivity_db] = found
    return found


def leakage_units(family: Family, half: int) -> float:
    """Raster units (not rounded) of ``family``'s own leakage-ratio guard at ``half``."""
    if family.key is None:
        return float(family.top.guard_units) * half / family.hi_half
    return _per_half(family, family.leakage_guard_per_baud) * half


def _edge_per_half(family: Family) -> float:
    return family.edge_per_half


def _units(value: float) -> int:
    return max(0, math.ceil(value - 1e-9))


PairMeasure = Callable[[Slot, int, Slot, int], float]
"""The share of the spectral-mask gap two neighbours (low slot and half-width, high slot and
half-width) really need."""

Scales = Mapping[tuple[int, int], float]
"""Per pair of neighbours (owners, low then high): the share of the spectral-mask gap the pair
really needs, measured by the verifier's own rule (:class:`solver.verify.PairCheck`)."""


def pair_gap_raw(left: Family, left_half: int, right: Family, right_half: int) -> float:
    """Raster units (not rounded) of the spectral-mask gap between two neighbours."""
    return max(_guard_per_half(left, right) * left_half, _guard_per_half(right, left) * right_half)


def pair_gap_units(
    left: Family, left_half: int, right: Family, right_half: int, scale: float = 1.0
) -> int:
    """Raster units the gap between two neighbours needs (rounded up), times ``scale``."""
    return _units(pair_gap_raw(left, left_half, right, right_half) * scale)


def _wall_gap(wall: Wall, family: Family, half: int) -> int:
    if wall.family is None:
        return _units(_edge_per_half(family) * half)
    return pair_gap_units(wall.family, wall.half, family, half)


def regrid(family: Family, fine: int) -> Family:
    """The same carriers on a grid ``fine`` times finer than the raster (a fixed carrier seen
    from a stretch measured in finer steps)."""
    if fine == 1:
        return family
    raster = family.raster_hz / fine
    config = family.top.config
    top = Candidate.on_raster(config, 2 * family.hi_half * fine, raster)
    lo, hi = family.lo_half * fine, family.hi_half * fine
    return replace(family, top=top, lo_half=lo, hi_half=hi, raster_hz=raster)


def fill_grid(
    family: Family, fine: int, min_rate_bps: float, target_rate_bps: float, margin_db: float
) -> Family:
    """``family`` on a grid ``fine`` times finer than the raster, each width filled by its
    symbol rate, from the least width that carries ``min_rate_bps`` to the least that carries
    ``target_rate_bps`` (lower where a power-limited link would fall below ``margin_db``).
    When even the least filled width misses the margin, the family as it is, on the finer
    grid (:func:`regrid`)."""
    raster = family.raster_hz / fine
    top = family.top.config
    per_half = 2.0 * raster / top.allocated_bandwidth_hz  # share of the top per half-step
    throughput = top.throughput_bps * per_half
    lo = max(1, math.ceil(min_rate_bps / throughput - 1e-9))
    # never wider than the family's own top (a target far above it would make a grid of
    # astronomically many steps); on an equipment's symbol-rate grid, never above the top's
    # rate (the top is the highest the equipment and the link allow)
    widest = (family.hi_half + (0 if family.symbol_rate_step_baud > 0 else 1)) * fine
    hi = max(lo, min(math.ceil(target_rate_bps / throughput - 1e-9), widest))

    def margin(half: int) -> float:
        return family.config_at(half * per_half).margin_db

    if margin(hi) < margin_db - 1e-9:  # the margin falls with the width: bisect the widest
        good = lo
        while hi - good > 1:
            mid = (good + hi) // 2
            good, hi = (mid, hi) if margin(mid) >= margin_db - 1e-9 else (good, mid)
        hi = good
    if margin(lo) < margin_db - 1e-9:  # a link with no room to round the width up: as it was
        return regrid(family, fine)
    at_hi = family.config_at(hi * per_half)
    fine_top = Candidate.on_raster(at_hi, 2 * hi, raster)
    return replace(family, top=fine_top, lo_half=lo, hi_half=hi, raster_hz=raster)


def stretch_need(
    slots: Sequence[Slot],
    halves: Sequence[int],
    left: Wall,
    right: Wall,
    scales: Scales | None = None,
) -> list[int]:
    """The gaps (grid units) of a stretch in order: left wall, between neighbours, right
    wall (``len(slots) + 1`` of them; ``[0]`` for an empty stretch)."""
    if not slots:
        return [0]
    gaps = [_wall_gap(left, slots[0].family, halves[0])]
    for i in range(1, len(slots)):
        a, b = slots[i - 1], slots[i]
        scale = (scales or {}).get((a.owner, b.owner), 1.0)
        gaps.append(pair_gap_units(a.family, halves[i - 1], b.family, halves[i], scale))
    gaps.append(_wall_gap(right, slots[-1].family, halves[-1]))
    return gaps


def _on_grid(value: int, fine: int) -> int:
    """``value`` rounded up to a multiple of ``fine`` (a raster point)."""
    return -(-value // fine) * fine


def packed_centres(
    start: int,
    gaps: Sequence[int],
    halves: Sequence[int],
    fine: int = 1,
    reach: Sequence[tuple[int, int]] = (),
) -> tuple[list[int], int]:
    """Centres (grid units) of carriers packed from ``start`` with at least ``gaps`` between
    them, each centre on the raster (a multiple of ``fine``); and how far the stretch must
    reach: past the last one's right gap, and past every carrier's own guard towards the
    stretch's ends (``reach``: per carrier, its guard towards the left and the right end,
    when those are a block edge or an exclusion; a neighbour between does not shelter it).
    """
    centres: list[int] = []
    edge, end = start, start
    for i, (gap, half) in enumerate(zip(gaps, halves, strict=False)):
        left, right = reach[i] if reach else (0, 0)
        centre = _on_grid(max(edge + gap, start + left) + half, fine)
        centres.append(centre)
        edge = centre + half
        end = max(end, edge + right)
    return centres, max(end, edge + gaps[len(halves)])


def edge_reach(
    slots: Sequence[Slot], halves: Sequence[int], left: Wall, right: Wall
) -> list[tuple[int, int]]:
    """Per carrier, the guard (grid units) it needs towards each end of its stretch that is a
    block edge or an exclusion (0 towards a fixed carrier)."""
    return [
        (
            _units(_edge_per_half(slot.family) * half) if left.family is None else 0,
            _units(_edge_per_half(slot.family) * half) if right.family is None else 0,
        )
        for slot, half in zip(slots, halves, strict=True)
    ]


def layout(
    slots: Sequence[Slot],
    halves: Sequence[int],
    left: Wall,
    right: Wall,
    scales: Scales | None = None,
    *,
    start: int = 0,
    fine: int = 1,
) -> tuple[list[int], int]:
    """Centres of the carriers packed from the low end, and how far the stretch must reach
    (:func:`packed_centres` with every pair's gap and every carrier's edge guards)."""
    gaps = stretch_need(slots, halves, left, right, scales)
    return packed_centres(start, gaps, halves, fine, edge_reach(slots, halves, left, right))


def stretch_fits(
    slots: Sequence[Slot],
    halves: Sequence[int],
    left: Wall,
    right: Wall,
    length: int,
    scales: Scales | None = None,
    *,
    start: int = 0,
    fine: int = 1,
) -> bool:
    """Whether the carriers at ``halves`` fit a stretch of ``length`` grid units in order,
    their centres on the raster."""
    return layout(slots, halves, left, right, scales, start=start, fine=fine)[1] <= start + length


def place_stretch(
    start: int,
    length: int,
    slots: Sequence[Slot],
    halves: Sequence[int],
    left: Wall,
    right: Wall,
    *,
    spread: bool,
    scales: Scales | None = None,
    fine: int = 1,
) -> list[int]:
    """Centres (grid units, on the raster) of the carriers in order; packed from the low end,
    or with the whole raster steps left over spread evenly over every gap when ``spread``
    (lower leakage and interference, nothing lost)."""
    gaps = stretch_need(slots, halves, left, right, scales)
    centres, end = layout(slots, halves, left, right, scales, start=start, fine=fine)
    slack = (start + length - end) // fine
    if slack < 0:
        raise ValueError(f"stretch of {length} grid units overfilled by {end - start - length}")
    if not spread or not slots:
        return centres
    share, rest = divmod(slack, len(gaps))
    shift = 0
    for i in range(len(centres)):
        shift += share + (1 if i < rest else 0)
        centres[i] += shift * fine
    return centres


def refit_stretch(
    slots: Sequence[Slot],
    start_halves: Sequence[int],
    left: Wall,
    right: Wall,
    length: int,
    *,
    time_limit_s: float = 1.0,
    seed: int = 1,
    scales: Scales | None = None,
    start: int = 0,
    fine: int = 1,
) -> list[int]:
    """Half-widths that carry the most value in a stretch, carriers in the given order, with
    every gap exactly what its pair needs (to the grid) and every centre on the raster.

    ``start_halves`` must fit (it is the hint and the fallback).  Each gap is an integer
    variable at least each guard term (scaled coefficient times half-width, so the integer
    gap is the guard rounded up to the grid); each centre is ``fine`` times an integer.
    """
    if not slots:
        return []
    model = cp_model.CpModel()
    n = len(slots)
    halves = [model.new_int_var(s.lo_half, s.hi_half, f"h{i}") for i, s in enumerate(slots)]
    gaps = [model.new_int_var(0, length, f"g{i}") for i in range(n + 1)]
    steps = [
        model.new_int_var(-(-start // fine), (start + length) // fine, f"c{i}") for i in range(n)
    ]
    _wall_rows(model, left, slots[0].family, halves[0], gaps[0])
    _wall_rows(model, right, slots[-1].family, halves[-1], gaps[-1])
    for i in range(1, n):
        a, b = slots[i - 1].family, slots[i].family
        scale = (scales or {}).get((slots[i - 1].owner, slots[i].owner), 1.0)
        _at_least(model, gaps[i], _guard_per_half(a, b) * scale, halves[i - 1])
        _at_least(model, gaps[i], _guard_per_half(b, a) * scale, halves[i])
        model.add(fine * steps[i] - halves[i] - gaps[i] >= fine * steps[i - 1] + halves[i - 1])
    model.add(fine * steps[0] - halves[0] - gaps[0] >= start)
    model.add(fine * steps[-1] + halves[-1] + gaps[-1] <= start + length)
    _edge_rows(model, slots, halves, steps, (left, right), (start, start + length), fine)
    unit = max(s.value_per_half for s in slots) / 1e6 or 1.0
    model.maximize(
        sum(round(s.value_per_half / unit) * h for s, h in zip(slots, halves, strict=True))
    )
    hint_centres, _ = layout(slots, start_halves, left, right, scales, start=start, fine=fine)
    for var, value in zip(halves, start_halves, strict=True):
        model.add_hint(var, value)
    for var, centre in zip(steps, hint_centres, strict=True):
        model.add_hint(var, centre // fine)
    solved = _solve(model, halves, time_limit_s, seed)
    if solved is None:
        return list(start_halves)
    found = solved
    if not stretch_fits(slots, found, left, right, length, scales, start=start, fine=fine):
        return list(start_halves)  # a rounded coefficient
    return found


def _solve(
    model: cp_model.CpModel, halves: Sequence[cp_model.IntVar], time_limit_s: float, seed: int
) -> list[int] | None:
    """The half-widths of the best solution found in time (one worker), or None."""
    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = max(0.05, time_limit_s)
    solver.parameters.num_workers = 1
    solver.parameters.random_seed = seed
    solver.parameters.catch_sigint_signal = False
    status = solver.solve(model)
    if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return None
    return [int(solver.value(h)) for h in halves]


@dataclass
class Stretch:
    """A free segment and its carriers in order, on a grid ``fine`` times finer than the
    raster (``start`` and ``length`` in grid units; centres on multiples of ``fine``)."""

    start: int
    length: int
    left: Wall = field(default_factory=Wall)
    right: Wall = field(default_factory=Wall)
    slots: list[Slot] = field(default_factory=list)
    halves: list[int] = field(default_factory=list)
    scales: dict[tuple[int, int], float] = field(default_factory=dict)
    fine: int = 1
    _tail: tuple[object, int, int] | None = field(default=None, init=False, repr=False)
    """(state, last carrier's upper edge, reach): :meth:`append`'s memory of the layout."""

    def _state(self) -> object:
        return (
            len(self.slots),
            tuple(map(id, self.slots)),
            tuple(self.halves),
            tuple(self.scales.items()),
        )

    def _tail_of_layout(self) -> tuple[int, int]:
        """The last carrier's upper edge and how far the carriers reach with their guards
        towards the stretch's ends, packed from the low end (remembered between appends)."""
        state = self._state()
        if self._tail is not None and self._tail[0] == state:
            return self._tail[1], self._tail[2]
        centres, _ = self._layout(self.slots, self.halves)
        edge = centres[-1] + self.halves[-1]
        reach = edge_reach(self.slots, self.halves, self.left, self.right)
        reached = max(c + h + r for c, h, (_, r) in zip(centres, self.halves, reach, strict=True))
        self._tail = (state, edge, reached)
        return edge, reached

    def _layout(self, slots: Sequence[Slot], halves: Sequence[int]) -> tuple[list[int], int]:
        return layout(
            slots, halves, self.left, self.right, self.scales, start=self.start, fine=self.fine
        )

    def _end(self, slots: Sequence[Slot], halves: Sequence[int]) -> int:
        return self._layout(slots, halves)[1]

    def slack(self) -> int:
        """Grid units left over with the carriers packed at their half-widths."""
        return self.start + self.length - self._end(self.slots, self.halves)

    def append(
        self, options: Sequence[Slot], measure: PairMeasure | None = None, *, measured: int = 3
    ) -> bool:
        """Fit one of ``options`` (cheapest first) after the last carrier, at its narrowest,
        the others untouched.  Returns whether one did.

        With ``measure``, the first ``measured`` options are spaced from the last carrier at
        the gap ``measure`` finds for the pair (kept in :attr:`scales`) and the one that ends
        lowest is taken; the rest, at the spectral-mask gap, first fit."""
        stop = self.start + self.length
        edge, last, reached = self.start, self.slots[-1] if self.slots else None, self.start
        if last is not None:
            edge, reached = self._tail_of_layout()
        best: tuple[int, int, Slot, float, int] | None = None
        for rank, slot in enumerate(options):
            if best is not None and (measure is None or rank >= measured):
                break
            h, scale = slot.lo_half, 1.0
            if last is None:
                gap = _wall_gap(self.left, slot.family, h)
            else:
                if measure is not None and rank < measured:
                    scale = measure(last, self.halves[-1], slot, h)
                gap = pair_gap_units(last.family, self.halves[-1], slot.family, h, scale)
            ((floor, _),) = edge_reach([slot], [h], self.left, self.right)
            centre = _on_grid(max(edge + gap, self.start + floor) + h, self.fine)
            end = max(reached, centre + h + _wall_gap(self.right, slot.family, h))
            if end <= stop and (best is None or end < best[0]):
                best = (end, rank, slot, scale, centre)
        if best is None:
            return False
        _, _, slot, scale, centre = best
        if last is not None and scale < 1.0:
            self.scales[last.owner, slot.owner] = scale
        self.slots.append(slot)
        self.halves.append(slot.lo_half)
        ((_, ahead),) = edge_reach([slot], [slot.lo_half], self.left, self.right)
        upper = centre + slot.lo_half
        self._tail = (self._state(), upper, max(reached, upper + ahead))
        return True

    def insert(self, options: Sequence[Slot], *, max_positions: int = 64) -> bool:
        """Fit one of ``options`` anywhere in the order: first with the others as they are,
        then with every carrier narrowed to its least.  Returns whether one fitted."""
        if len(self.slots) >= max_positions:
            return self.append(options)
        for narrowed in (False, True):
            for slot in options:
                for i in range(len(self.slots) + 1):
                    trial = [*self.slots[:i], slot, *self.slots[i:]]
                    base = [s.lo_half for s in self.slots] if narrowed else self.halves
                    halves = [*base[:i], slot.lo_half, *base[i:]]
                    if self._end(trial, halves) <= self.start + self.length:
                        self.slots, self.halves = trial, halves
                        return True
        return False

    def refit(self, *, time_limit_s: float = 1.0, seed: int = 1) -> None:
        """Half-widths that carry the most value with every gap exact (:func:`refit_stretch`)."""
        self.halves = refit_stretch(
            self.slots,
            self.halves,
            self.left,
            self.right,
            self.length,
            time_limit_s=time_limit_s,
            seed=seed,
            scales=self.scales,
            start=self.start,
            fine=self.fine,
        )

    def fits(self, halves: Sequence[int]) -> bool:
        return self._end(self.slots, halves) <= self.start + self.length

    def centres(self, *, spread: bool) -> list[int]:
        """Centres (grid units from the block start, on the raster) of the carriers in order."""
        return place_stretch(
            self.start,
            self.length,
            self.slots,
            self.halves,
            self.left,
            self.right,
            spread=spread,
            scales=self.scales,
            fine=self.fine,
        )


def _at_least(
    model: cp_model.CpModel, gap: cp_model.IntVar, per_half: float, half: cp_model.IntVar
) -> None:
    """Hard: the integer gap is at least ``per_half`` times the half-width (so, on the
    raster, the guard rounded up; the scaled coefficient is rounded up too)."""
    model.add(_SCALE * gap >= math.ceil(per_half * _SCALE - 1e-6) * half)


def _edge_rows(
    model: cp_model.CpModel,
    slots: Sequence[Slot],
    halves: Sequence[cp_model.IntVar],
    steps: Sequence[cp_model.IntVar],
    walls: tuple[Wall, Wall],
    ends: tuple[int, int],
    fine: int,
) -> None:
    """Hard: every carrier keeps its own edge guard towards an end of the stretch that is a
    block edge or an exclusion, whatever lies between (the verifier checks each one)."""
    if len(slots) < 2:
        return  # the end gaps already hold it
    for i, (slot, half, step) in enumerate(zip(slots, halves, steps, strict=True)):
        per_half = math.ceil(_edge_per_half(slot.family) * _SCALE - 1e-6)
        if per_half <= 0:
            continue
        if walls[0].family is None and i > 0:
            model.add(_SCALE * (fine * step - half - ends[0]) >= per_half * half)
        if walls[1].family is None and i < len(slots) - 1:
            model.add(_SCALE * (ends[1] - fine * step - half) >= per_half * half)


def _wall_rows(
    model: cp_model.CpModel, wall: Wall, family: Family, half: cp_model.IntVar, gap: cp_model.IntVar
) -> None:
    """Hard: the gap towards a wall is the edge guard, or the pair's need with a fixed carrier."""
    if wall.family is None:
        _at_least(model, gap, _edge_per_half(family), half)
        return
    model.add(gap >= _units(_guard_per_half(wall.family, family) * wall.half))
    _at_least(model, gap, _guard_per_half(family, wall.family), half)


@dataclass(frozen=True)
class BoundItem:
    """One (demand, family, stretch) choice of the throughput relaxation."""

    owner: int
    stretch: int
    lo_half: float
    hi_half: float
    value_per_half: float
    need_per_half: float
    """Raster units per half-width unit that no gap next to this carrier can fall below, plus
    its width (2): its leakage guard or its skirt below the least sensitive neighbour's level."""
    end_per_half: float = 0.0
    """Raster units per half-width unit of the guard towards a wall, less half the above."""


class _Rows:
    """Sparse constraint rows of a linear programme, built one at a time."""

    def __init__(self) -> None:
        self.entries: list[tuple[int, int, float]] = []
        self.lower: list[float] = []
        self.upper: list[float] = []

    def add(self, entries: Sequence[tuple[int, float]], lo: float, hi: float) -> None:
        r = len(self.lower)
        self.entries.extend((r, c, v) for c, v in entries)
        self.lower.append(lo)
        self.upper.append(hi)

    def constraint(self, columns: int) -> optimize.LinearConstraint:
        r, c, v = zip(*self.entries, strict=True)
        matrix = sparse.csr_array((v, (r, c)), shape=(len(self.lower), columns))
        return optimize.LinearConstraint(matrix, self.lower, self.upper)


def _bound_rows(
    items: Sequence[BoundItem], lengths: Sequence[int], weights: Sequence[int], admitted: int
) -> _Rows:
    """Columns x_j = j (share of item j), h_j = n + j (its half-width times that share)."""
    n, rows = len(items), _Rows()
    by_owner: dict[int, list[int]] = {}
    for j, it in enumerate(items):
        by_owner.setdefault(it.owner, []).append(j)
        rows.add([(n + j, 1.0), (j, -float(it.hi_half))], -math.inf, 0.0)
        rows.add([(n + j, 1.0), (j, -float(it.lo_half))], 0.0, math.inf)
    for cols in by_owner.values():
        rows.add([(j, 1.0) for j in cols], 0.0, 1.0)
    weighted = [(j, float(weights[it.owner])) for j, it in enumerate(items)]
    rows.add(weighted, float(admitted), math.inf)
    for s, length in enumerate(lengths):
        mine = [j for j, it in enumerate(items) if it.stretch == s]
        if mine:
            ends = min(
                items[j].end_per_half
                * (items[j].lo_half if items[j].end_per_half >= 0 else items[j].hi_half)
                for j in mine
            )
            need = [(n + j, items[j].need_per_half) for j in mine]
            rows.add(need, -math.inf, length - 2 * ends)
    return rows


def throughput_bound(
    items: Sequence[BoundItem],
    lengths: Sequence[int],
    weights: Sequence[int],
    admitted: int,
    *,
    integral_s: float = 0.0,
) -> float:
    """An upper bound on the value any plan of these items can carry while serving at least
    ``admitted`` admission weight (linear relaxation, HiGHS through scipy).

    Each item needs ``need_per_half`` grid units per half-width unit (its width, 2, plus
    whatever spacing the caller can prove every plan keeps) and, at each end of its stretch,
    ``end_per_half`` (a guard towards an edge less half the spacing already counted).  A
    stretch's ends add at least twice the smallest such term over its items, at the
    half-width that makes it smallest, so a stretch holds Σ need·h ≤ length − 2·min end·h.
    Returns ``-inf`` when the rows cannot serve ``admitted``.

    With ``integral_s`` > 0 each item is taken whole or not at all (every carrier has one
    configuration in one stretch; the widths stay continuous) and HiGHS branches for at most
    that long; its proven dual bound is returned when it stops early, the linear relaxation's
    when it has none.
    """
    n = len(items)
    if n == 0:
        return 0.0 if admitted <= 0 else -math.inf
    rows = _bound_rows(items, lengths, weights, admitted)
    cost = [0.0] * n + [-it.value_per_half for it in items]
    bounds = optimize.Bounds([0.0] * (2 * n), [1.0] * n + [float(it.hi_half) for it in items])
    if integral_s > 0:
        result = optimize.milp(
            cost,
            constraints=rows.constraint(2 * n),
            bounds=bounds,
            integrality=[1] * n + [0] * n,
            options={"presolve": True, "time_limit": integral_s},
        )
        if result.status == 2:
            return -math.inf
        if result.status == 0 and result.x is not None:
            return float(-result.fun)
        dual = getattr(result, "mip_dual_bound", None)
        if dual is not None and math.isfinite(dual):
            return float(-dual)
    result = optimize.milp(  # no integrality: the linear relaxation
        cost, constraints=rows.constraint(2 * n), bounds=bounds, options={"presolve": True}
    )
    if result.status == 2:
        return -math.inf
    if result.status != 0 or result.x is None:
        return math.inf
    return float(-result.fun)
