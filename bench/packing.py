"""Packing benchmark: the optimiser against the rule-of-thumb plan, the Shannon–Nyquist bound
and the same segment model solved by HiGHS (scipy.optimize.milp).

Run by hand (not part of the test suite)::

    .venv/bin/python bench/packing.py                 # 12, 50 and 200 demands
    .venv/bin/python bench/packing.py --sizes 10 --width-per-demand-hz 1.9e6 \
        --implementation-loss-db 2.0          # the calibration block: 10 demands in 19 MHz

Scenarios are invented: a microwave operator's block shared by power-limited links (given
C/N0) and fixed links (given Es/N0), ambitious targets (2–4 × the minimum) so that spectrum is
the bottleneck, and one exclusion.  Settings: filter span 12 symbols, no window, linear
transmitter, roll-offs 0.05–0.35, leakage limit 30 dB, edge limit 35 dB, coded thresholds from
the finite-length normal approximation (n = 16 200 bits, BLER 1e-5) plus 1 dB implementation
loss, 2 % framing overhead, 2 CP-SAT workers, fixed seed.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass, replace

import numpy as np
from scipy import optimize, sparse

from solver import Block, Coding, Demand, Exclusion, Objective, Problem, Transmitter, solve
from solver.candidates import build_candidates
from solver.model import ProgressEvent
from solver.packing import PackingInput, admission_weights, item_coefficients
from solver.planner import _fix_pinned, _segments, protection_levels
from solver.rules import rule_of_thumb_plan

WIDTH_PER_DEMAND_HZ = 1.6e6


def scenario(
    count: int,
    seed: int = 7,
    objective: Objective = Objective.MAX_THROUGHPUT,
    width_per_demand_hz: float = WIDTH_PER_DEMAND_HZ,
    implementation_loss_db: float = 1.0,
    target_factor: tuple[float, float] = (2.0, 4.0),
) -> Problem:
    """An invented, oversubscribed block of ``count`` demands."""
    rng = np.random.default_rng(seed)
    width = width_per_demand_hz * count
    start = 7_125e6
    raster = 10e3 if count <= 50 else 25e3
    mid = start + width * rng.uniform(0.3, 0.7)
    exclusion = Exclusion(mid, mid + 0.03 * width, "protected fixed link")
    demands = []
    for i in range(count):
        minimum = float(rng.uniform(0.5e6, 3e6))
        power_limited = rng.random() < 0.6
        demands.append(
            Demand(
                id=f"link-{i:03d}",
                min_rate_bps=minimum,
                target_rate_bps=minimum * float(rng.uniform(*target_factor)),
                priority=int(rng.integers(1, 4)),
                cn0_dbhz=float(rng.uniform(72, 86)) if power_limited else None,
                esn0_db=None if power_limited else float(rng.uniform(8, 26)),
                margin_db=float(rng.uniform(1, 4)),
            )
        )
    return Problem(
        block=Block(start, start + width, raster, (exclusion,), edge_leakage_limit_db=35.0),
        demands=tuple(demands),
        name=f"bench-{count}",
        leakage_limit_db=30.0,
        transmitter=Transmitter(
            filter_span_symbols=12, rolloffs=(0.05, 0.1, 0.15, 0.2, 0.25, 0.35)
        ),
        coding=Coding(16200, 1e-5, implementation_loss_db, 0.02),
        objective=objective,
        time_limit_s={12: 5.0, 50: 5.0, 200: 20.0}.get(count, 10.0),
        num_workers=2,
        seed=1,
    )


# ---------------------------------------------------------------- HiGHS peer


@dataclass
class HighsResult:
    time_s: float
    status: str
    throughput_bps: float
    served: int
    gap: float


def packing_input(problem: Problem) -> PackingInput:
    """The same PackingInput the planner builds for a fresh plan (no pins, no verification)."""
    options = {d.id: build_candidates(problem, d) for d in problem.demands}
    pinned, _ = _fix_pinned(problem, options)
    free = [options[d.id] for d in problem.demands]
    return PackingInput(
        options=free,
        segments=_segments(problem, pinned),
        objective=problem.objective,
        admission_weights=admission_weights([o.demand for o in free]),
        priorities=[o.demand.priority for o in free],
        time_limit_s=problem.time_limit_s,
        num_workers=problem.num_workers,
        seed=problem.seed,
        levels=protection_levels(free),
    )


class _Milp:
    """A sparse MILP under construction: columns with bounds and integrality, rows, costs."""

    def __init__(self) -> None:
        self.lower: list[float] = []
        self.upper: list[float] = []
        self.integer: list[bool] = []
        self.cost: list[float] = []
        self.row_lo: list[float] = []
        self.row_hi: list[float] = []
        self.triplets: list[tuple[int, int, float]] = []

    def column(self, upper: float, integer: bool, cost: float = 0.0) -> int:
        self.lower.append(0.0)
        self.upper.append(upper)
        self.integer.append(integer)
        self.cost.append(cost)
        return len(self.cost) - 1

    def row(self, entries: list[tuple[int, float]], lower: float, upper: float) -> None:
        r = len(self.row_lo)
        self.triplets.extend((r, c, v) for c, v in entries if v)
        self.row_lo.append(lower)
        self.row_hi.append(upper)

    def solve(self, time_limit_s: float) -> optimize.OptimizeResult:
        rows, cols, vals = zip(*self.triplets, strict=True)
        matrix = sparse.csr_array((vals, (rows, cols)), shape=(len(self.row_lo), len(self.cost)))
        return optimize.milp(
            np.array(self.cost),
            constraints=optimize.LinearConstraint(matrix, self.row_lo, self.row_hi),
            integrality=np.array(self.integer, dtype=int),
            bounds=optimize.Bounds(np.array(self.lower), np.array(self.upper)),
            options={"time_limit": time_limit_s, "disp": False, "mip_rel_gap": 1e-9},
        )


def solve_with_highs(data: PackingInput, time_limit_s: float) -> HighsResult:
    """The same segment model as a MILP, built from the same coefficients
    (solver.packing.item_coefficients): per item x (binary) and h (integer half-width), per
    segment one binary per protection level and per-level capacity rows (big-M), the same
    objective order (admission first, then priority-weighted capped throughput)."""
    m = _Milp()
    target_total = sum(o.demand.priority * o.demand.target_rate_bps for o in data.options) / 1e6
    items: dict[tuple[int, int, int], tuple[int, int]] = {}
    for d, opts in enumerate(data.options):
        for k, fam in enumerate(opts.candidates):
            allowed = data.allowed_levels(fam)
            if not allowed:
                continue
            narrowest = fam.at(fam.lo_half, data.level(allowed[0]))
            per_half = min(fam.throughput_per_half_bps, opts.demand.target_rate_bps / fam.hi_half)
            for s, seg in enumerate(data.segments):
                if not seg.fits_alone(narrowest):
                    continue
                x = m.column(1, True, -data.admission_weights[d] * (target_total + 1))
                h = m.column(fam.hi_half, True, -data.priorities[d] * per_half / 1e6)
                m.row([(h, 1.0), (x, -float(fam.lo_half))], 0, np.inf)
                m.row([(h, 1.0), (x, -float(fam.hi_half))], -np.inf, 0)
                items[d, k, s] = (x, h)
    for d in range(len(data.options)):
        m.row([(xh[0], 1.0) for key, xh in items.items() if key[0] == d], 0, 1)
    levels = range(len(data.levels)) if data.levels else [0]
    for s, seg in enumerate(data.segments):
        keys = [key for key in items if key[2] == s]
        z = {i: m.column(1, True) for i in levels}
        m.row([(z[i], 1.0) for i in levels], 0, 1)
        for key in keys:
            fam = data.options[key[0]].candidates[key[1]]
            m.row(
                [(items[key][0], 1.0)] + [(z[i], -1.0) for i in data.allowed_levels(fam)],
                -np.inf,
                0,
            )
        big = 4.0 * seg.length * 1000.0 + 1e6
        for i in levels:
            delta, right = m.column(np.inf, False), m.column(np.inf, False)
            body: list[tuple[int, float]] = []
            for key in keys:
                fam = data.options[key[0]].candidates[key[1]]
                if i not in data.allowed_levels(fam):
                    continue
                x, h = items[key]
                c = item_coefficients(seg, fam, data.level(i))
                m.row([(delta, 1.0), (h, -float(c.delta_h)), (x, -float(c.delta_x))], 0, np.inf)
                m.row([(right, 1.0), (h, -float(c.right_h)), (x, -float(c.right_x))], 0, np.inf)
                body += [(h, float(c.body_h)), (x, float(c.body_x))]
            m.row(
                [*body, (delta, 1.0), (right, 1.0), (z[i], big)], -np.inf, seg.length * 1000.0 + big
            )
    started = time.perf_counter()
    res = m.solve(time_limit_s)
    elapsed = time.perf_counter() - started
    if res.x is None:
        return HighsResult(elapsed, str(res.message), 0.0, 0, float("nan"))
    throughput, served = 0.0, 0
    for (d, k, _), (x, h) in items.items():
        if res.x[x] > 0.5:
            served += 1
            throughput += data.options[d].candidates[k].at(round(res.x[h])).throughput_bps
    gap = float(getattr(res, "mip_gap", float("nan")))
    status = "optimal" if res.status == 0 else "time limit"
    return HighsResult(elapsed, status, throughput, served, gap)


# ---------------------------------------------------------------- report


def _row(
    count: int, width_per_demand_hz: float, loss_db: float, target_factor: tuple[float, float]
) -> dict[str, object]:
    problem = scenario(
        count,
        width_per_demand_hz=width_per_demand_hz,
        implementation_loss_db=loss_db,
        target_factor=target_factor,
    )
    within: list[float] = []
    started = time.perf_counter()

    def note(event: ProgressEvent) -> None:
        if not within and event.optimality_gap <= 0.03:
            within.append(time.perf_counter() - started)

    plan = solve(problem, progress=note)
    wall = time.perf_counter() - started
    hand = rule_of_thumb_plan(problem)
    # min_bandwidth: our plan at the minimum rates against the hand plan for the same rates.
    at_min = replace(problem, objective=Objective.MIN_BANDWIDTH)
    lean = solve(at_min)
    hand_min = rule_of_thumb_plan(
        replace(
            problem,
            demands=tuple(replace(d, target_rate_bps=d.min_rate_bps) for d in problem.demands),
        )
    )
    data = packing_input(problem)
    highs = solve_with_highs(data, problem.time_limit_s)
    s = plan.summary
    return {
        "demands": count,
        "block_MHz": problem.block.width_hz / 1e6,
        "wall_s": wall,
        "cpsat_s": plan.stats.search_time_s,
        "to_3pct_s": within[0] if within else float("nan"),
        "status": plan.status.value,
        "gap": plan.stats.optimality_gap,
        "served": f"{len(plan.carriers)}/{count}",
        "hand_served": f"{len(hand.carriers)}/{count}",
        "thr_Mbps": s.total_throughput_bps / 1e6,
        "hand_thr_Mbps": hand.summary.total_throughput_bps / 1e6,
        "thr_ratio": s.total_throughput_bps / max(hand.summary.total_throughput_bps, 1.0),
        "eff_vs_bound": s.efficiency_vs_bound,
        "hand_eff_vs_bound": hand.summary.efficiency_vs_bound,
        "minbw_used_MHz": lean.summary.used_bandwidth_hz / 1e6,
        "minbw_served": len(lean.carriers),
        "hand_min_used_MHz": hand_min.summary.used_bandwidth_hz / 1e6,
        "hand_min_served": len(hand_min.carriers),
        "highs_s": highs.time_s,
        "highs_status": highs.status,
        "highs_gap": highs.gap,
        "highs_thr_Mbps": highs.throughput_bps / 1e6,
        "rounds": plan.stats.verification_rounds,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[12, 50, 200])
    parser.add_argument(
        "--width-per-demand-hz",
        type=float,
        default=WIDTH_PER_DEMAND_HZ,
        help="block width / demands",
    )
    parser.add_argument(
        "--implementation-loss-db",
        type=float,
        default=1.0,
        help="added to every coded threshold",
    )
    parser.add_argument(
        "--target-factor",
        type=float,
        nargs=2,
        default=(2.0, 4.0),
        metavar=("LOW", "HIGH"),
        help="targets are the minimum rate times a factor drawn from [LOW, HIGH]",
    )
    args = parser.parse_args()
    factor = (args.target_factor[0], args.target_factor[1])
    rows = [
        _row(n, args.width_per_demand_hz, args.implementation_loss_db, factor) for n in args.sizes
    ]
    keys = list(rows[0])
    print("| " + " | ".join(keys) + " |")
    print("|" + "---|" * len(keys))
    for row in rows:
        cells = [f"{v:.3g}" if isinstance(v, float) else str(v) for v in row.values()]
        print("| " + " | ".join(cells) + " |")


if __name__ == "__main__":
    main()
