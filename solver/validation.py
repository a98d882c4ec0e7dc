"""Checks on a :class:`~solver.model.Problem` before any computation.

Each failure raises :class:`~solver.model.ProblemError` whose ``field`` is the path of the bad
input in the wire format (``"demands[2].target_rate_bps"``), so the service and the command line
can name it.  The service's schemas check most of this already; the library checks again so that
it is safe to call directly.
"""

from __future__ import annotations

import math

from solver.model import Block, Coding, Demand, EquipmentProfile, Problem, ProblemError, Transmitter
from solver.physics.modcodsets import MODCOD_SET_NAMES

__all__ = ["MAX_TIME_LIMIT_S", "MIN_S_PER_DEMAND", "validate_problem"]

MAX_BACKOFF_DB = 30.0
"""The deepest amplifier output back-off a request may state."""

MAX_TIME_LIMIT_S = 300.0
"""Longest solve a single request may ask for."""

LEAST_RASTER_HZ = 1.0
"""A raster finer than 1 Hz describes no equipment (and denormal rasters broke the arithmetic)."""

LEAST_RATE_BPS = 1.0
"""A minimum rate below 1 bit/s describes no link."""

MIN_S_PER_DEMAND = 0.020
"""The least time limit a request may set per demand: below it the final verification and
bound alone could outlast the limit (7–9 ms per carrier measured on two cores, doubled)."""


def _require(ok: bool, field_name: str, message: str) -> None:
    if not ok:
        raise ProblemError(field_name, message)


def _finite(value: float, field_name: str) -> None:
    _require(math.isfinite(value), field_name, f"{value!r} must be a finite number")


def _check_block(block: Block) -> None:
    for name in ("start_hz", "stop_hz", "raster_hz"):
        _finite(getattr(block, name), f"block.{name}")
    _require(block.start_hz >= 0, "block.start_hz", f"{block.start_hz} must not be negative")
    _require(
        block.stop_hz > block.start_hz,
        "block.stop_hz",
        f"{block.stop_hz} must be above start_hz {block.start_hz}",
    )
    _require(
        block.raster_hz >= LEAST_RASTER_HZ,
        "block.raster_hz",
        f"{block.raster_hz} must be at least {LEAST_RASTER_HZ:g} Hz",
    )
    _require(
        block.width_hz / block.raster_hz <= 10_000_000,
        "block.raster_hz",
        f"{block.raster_hz} Hz is too fine for a {block.width_hz:,.0f} Hz block "
        "(over 10 million steps)",
    )
    if block.edge_leakage_limit_db is not None:
        _finite(block.edge_leakage_limit_db, "block.edge_leakage_limit_db")
    previous_stop = -math.inf
    for i, x in sorted(enumerate(block.exclusions), key=lambda ix: ix[1].start_hz):
        where = f"block.exclusions[{i}]"
        _require(
            x.stop_hz > x.start_hz,
            f"{where}.stop_hz",
            f"{x.stop_hz} must be above start_hz {x.start_hz}",
        )
        _require(
            block.start_hz <= x.start_hz and x.stop_hz <= block.stop_hz,
            where,
            f"exclusion {x.start_hz:,.0f}–{x.stop_hz:,.0f} Hz must lie inside the block",
        )
        _require(x.start_hz >= previous_stop, f"{where}.start_hz", "exclusions must not overlap")
        previous_stop = x.stop_hz


def _check_transmitter(tx: Transmitter | EquipmentProfile, where: str = "transmitter") -> None:
    _require(
        2 <= tx.filter_span_symbols <= 256,
        f"{where}.filter_span_symbols",
        f"{tx.filter_span_symbols} must be between 2 and 256",
    )
    _require(bool(tx.rolloffs), f"{where}.rolloffs", "at least one roll-off is needed")
    for i, a in enumerate(tx.rolloffs):
        _require(0.0 < a <= 1.0, f"{where}.rolloffs[{i}]", f"{a} must lie in (0, 1]")
    if tx.amplifier is not None:
        _require(
            tx.amplifier.smoothness >= 0.1,
            f"{where}.amplifier.smoothness",
            f"{tx.amplifier.smoothness} must be at least 0.1 (Rapp p; 1 to 10 is usual)",
        )
        _check_backoff(tx.amplifier.output_backoff_db, f"{where}.amplifier.output_backoff_db")


