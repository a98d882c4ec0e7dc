"""Packing benchmark: the optimiser against the rule-of-thumb plan, the Shannon–Nyquist bound,
a greedy admission peer and the same segment model solved by HiGHS (scipy.optimize.milp).

Run by hand (not part of the test suite)::

    .venv/bin/python bench/packing.py                 # 12, 50 and 200 demands
    .venv/bin/python bench/packing.py --sizes 10 --width-per-demand-hz 1.9e6 \
        --implementation-loss-db 2.0          # the calibration block: 10 demands in 19 MHz
    .venv/bin/python bench/packing.py --scenario all  # the named scenarios (bench/scenarios.py)
    .venv/bin/python bench/packing.py --scenario all --before /tmp/bw-before
                                              # the same table against an older checkout

The size rows: invented blocks shared by power-limited links (given C/N0) and fixed links
(given Es/N0), ambitious targets (2–4 × the minimum) so that spectrum is the bottleneck, and
one exclusion.  The named scenarios (over-subscribed, amplifier-limited, fragmented, base) and
their seeds are described in ``bench/scenarios.py``; their table compares admission with the
greedy peer of ``bench/audit.py``, throughput with the hand plan and the bound, and measures
idle spectrum with the verifier alone.  Settings: filter span 12 symbols, no window, roll-offs
0.05–0.35, leakage limit 30 dB, edge limit 35 dB, coded thresholds from the finite-length normal
approximation (n = 16 200 bits, BLER 1e-5) plus 1 dB implementation loss, 2 % framing overhead,
2 CP-SAT workers, fixed seed.

The scenario table reads the solver through its public names only (``from solver import …``,
plus the candidates' configuration check and the catalogue for the greedy peer), so it also
runs against older checkouts; the HiGHS columns of the size rows read solver internals and can
be switched off with ``--no-highs``.
"""

from __future__ import annotations

import argparse
import hashlib
import math
import os
import subprocess
import sys
import threading
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from audit import greedy_admission, idle_gaps, served_by_priority, served_weight
from scenarios import SCENARIOS, WIDTH_PER_DEMAND_HZ, expand, min_rate_need_hz, scenario
from scipy import optimize, sparse

import solver
from solver import Objective, Plan, Problem, ProgressEvent, SolveStatus, rule_of_thumb_plan, solve

if TYPE_CHECKING:
    from solver.packing import PackingInput

__all__ = ["WIDTH_PER_DEMAND_HZ", "scenario"]

WARM_S_PER_DEMAND = 0.03
"""Time limit per demand of the warm-up solve (above the least a request may ask for)."""


# ---------------------------------------------------------------- HiGHS peer


@dataclass
class HighsResult:
    time_s: float
    status: str
    throughput_bps: float
    served: int
    gap: float


