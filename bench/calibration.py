"""Calibration sweep: the optimiser against the rule-of-thumb plan and the Shannon–Nyquist bound
on small blocks, over several invented scenarios (seeds), target ambitions and threshold
assumptions — every run is reported, not a chosen one.

Run by hand (not part of the test suite)::

    .venv/bin/python bench/calibration.py                       # 10 demands in 19 MHz
    .venv/bin/python bench/calibration.py --demands 12 --width-per-demand-hz 1.6e6

Settings are those of ``bench/packing.py`` (span 12, roll-offs 0.05–0.35, leakage limit 30 dB,
edge limit 35 dB, normal-approximation thresholds for n = 16 200 bits at BLER 1e-5 plus the
implementation loss given, 2 % framing); the efficiency is throughput over the Shannon–Nyquist
bound with each demand's margin taken off its SNR and its rate capped at its target.
"""

from __future__ import annotations

import argparse
import statistics
import time

from packing import scenario

from solver import solve
from solver.rules import rule_of_thumb_plan


def _run(
    demands: int, width: float, loss: float, factor: tuple[float, float], seed: int
) -> dict[str, float]:
    problem = scenario(
        demands,
        seed=seed,
        width_per_demand_hz=width,
        implementation_loss_db=loss,
        target_factor=factor,
    )
    started = time.perf_counter()
    plan = solve(problem)
    wall = time.perf_counter() - started
    hand = rule_of_thumb_plan(problem)
    ours, theirs = plan.summary, hand.summary
    return {
        "wall_s": wall,
        "gap": plan.stats.optimality_gap,
        "ratio": ours.total_throughput_bps / max(theirs.total_throughput_bps, 1.0),
        "eff": ours.efficiency_vs_target_capped_bound,
        "hand_eff": theirs.efficiency_vs_target_capped_bound,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--demands", type=int, default=10)
    parser.add_argument("--width-per-demand-hz", type=float, default=1.9e6)
    parser.add_argument("--seeds", type=int, nargs="+", default=list(range(1, 9)))
    parser.add_argument("--losses-db", type=float, nargs="+", default=[1.0, 2.0])
    parser.add_argument("--factors", type=float, nargs="+", default=[2, 4, 4, 8, 6, 12])
    args = parser.parse_args()
    pairs = list(zip(args.factors[::2], args.factors[1::2], strict=True))
    print(
        "| loss dB | targets × min | runs | ratio median (min–max) | ≥ 1.5× | "
        "efficiency median (min–max) | ≥ 0.66 | both | hand efficiency median | "
        "largest gap | wall s median |"
    )
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for loss in args.losses_db:
        for factor in pairs:
            runs = [
                _run(args.demands, args.width_per_demand_hz, loss, factor, s) for s in args.seeds
            ]
            ratio = [r["ratio"] for r in runs]
            eff = [r["eff"] for r in runs]
            both = sum(r["ratio"] >= 1.5 and r["eff"] >= 0.66 for r in runs)
            print(
                f"| {loss:g} | {factor[0]:g}–{factor[1]:g} | {len(runs)} "
                f"| {statistics.median(ratio):.2f} ({min(ratio):.2f}–{max(ratio):.2f}) "
                f"| {sum(x >= 1.5 for x in ratio)} "
                f"| {statistics.median(eff):.3f} ({min(eff):.3f}–{max(eff):.3f}) "
                f"| {sum(x >= 0.66 for x in eff)} | {both} "
                f"| {statistics.median(r['hand_eff'] for r in runs):.3f} "
                f"| {max(r['gap'] for r in runs):.1e} "
                f"| {statistics.median(r['wall_s'] for r in runs):.2f} |",
                flush=True,
            )


if __name__ == "__main__":
    main()