def _check_backoff(backoff_db: float, field_name: str) -> None:
    _require(
        math.isfinite(backoff_db) and 0.0 < backoff_db <= MAX_BACKOFF_DB,
        field_name,
        f"{backoff_db} must lie in (0, {MAX_BACKOFF_DB:g}] dB",
    )


def _check_profile(i: int, p: EquipmentProfile) -> None:
    where = f"profiles[{i}]"
    _require(bool(p.name.strip()), f"{where}.name", "must not be empty")
    _check_transmitter(p, where)
    if not p.modcods:
        _require(
            p.modcod_set in MODCOD_SET_NAMES,
            f"{where}.modcod_set",
            f"{p.modcod_set!r} is not one of {', '.join(MODCOD_SET_NAMES)}",
        )
    for k, row in enumerate(p.modcods):
        if row.required_esn0_db is not None:
            _finite(row.required_esn0_db, f"{where}.modcods[{k}].required_esn0_db")
        if row.spectral_efficiency is not None:
            _require(
                math.isfinite(row.spectral_efficiency) and row.spectral_efficiency > 0,
                f"{where}.modcods[{k}].spectral_efficiency",
                f"{row.spectral_efficiency} must be a finite number > 0 (bit per symbol)",
            )
    _require(p.symbol_rate_step_baud >= 0, f"{where}.symbol_rate_step_baud", "must not be negative")
    _require(
        0 <= p.symbol_rate_min_baud < p.symbol_rate_max_baud,
        f"{where}.symbol_rate_max_baud",
        f"{p.symbol_rate_max_baud} must be above symbol_rate_min_baud {p.symbol_rate_min_baud}",
    )
    for name in ("tx_evm_pct", "rx_evm_pct"):
        value = getattr(p, name)
        _require(0 <= value < 100, f"{where}.{name}", f"{value} must lie in [0, 100) % rms")
    _finite(p.implementation_loss_db, f"{where}.implementation_loss_db")
    for k, b in enumerate(p.output_backoffs_db):
        _check_backoff(b, f"{where}.output_backoffs_db[{k}]")
    if p.output_backoffs_db or p.reference_backoff_db is not None:
        _require(
            p.amplifier is not None,
            f"{where}.amplifier",
            "back-offs need an amplifier to back off",
        )
    if p.reference_backoff_db is not None:
        _check_backoff(p.reference_backoff_db, f"{where}.reference_backoff_db")


def _check_profiles(problem: Problem) -> None:
    names: set[str] = set()
    for i, p in enumerate(problem.profiles):
        _check_profile(i, p)
        _require(p.name not in names, f"profiles[{i}].name", f"{p.name!r} is used twice")
        names.add(p.name)
    known = ", ".join(sorted(names)) or "none"
    for i, d in enumerate(problem.demands):
        _require(
            not d.profile or d.profile in names,
            f"demands[{i}].profile",
            f"{d.profile!r} is not one of the request's profiles ({known})",
        )


def _check_coding(c: Coding) -> None:
    _require(
        c.block_length_bits >= 64,
        "coding.block_length_bits",
        f"{c.block_length_bits} must be at least 64",
    )
    _require(
        0 < c.target_block_error_rate < 1,
        "coding.target_block_error_rate",
        f"{c.target_block_error_rate} must lie in (0, 1)",
    )
    _require(
        0 < c.target_bit_error_rate < 0.5,
        "coding.target_bit_error_rate",
        f"{c.target_bit_error_rate} must lie in (0, 0.5)",
    )
    _require(
        0 <= c.implementation_loss_db <= 20,
        "coding.implementation_loss_db",
        f"{c.implementation_loss_db} must lie between 0 and 20 dB",
    )
    _require(
        0 <= c.framing_overhead < 1,
        "coding.framing_overhead",
        f"{c.framing_overhead} must lie in [0, 1)",
    )


