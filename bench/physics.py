"""Timing of the physics layer, each figure against a peer measured in the same run.

Run from the repository root::

    .venv/bin/python bench/physics.py            # default repeats
    .venv/bin/python bench/physics.py --repeats 5

Every row reports the median of ``--repeats`` timings (time.perf_counter) of our code and of
its peer, and their ratio.  See bench/README.md for what each peer is and why.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np
from scipy import signal

from solver.model import Amplifier, AmplifierModel, Modulation
from solver.physics.emission import (
    LINEAR_FFT_SIZE,
    LINEAR_SAMPLES_PER_SYMBOL,
    EmissionKey,
    SpectrumProfile,
    build_profile,
    get_profile,
    warm_profiles,
)
from solver.physics.pulses import rrc_taps

ROLLOFF, SPAN = 0.2, 12
LIMIT_DB = 50.0
SCAN_STEP_RS = 1e-4


@dataclass(frozen=True)
class Row:
    """One line of the table: our median, the peer's median, in seconds."""

    what: str
    ours_s: float
    peer: str
    peer_s: float


def median_time(func: Callable[[], Any], repeats: int, inner: int = 1) -> float:
    """Median over ``repeats`` samples of the time of one call (each sample = ``inner`` calls)."""
    samples = []
    for _ in range(repeats):
        start = time.perf_counter()
        for _ in range(inner):
            func()
        samples.append((time.perf_counter() - start) / inner)
    return statistics.median(samples)


def bench_taps(repeats: int) -> Row:
    from commpy.filters import rrcosfilter

    sps = LINEAR_SAMPLES_PER_SYMBOL

    def theirs() -> None:
        _, h = rrcosfilter(SPAN * sps + 2, ROLLOFF, 1.0, float(sps))
        _ = h[1:] / np.sqrt(np.sum(h[1:] ** 2))

    ours = median_time(lambda: rrc_taps(ROLLOFF, SPAN, sps), repeats, inner=20)
    peer = median_time(theirs, repeats, inner=5)
    return Row(f"RRC taps α={ROLLOFF} span={SPAN} sps={sps}", ours, "commpy rrcosfilter", peer)


def bench_linear(repeats: int) -> Row:
    key = EmissionKey(ROLLOFF, SPAN)
    taps = rrc_taps(ROLLOFF, SPAN, LINEAR_SAMPLES_PER_SYMBOL)
    ours = median_time(lambda: build_profile(key), repeats)
    peer = median_time(
        lambda: signal.freqz(taps, worN=LINEAR_FFT_SIZE, whole=True), repeats, inner=5
    )
    return Row("cold linear profile (FFT + leakage table)", ours, "scipy freqz, same grid", peer)


def bench_amplifier(repeats: int, modulation: Modulation) -> Row:
    amplifier = Amplifier(AmplifierModel.RAPP, smoothness=2.0, output_backoff_db=4.0)
    key = EmissionKey(ROLLOFF, SPAN, amplifier=amplifier, modulation=modulation)
    linear = EmissionKey(ROLLOFF, SPAN)
    ours = median_time(lambda: build_profile(key), repeats)
    peer = median_time(lambda: build_profile(linear), repeats)
    return Row(f"cold amplifier profile Rapp p=2 OBO 4 dB {modulation}", ours, "cold linear", peer)


def bench_warm(repeats: int) -> Row:
    """Twelve cold amplifier profiles (QPSK and 16APSK × six roll-offs): warm_profiles' threads
    against one after another.  Each sample uses a back-off never used before, so nothing is
    cached."""
    fresh = iter(4.0 + 1e-6 * np.arange(1, 1000))

    def keys() -> list[EmissionKey]:
        amplifier = Amplifier(AmplifierModel.RAPP, smoothness=2.0, output_backoff_db=next(fresh))
        return [
            EmissionKey(r, SPAN, amplifier=amplifier, modulation=m)
            for m in (Modulation.QPSK, Modulation.APSK16)
            for r in (0.05, 0.1, 0.15, 0.2, 0.25, 0.35)
        ]

    samples = max(1, repeats // 3)
    ours = median_time(lambda: warm_profiles(keys()), samples)
    peer = median_time(lambda: [get_profile(k) for k in keys()], samples)
    return Row("12 cold amplifier profiles, warm_profiles", ours, "one after another", peer)


def brute_force_guard(profile: SpectrumProfile, limit_db: float) -> float:
    """Peer: evaluate the ratio on a fine grid of gaps, first gap after the last violation."""
    gaps = np.arange(0.0, profile.max_gap, SCAN_STEP_RS)
    bad = np.nonzero(profile.leakage_ratio_db(gaps) < limit_db)[0]
    return 0.0 if bad.size == 0 else float(gaps[bad[-1]] + SCAN_STEP_RS)


def bench_guard(repeats: int) -> list[Row]:
    profile = build_profile(EmissionKey(ROLLOFF, SPAN))
    fresh = iter(LIMIT_DB + 1e-7 * np.arange(10_000_000))
    inner = 2000
    uncached = median_time(lambda: profile.guard_needed(float(next(fresh))), repeats, inner)
    cached = median_time(lambda: profile.guard_needed(LIMIT_DB), repeats, inner)
    scan = median_time(lambda: brute_force_guard(profile, LIMIT_DB), max(3, repeats // 3))
    gap = profile.guard_needed(LIMIT_DB)
    agree = abs(gap - brute_force_guard(profile, LIMIT_DB))
    label = f"scan step {SCAN_STEP_RS:g} Rs (|Δ|={agree:.1e} Rs)"
    return [
        Row(f"guard lookup, new limit (search) → {gap:.4f} Rs", uncached, label, scan),
        Row("guard lookup, repeated limit (cache)", cached, label, scan),
    ]


def bench_catalogue(repeats: int) -> list[Row]:
    try:
        from solver.model import Coding
        from solver.physics.modcod import catalogue
    except ImportError as exc:
        print(f"MODCOD catalogue skipped: {exc}")
        return []
    start = time.perf_counter()
    catalogue(Coding(block_length_bits=16_200))
    first = time.perf_counter() - start
    lengths = iter(range(1_000, 1_000_000, 7))
    cold = median_time(lambda: catalogue(Coding(block_length_bits=next(lengths))), repeats)
    warm = median_time(lambda: catalogue(Coding(block_length_bits=16_200)), repeats, 1000)
    return [
        Row("MODCOD catalogue, first call in process", first, "warm (cached)", warm),
        Row("MODCOD catalogue, new Coding (tables warm)", cold, "warm (cached)", warm),
    ]


def format_seconds(seconds: float) -> str:
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6)):
        if seconds >= scale:
            return f"{seconds / scale:8.2f} {unit}"
    return f"{seconds / 1e-9:8.1f} ns"


def print_table(rows: list[Row]) -> None:
    print(f"{'measurement':<52} {'ours':>11}  {'peer':<44} {'peer time':>11} {'ours/peer':>10}")
    for row in rows:
        print(
            f"{row.what:<52} {format_seconds(row.ours_s):>11}  {row.peer:<44} "
            f"{format_seconds(row.peer_s):>11} {row.ours_s / row.peer_s:10.3g}"
        )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7, help="timed samples per figure")
    args = parser.parse_args(argv)
    repeats = max(1, args.repeats)
    rows = [bench_taps(repeats), bench_linear(repeats)]
    rows += [bench_amplifier(repeats, m) for m in (Modulation.QPSK, Modulation.APSK16)]
    rows.append(bench_warm(repeats))
    rows += bench_guard(repeats)
    rows += bench_catalogue(repeats)
    print_table(rows)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