def packing_input(problem: Problem) -> PackingInput:
    """The same PackingInput the planner builds for a fresh plan (no pins, no verification).

    Reads solver internals (``solver.planner.fix_pinned``, ``free_segments``,
    ``protection_levels``, ``solver.packing``): imported here, so that when they move only the
    HiGHS columns are lost (``--no-highs`` skips them).
    """
    from solver.candidates import build_candidates
    from solver.packing import PackingInput, admission_weights
    from solver.planner import fix_pinned, free_segments, protection_levels

    options = {d.id: build_candidates(problem, d) for d in problem.demands}
    pinned, _ = fix_pinned(problem, options)
    free = [options[d.id] for d in problem.demands]
    return PackingInput(
        options=free,
        segments=free_segments(problem, pinned),
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
    from solver.packing import item_coefficients

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


# ---------------------------------------------------------------- size rows


def _highs_columns(problem: Problem) -> dict[str, object]:
    """HiGHS on the same segment model; 'n/a' and the reason when solver internals moved."""
    try:
        data = packing_input(problem)
        highs = solve_with_highs(data, problem.time_limit_s)
    except (ImportError, AttributeError, TypeError) as exc:
        return {"highs_status": f"n/a ({type(exc).__name__}: {exc})"}
    return {
        "highs_s": highs.time_s,
        "highs_status": highs.status,
        "highs_gap": highs.gap,
        "highs_thr_Mbps": highs.throughput_bps / 1e6,
    }


def _row(
    count: int,
    width_per_demand_hz: float,
    loss_db: float,
    target_factor: tuple[float, float],
    with_highs: bool,
    seed: int = 7,
) -> dict[str, object]:
    problem = scenario(
        count,
        seed=seed,
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
    s = plan.summary
    row: dict[str, object] = {
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
        "eff_vs_capped_bound": _figure(
            s, "efficiency_vs_target_capped_bound", "efficiency_vs_bound"
        ),
        "hand_eff_vs_capped_bound": _figure(
            hand.summary, "efficiency_vs_target_capped_bound", "efficiency_vs_bound"
        ),
        "minbw_used_MHz": lean.summary.used_bandwidth_hz / 1e6,
        "minbw_served": len(lean.carriers),
        "hand_min_used_MHz": hand_min.summary.used_bandwidth_hz / 1e6,
        "hand_min_served": len(hand_min.carriers),
    }
    if with_highs:
        row.update(_highs_columns(problem))
    row["rounds"] = plan.stats.verification_rounds
    return row


# ---------------------------------------------------------------- scenario rows


@dataclass(frozen=True)
class _Timed:
    """A solve with the times the progress callback saw."""

    plan: Plan
    wall_s: float
    first_event_s: float  # first improving packing solution (before verification); NaN: none


def _timed_solve(problem: Problem, *, stop_at_first: bool = False) -> _Timed:
    """``solve`` with the wall time and the time of its first progress event (from the call).

    With ``stop_at_first`` the cancel event is set on that first event, so ``solve`` returns
    the first solution after verification (and repair, which a cancelled solve does by leaving
    out the carriers to blame): its wall time is the time to a first verified plan.
    """
    cancel = threading.Event()
    first: list[float] = []
    started = time.perf_counter()

    def note(event: ProgressEvent) -> None:
        # Packing solutions only: stage reports ("building spectra and candidates", the
        # verified plans) are not solutions; older solvers' events have no stage.
        if getattr(event, "stage", "searching") != "searching":
            return
        if not first:
            first.append(time.perf_counter() - started)
            if stop_at_first:
                cancel.set()

    plan = solve(problem, progress=note, cancel=cancel)
    wall = time.perf_counter() - started
    return _Timed(plan, wall, first[0] if first else math.nan)


def _proof(timed: _Timed) -> str:
    stats = timed.plan.stats
    if timed.plan.status is SolveStatus.OPTIMAL:
        return f"{timed.wall_s:.1f} s"
    if timed.plan.status is SolveStatus.INFEASIBLE:
        return "no plan"
    if math.isfinite(stats.optimality_gap):
        return f"not proven (gap {stats.optimality_gap:.2%})"
    return "not proven (no bound)"


@dataclass(frozen=True)
class _Idle:
    percent: float  # closable, % of the block, over the idle gaps
    beyond_guard_percent: float  # the part beyond the configurations' own guards
    gaps: int
    short: int  # demands below target next to an idle gap
    verify_calls: int

    def cell(self) -> str:
        return f"{self.percent:.2f} ({self.gaps}; {self.beyond_guard_percent:.2f} beyond guards)"


def _idle(problem: Problem, plan: Plan) -> _Idle:
    gaps = idle_gaps(problem, plan)
    idle = [g for g in gaps if g.idle]
    width = problem.block.width_hz
    return _Idle(
        100 * sum(g.closable_hz for g in idle) / width,
        100 * sum(g.beyond_guard_hz for g in idle) / width,
        len(idle),
        len({d for g in idle for d in g.below_target}),
        sum(g.verify_calls for g in gaps),
    )


CAPPED_EFFICIENCY = "efficiency_vs_target_capped_bound"


def _figure(summary: object, name: str, earlier: str) -> float:
    """A summary figure by its name, or by its earlier name when ``--before`` runs a checkout
    from before the rename (NaN when it has neither)."""
    for attribute in (name, earlier):
        if attribute and hasattr(summary, attribute):
            return float(getattr(summary, attribute))
    return math.nan


def _scenario_row(name: str, seed: int, time_limit_s: float | None) -> dict[str, object]:
    started = time.perf_counter()
    problem = SCENARIOS[name].build(seed)
    if time_limit_s is not None:
        problem = replace(problem, time_limit_s=time_limit_s)
    need = min_rate_need_hz(problem) / problem.block.usable_width_hz  # also builds the profiles
    warm_s = max(0.5, WARM_S_PER_DEMAND * len(problem.demands))
    solve(replace(problem, time_limit_s=warm_s))  # warm-up: both timed solves see the same caches
    setup = time.perf_counter() - started
    full = _timed_solve(problem)
    early = _timed_solve(problem, stop_at_first=True)
    hand = rule_of_thumb_plan(problem)
    greedy = greedy_admission(problem)
    ours = {c.demand_id for c in full.plan.carriers}
    peer = {c.demand_id for c in greedy.carriers}
    total = served_weight(problem, (d.id for d in problem.demands))
    idle, hand_idle = _idle(problem, full.plan), _idle(problem, hand)
    s, h = full.plan.summary, hand.summary
    thr = s.total_throughput_bps
    return {
        "scenario": name,
        "seed": seed,
        "problem": hashlib.sha1(repr(problem).encode()).hexdigest()[:8],
        "demands": len(problem.demands),
        "block_MHz": problem.block.width_hz / 1e6,
        "need_x": need,
        "limit_s": problem.time_limit_s,
        "status": full.plan.status.value,
        "proof": _proof(full),
        "first_sol_s": full.first_event_s,
        "first_verified_s": early.wall_s,
        "first_thr_pct": 100 * early.plan.summary.total_throughput_bps / max(thr, 1.0),
        "weight_pct": 100 * served_weight(problem, ours) / total,
        "greedy_weight_pct": 100 * served_weight(problem, peer) / total,
        "weight_vs_greedy": served_weight(problem, ours) / max(served_weight(problem, peer), 1.0),
        "served_by_prio": served_by_priority(problem, ours),
        "greedy_by_prio": served_by_priority(problem, peer),
        "thr_Mbps": thr / 1e6,
        "hand_thr_Mbps": h.total_throughput_bps / 1e6,
        "thr_vs_hand": thr / max(h.total_throughput_bps, 1.0),
        "capped_bound_Mbps": _figure(s, "target_capped_bound_bps", "shannon_bound_bps") / 1e6,
        "capacity_Mbps": _figure(s, "capacity_bound_bps", "") / 1e6,
        "eff_vs_capped_bound": _figure(
            s, "efficiency_vs_target_capped_bound", "efficiency_vs_bound"
        ),
        "hand_eff": _figure(h, CAPPED_EFFICIENCY, "efficiency_vs_bound"),
        "idle_pct": idle.cell(),
        "hand_idle_pct": hand_idle.cell(),
        "short_by_idle": idle.short,
        "free_pct": 100 * s.free_bandwidth_hz / problem.block.width_hz,
        "rounds": full.plan.stats.verification_rounds,
        "audit_calls": idle.verify_calls + hand_idle.verify_calls + greedy.verify_calls,
        "setup_s": setup,
        "run_s": time.perf_counter() - started,
    }


def _backoff_row(seed: int, time_limit_s: float | None) -> dict[str, object]:
    """The back-off scenario at ``seed``: each carrier choosing its back-off from
    :data:`BACKOFFS_DB`, against every single back-off applied to all carriers, same demands,
    same block, same run."""
    from scenarios import BACKOFFS_DB, backoff_scenario, with_backoffs

    choice = backoff_scenario(seed)
    if time_limit_s is not None:
        choice = replace(choice, time_limit_s=time_limit_s)
    runs = {"choice": choice} | {f"{b:g}dB": with_backoffs(choice, (b,)) for b in BACKOFFS_DB}
    row: dict[str, object] = {"seed": seed, "block_MHz": choice.block.width_hz / 1e6}
    for problem in runs.values():  # warm every spectrum first: the timed runs are alike
        solve(replace(problem, time_limit_s=max(0.5, WARM_S_PER_DEMAND * len(problem.demands))))
    results = {}
    for name, problem in runs.items():
        started = time.perf_counter()
        plan = solve(problem)
        wall = time.perf_counter() - started
        served = served_weight(problem, (c.demand_id for c in plan.carriers))
        results[name] = (plan.summary.total_throughput_bps, served, wall)
        row[f"{name}_Mbps"] = plan.summary.total_throughput_bps / 1e6
        row[f"{name}_weight"] = served / 1e6
    single = [k for k in results if k != "choice"]
    best = max(single, key=lambda k: results[k][0])
    heaviest = max(single, key=lambda k: (results[k][1], results[k][0]))
    row["best_single"] = best
    row["choice_vs_best"] = results["choice"][0] / max(results[best][0], 1.0)
    row["weight_vs_heaviest"] = results["choice"][1] / max(results[heaviest][1], 1.0)
    row["choice_s"] = results["choice"][2]
    row["best_single_s"] = results[best][2]
    counts: dict[str, int] = {}
    plan = solve(choice)
    for c in plan.carriers:
        key = f"{c.config.output_backoff_db:g}"
        counts[key] = counts.get(key, 0) + 1
    row["backoffs_used"] = " ".join(f"{k}:{v}" for k, v in sorted(counts.items()))
    return row


BACKOFF_LEGEND = """\
choice: every carrier picks its output back-off from {2, 4, 6, 8} dB (Rapp p = 2, in-band
  distortion counted as EVM, links stated at 6 dB); N dB: every carrier at N dB, the same
  demands and block.  _Mbps: plan throughput; _weight: served priority x minimum rate (Mb/s).
best_single: the single back-off with the most throughput; choice_vs_best: throughput ratio.
weight_vs_heaviest: served weight of the choice against the single back-off serving most.
choice_s / best_single_s: wall time of the two solves (each with the scenario's time limit).
backoffs_used: carriers per back-off in a further solve of the choice problem.
"""


SCENARIO_LEGEND = """\
problem: first 8 hex digits of the SHA-1 of the problem's repr (same digest, same problem).
need_x: minimum-rate need / usable width (narrowest footprint = allocated width + guard, summed,
  with the guards of the solver measured).
proof: wall time of solve() when the plan is optimal; else the gap at the time limit.
first_sol_s: solve() call to its first progress event = first improving packing solution,
  NOT yet verified.  first_verified_s: wall time of a second solve() cancelled at that first
  event, i.e. the first solution after placement, verification and (cancelled) repair;
  first_thr_pct: its throughput as % of the full plan's.  Emission profiles and caches are
  built before either solve (setup_s: footprint pass + a 0.5 s warm-up solve).
weight_pct: sum(priority x min rate) over served demands, % of all demands; greedy: the
  verifier-checked first-fit peer (bench/audit.py); weight_vs_greedy: ours / greedy.
served_by_prio: served/total per priority, highest first.
idle_pct: gaps the verifier lets close by sliding carriers down (bench/audit.py idle_gaps),
  % of the block, only gaps closable by more than one raster step; (n) such gaps; "beyond
  guards": the part of it outside the guards the carriers' own configurations ask for (the
  rest is guard the verifier does not need).  hand_idle_pct: the same for the hand plan.
short_by_idle: demands below their target next to an idle gap.  free_pct: the plan summary's
  free spectrum, % of the block.  audit_calls: verify_plan calls of the idle audit and greedy.
"""


# ---------------------------------------------------------------- output


def _table(rows: list[dict[str, object]]) -> None:
    keys = list(dict.fromkeys(k for row in rows for k in row))
    print("| " + " | ".join(keys) + " |")
    print("|" + "---|" * len(keys))
    for row in rows:
        cells = [
            f"{v:.3g}" if isinstance(v, float) else str(v) for v in (row.get(k, "") for k in keys)
        ]
        print("| " + " | ".join(cells) + " |")


def _solver_origin() -> str:
    """Where ``solver`` was imported from, with its commit and whether solver/ is modified."""
    root = Path(solver.__file__).resolve().parent.parent
    try:
        commit = subprocess.run(
            ["git", "-C", str(root), "rev-parse", "--short", "HEAD"],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
        dirty = subprocess.run(
            ["git", "-C", str(root), "status", "--porcelain", "--", "solver"],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return f"solver from {root} (no git)"
    return f"solver from {root} at {commit}" + (" + uncommitted changes" if dirty else "")


def _rerun_with(before: str, argv: list[str]) -> int:
    """Run this script again with ``before`` first on PYTHONPATH (its solver, this bench)."""
    rest, skip = [], False
    for arg in argv:
        if skip:
            skip = False
        elif arg == "--before":
            skip = True
        elif not arg.startswith("--before="):
            rest.append(arg)
    path = [str(Path(before).resolve()), os.environ.get("PYTHONPATH", "")]
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(p for p in path if p))
    return subprocess.run([sys.executable, __file__, *rest], env=env, check=False).returncode


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument(
        "--sizes", type=int, nargs="+", help="size rows (default 12 50 200 without --scenario)"
    )
    parser.add_argument(
        "--scenario",
        nargs="+",
        metavar="NAME",
        help="named scenarios: " + ", ".join([*SCENARIOS, "amplifier", "all"]),
    )
    parser.add_argument(
        "--seed", type=int, help="override every named scenario's own seed (size rows: 7)"
    )
    parser.add_argument("--time-limit-s", type=float, help="override the scenarios' time limit")
    parser.add_argument(
        "--repeats", type=int, default=1, help="rows per named scenario (each a fresh run)"
    )
    parser.add_argument("--no-highs", action="store_true", help="skip the HiGHS columns")
    parser.add_argument(
        "--backoff-seeds",
        type=int,
        nargs="+",
        default=[],
        help="back-off table: per-carrier choice of {2, 4, 6, 8} dB against each single back-off",
    )
    parser.add_argument(
        "--before", metavar="PATH", help="run against the solver of another checkout"
    )
    parser.add_argument(
        "--width-per-demand-hz",
        type=float,
        default=WIDTH_PER_DEMAND_HZ,
        help="size rows: block width / demands",
    )
    parser.add_argument(
        "--implementation-loss-db",
        type=float,
        default=1.0,
        help="size rows: added to every coded threshold",
    )
    parser.add_argument(
        "--target-factor",
        type=float,
        nargs=2,
        default=(2.0, 4.0),
        metavar=("LOW", "HIGH"),
        help="size rows: targets are the minimum rate times a factor drawn from [LOW, HIGH]",
    )
    return parser


def main() -> int:
    parser = _parser()
    args = parser.parse_args()
    if args.before:
        return _rerun_with(args.before, sys.argv[1:])
    try:
        names = expand(args.scenario) if args.scenario else []
    except ValueError as exc:
        parser.error(str(exc))
    sizes = args.sizes if args.sizes or names or args.backoff_seeds else [12, 50, 200]
    print(f"<!-- {_solver_origin()}; load average {os.getloadavg()[0]:.2f} at start -->")
    if sizes:
        factor = (args.target_factor[0], args.target_factor[1])
        loss = args.implementation_loss_db
        width = args.width_per_demand_hz
        seed = 7 if args.seed is None else args.seed
        _table([_row(n, width, loss, factor, not args.no_highs, seed) for n in sizes])
    if args.backoff_seeds:
        _table([_backoff_row(seed, args.time_limit_s) for seed in args.backoff_seeds])
        print()
        print(BACKOFF_LEGEND)
    if names:
        rows = []
        for name in names:
            seed = SCENARIOS[name].seed if args.seed is None else args.seed
            for run in range(1, args.repeats + 1):
                row = _scenario_row(name, seed, args.time_limit_s)
                rows.append({"scenario": name, "run": run, **row})
        _table(rows)
        print()
        print(SCENARIO_LEGEND)
    print(f"<!-- load average {os.getloadavg()[0]:.2f} at end -->")
    return 0


if __name__ == "__main__":
    sys.exit(main())