def _check_demand(i: int, d: Demand, block: Block) -> None:
    where = f"demands[{i}]"
    _require(bool(d.id.strip()), f"{where}.id", "must not be empty")
    _require(
        d.min_rate_bps >= LEAST_RATE_BPS and math.isfinite(d.min_rate_bps),
        f"{where}.min_rate_bps",
        f"{d.min_rate_bps} must be at least {LEAST_RATE_BPS:g} bit/s",
    )
    _require(
        math.isfinite(d.target_rate_bps) and d.target_rate_bps >= d.min_rate_bps,
        f"{where}.target_rate_bps",
        f"{d.target_rate_bps} must not be below min_rate_bps {d.min_rate_bps}",
    )
    _require(d.priority >= 1, f"{where}.priority", f"{d.priority} must be at least 1")
    _require(
        (d.cn0_dbhz is None) != (d.esn0_db is None),
        f"{where}.cn0_dbhz",
        "give exactly one of cn0_dbhz (power-limited link) and esn0_db (fixed Es/N0)",
    )
    for name in ("cn0_dbhz", "esn0_db"):
        value = getattr(d, name)
        if value is not None:
            _finite(value, f"{where}.{name}")
    _require(
        0 <= d.margin_db <= 40, f"{where}.margin_db", f"{d.margin_db} must lie between 0 and 40 dB"
    )
    _finite(d.relative_level_db, f"{where}.relative_level_db")
    if d.pinned_center_hz is not None:
        _require(
            block.start_hz < d.pinned_center_hz < block.stop_hz,
            f"{where}.pinned_center_hz",
            f"{d.pinned_center_hz:,.0f} Hz lies outside the block",
        )
    if d.current is not None:
        _require(
            d.current.symbol_rate_baud > 0, f"{where}.current.symbol_rate_baud", "must be positive"
        )
        _require(
            0 < d.current.rolloff <= 1,
            f"{where}.current.rolloff",
            f"{d.current.rolloff} must lie in (0, 1]",
        )


def validate_problem(problem: Problem) -> None:
    """Raise :class:`ProblemError` naming the first invalid field of ``problem``.

    Examples
    --------
    >>> from solver.model import Block, Problem
    >>> validate_problem(Problem(block=Block(start_hz=2e9, stop_hz=1e9), demands=()))
    Traceback (most recent call last):
    ...
    solver.model.ProblemError: block.stop_hz: 1000000000.0 must be above start_hz 2000000000.0
    """
    _check_block(problem.block)
    _finite(problem.leakage_limit_db, "leakage_limit_db")
    _require(
        0 < problem.leakage_limit_db <= 100,
        "leakage_limit_db",
        f"{problem.leakage_limit_db} must lie in (0, 100] dB",
    )
    _check_transmitter(problem.transmitter)
    _check_coding(problem.coding)
    _check_profiles(problem)
    _require(
        0 < problem.time_limit_s <= MAX_TIME_LIMIT_S,
        "time_limit_s",
        f"{problem.time_limit_s} must lie in (0, {MAX_TIME_LIMIT_S:.0f}] s",
    )
    least = MIN_S_PER_DEMAND * len(problem.demands)
    _require(
        problem.time_limit_s >= least,
        "time_limit_s",
        f"{problem.time_limit_s} s is too short for {len(problem.demands)} demands: allow at least "
        f"{math.ceil(least)} s ({MIN_S_PER_DEMAND * 1e3:.0f} ms per demand)",
    )
    _require(problem.num_workers >= 1, "num_workers", f"{problem.num_workers} must be at least 1")
    _require(
        problem.retune_penalty >= 0,
        "retune_penalty",
        f"{problem.retune_penalty} must not be negative",
    )
    seen: set[str] = set()
    for i, d in enumerate(problem.demands):
        _check_demand(i, d, problem.block)
        _require(d.id not in seen, f"demands[{i}].id", f"{d.id!r} is used by another demand")
        seen.add(d.id)
