"""Packing benchmark: the optimiser against the rule-of-thumb plan, the Shannon–Nyquist bound
and the same segment model solved by HiGHS (scipy.optimize.milp).

Run by hand (not part of the test suite)::

    .venv/bin/python bench/packing.py                 # 12, 50 and 200 demands
    .venv/bin/python bench/packing.py --sizes 12 --repeats 3

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
from solver.packing import PackingInput, admission_weights, item_coefficients
from solver.planner import _fix_pinned, _segments
from solver.rules import rule_of_thumb_plan

WIDTH_PER_DEMAND_HZ = 1.6e6


def scenario(count: int, seed: int = 7, objective: Objective = Objective.MAX_THROUGHPUT) -> Problem:
    """An invented, oversubscribed block of ``count`` demands."""
    rng = np.random.default_rng(seed)
    width = WIDTH_PER_DEMAND_HZ * count
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
                target_rate_bps=minimum * float(rng.uniform(2.0, 4.0)),
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
        coding=Coding(16200, 1e-5, 1.0, 0.02),
        objective=objective,
        time_limit_s={12: 5.0, 50: 10.0, 200: 30.0}.get(count, 10.0),
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
    )


def solve_with_highs(data: PackingInput, time_limit_s: float) -> HighsResult:
    """The same segment model as a MILP: per item x (binary) and h (integer half-width), per
    segment δ and hR maxima, the same scaled coefficients (solver.packing.item_coefficients)
    and the same objective order (admission, then priority-weighted capped throughput)."""
    items: list[tuple[int, int, int]] = []
    for d, opts in enumerate(data.options):
        for k, fam in enumerate(opts.candidates):
            for s, seg in enumerate(data.segments):
                if seg.fits_alone(fam.at(fam.lo_half)):
                    items.append((d, k, s))
    n_items, n_seg = len(items), len(data.segments)
    n = 2 * n_items + 2 * n_seg  # x, h, then δ_s, hR_s
    target_total = sum(o.demand.priority * o.demand.target_rate_bps for o in data.options) / 1e6
    cost = np.zeros(n)
    lo: list[float] = []
    hi: list[float] = []
    triplets: list[tuple[int, int, float]] = []

    def add_row(entries: list[tuple[int, float]], lower: float, upper: float) -> None:
        row = len(lo)
        triplets.extend((row, col, val) for col, val in entries if val)
        lo.append(lower)
        hi.append(upper)

    upper_bounds = np.zeros(n)
    body: dict[int, list[tuple[int, float]]] = {s: [] for s in range(n_seg)}
    for j, (d, k, s) in enumerate(items):
        opts = data.options[d]
        fam = opts.candidates[k]
        xj, hj = j, n_items + j
        per_half = min(fam.throughput_per_half_bps, opts.demand.target_rate_bps / fam.hi_half)
        cost[xj] = -data.admission_weights[d] * (target_total + 1)
        cost[hj] = -data.priorities[d] * per_half / 1e6
        upper_bounds[xj], upper_bounds[hj] = 1, fam.hi_half
        add_row([(hj, 1.0), (xj, -float(fam.lo_half))], 0, np.inf)
        add_row([(hj, 1.0), (xj, -float(fam.hi_half))], -np.inf, 0)
        c = item_coefficients(data.segments[s], fam)
        delta_col, right_col = 2 * n_items + s, 2 * n_items + n_seg + s
        add_row([(delta_col, 1.0), (hj, -float(c.delta_h)), (xj, -float(c.delta_x))], 0, np.inf)
        add_row([(right_col, 1.0), (hj, -float(c.right_h)), (xj, -float(c.right_x))], 0, np.inf)
        body[s] += [(hj, float(c.body_h)), (xj, float(c.body_x))]
    for d in range(len(data.options)):
        add_row([(j, 1.0) for j, it in enumerate(items) if it[0] == d], 0, 1)
    for s, seg in enumerate(data.segments):
        maxima = [(2 * n_items + s, 1.0), (2 * n_items + n_seg + s, 1.0)]
        add_row(body[s] + maxima, -np.inf, seg.length * 1000.0)
    upper_bounds[2 * n_items :] = np.inf
    rows, cols, vals = zip(*triplets, strict=True)
    matrix = sparse.csr_array((vals, (rows, cols)), shape=(len(lo), n))
    integrality = np.r_[np.ones(2 * n_items), np.zeros(2 * n_seg)]
    started = time.perf_counter()
    res = optimize.milp(
        cost,
        constraints=optimize.LinearConstraint(matrix, lo, hi),
        integrality=integrality,
        bounds=optimize.Bounds(np.zeros(n), upper_bounds),
        options={"time_limit": time_limit_s, "disp": False},
    )
    elapsed = time.perf_counter() - started
    if res.x is None:
        return HighsResult(elapsed, str(res.message), 0.0, 0, float("nan"))
    throughput, served = 0.0, 0
    for j, (d, k, _) in enumerate(items):
        if res.x[j] > 0.5:
            served += 1
            throughput += data.options[d].candidates[k].at(round(res.x[n_items + j])).throughput_bps
    gap = float(getattr(res, "mip_gap", float("nan")))
    status = "optimal" if res.status == 0 else "time limit"
    return HighsResult(elapsed, status, throughput, served, gap)


# ---------------------------------------------------------------- report


def _row(count: int) -> dict[str, object]:
    problem = scenario(count)
    started = time.perf_counter()
    plan = solve(problem)
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
    args = parser.parse_args()
    rows = [_row(n) for n in args.sizes]
    keys = list(rows[0])
    print("| " + " | ".join(keys) + " |")
    print("|" + "---|" * len(keys))
    for row in rows:
        cells = [f"{v:.3g}" if isinstance(v, float) else str(v) for v in row.values()]
        print("| " + " | ".join(cells) + " |")


if __name__ == "__main__":
    main()
