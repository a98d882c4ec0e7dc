"""What the ``bandwright`` command reports: exit codes, errors and progress on stderr, the plan
table and the retune line (returned as text), and the files it writes.

Kept apart from :mod:`service.cli` (commands and arguments) and :mod:`service.cli_remote`
(the service over HTTP) so that each reads at once.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass, fields
from enum import IntEnum
from pathlib import Path
from typing import Literal

from service.convert import finite_or_none
from service.csvout import carriers_csv
from service.errors import FieldIssue
from service.schemas import PlanOut, SpectrumGainOut
from solver import ProgressEvent, SolveStatus

__all__ = [
    "EXIT_MEANINGS",
    "CliError",
    "ExitCode",
    "ImageFormat",
    "Outputs",
    "Pictures",
    "ProgressLine",
    "err",
    "exit_code_for",
    "invalid",
    "retune_line",
    "summary_table",
    "write_outputs",
]

MHZ = 1e6
KHZ = 1e3
PERCENT = 100.0
RETUNED_MARK = "*"
"""Marks a retuned carrier (the wire's ``CarrierOut.retuned``) in the table's first column."""

PROGRESS_AFTER_S = 1.0

ImageFormat = Literal["svg", "png"]
Pictures = dict[ImageFormat, bytes]
"""Spectrum pictures by format."""


class ExitCode(IntEnum):
    """Process exit codes."""

    SERVED = 0
    FAILED = 1
    INVALID = 2
    UNSERVED = 3
    INFEASIBLE = 4
    UNREACHABLE = 5
    OUTDATED = 6


EXIT_MEANINGS: dict[ExitCode, str] = {
    ExitCode.SERVED: "every demand served",
    ExitCode.UNSERVED: "some unserved",
    ExitCode.INFEASIBLE: "infeasible",
    ExitCode.INVALID: "invalid input (the field and the problem on stderr)",
    ExitCode.UNREACHABLE: "server (or database) unreachable",
    ExitCode.OUTDATED: "the database's schema is behind this version (run `bandwright db upgrade`)",
    ExitCode.FAILED: "any other failure",
}
"""What each exit code means, for ``--help`` (the README's "Exit codes" paragraph agrees)."""


class CliError(Exception):
    """Ends the command with ``code`` after writing ``message`` to stderr."""

    def __init__(self, code: ExitCode, message: str) -> None:
        super().__init__(message)
        self.code = code


def err(text: str) -> None:
    """Write a line to stderr at once."""
    sys.stderr.write(text + "\n")
    sys.stderr.flush()


def invalid(issues: Sequence[FieldIssue]) -> CliError:
    """Exit 2, one ``invalid input: FIELD: MESSAGE`` line per issue."""
    lines = [f"invalid input: {i.field}: {i.message}" for i in issues]
    return CliError(ExitCode.INVALID, "\n".join(lines))


class ProgressLine:
    """Writes to stderr what the solve is computing, at once whenever that changes and at
    most once a second otherwise; with each verified plan, its objective and gap (the
    figures the plan reports)."""

    def __init__(self) -> None:
        self._started = time.monotonic()
        self._last = -PROGRESS_AFTER_S
        self._stage: str | None = None

    def __call__(self, event: ProgressEvent) -> None:
        self.show(
            finite_or_none(event.objective_value), finite_or_none(event.optimality_gap), event.stage
        )

    def show(self, objective: float | None, gap: float | None, stage: str | None = None) -> None:
        now = time.monotonic() - self._started
        changed = stage != self._stage
        if not changed and now - self._last < PROGRESS_AFTER_S:
            return
        self._last, self._stage = now, stage
        best = "—" if objective is None else f"{objective:.6g}"
        gap_text = "—" if gap is None else f"{gap * PERCENT:.2f} %"
        # Wall time since the command started waiting (one clock for every stage).
        what = f"{stage}: " if stage else ""
        err(f"solving: elapsed {now:6.1f} s  {what}best objective {best}  gap {gap_text}")


def exit_code_for(plan: PlanOut) -> ExitCode:
    """0 every demand served, 3 some unserved, 4 infeasible."""
    if plan.status is SolveStatus.INFEASIBLE:
        return ExitCode.INFEASIBLE
    return ExitCode.UNSERVED if plan.unserved else ExitCode.SERVED


def summary_table(plan: PlanOut) -> str:
    """A readable table of the plan: one line per carrier (``*``: retuned), then unserved
    demands, carriers below their target (what binds them, what would lift them), totals and
    the plan's cautions.

    Parameters
    ----------
    plan : PlanOut
        A plan as on the wire.

    Returns
    -------
    str
        Lines ending in a newline; centres in MHz, symbol rates in Mbaud, throughput in
        Mbit/s, headroom (Es/N0 over the MODCOD's threshold) and back-off in dB, guards in
        kHz, EVM in % rms.
    """
    width = max([len("demand"), *(len(c.demand_id) for c in plan.carriers)]) + 2
    head = (
        f"  {'demand':<{width}}{'centre MHz':>14}{'Rs Mbaud':>10}{'α':>6}  {'MODCOD':<16}"
        f"{'Mbit/s':>9}{'headroom dB':>12}{'guard kHz':>16}{'OBO dB':>8}{'EVM %':>7}"
    )
    lines = [f"plan {plan.id or '(not stored)'}  {plan.name!r}  status {plan.status.value}", head]
    lines.append("-" * len(head))
    for c in sorted(plan.carriers, key=lambda c: c.center_hz):
        mark = RETUNED_MARK if c.retuned else " "
        modcod = f"{c.modulation.value} {c.code_rate}"
        guards = f"{c.guard_below_hz / KHZ:.1f}/{c.guard_above_hz / KHZ:.1f}"
        backoff = "—" if c.output_backoff_db is None else f"{c.output_backoff_db:.1f}"
        lines.append(
            f"{mark} {c.demand_id:<{width}}{c.center_hz / MHZ:>14.4f}"
            f"{c.symbol_rate_baud / MHZ:>10.4f}{c.rolloff:>6.2f}  {modcod:<16}"
            f"{c.throughput_bps / MHZ:>9.3f}{c.headroom_db:>12.2f}{guards:>16}{backoff:>8}"
            f"{c.evm_pct:>7.2f}"
        )
    if any(c.retuned for c in plan.carriers):
        lines.append(f"{RETUNED_MARK} retuned: moved or reconfigured from its current setting")
    lines.extend(f"unserved {u.demand_id}: {u.reason.value} ({u.detail})" for u in plan.unserved)
    lines.extend(_below_target(plan))
    lines.extend(_totals(plan))
    lines.extend(_value_lines(plan))
    lines.extend(f"note: {n}" for n in plan.notices)
    return "\n".join(lines) + "\n"


def _below_target(plan: PlanOut) -> list[str]:
    """One line per carrier below its target, by centre: what binds it (and what else does),
    the lifts that apply, and why in words."""
    lines = []
    for c in sorted(plan.carriers, key=lambda c: c.center_hz):
        if c.limited_by is None:
            continue
        also = (
            f" (also {', '.join(a.value for a in c.also_limited_by)})" if c.also_limited_by else ""
        )
        lifts = []
        if c.spectrum_to_target_hz is not None:
            lifts.append(f"+{c.spectrum_to_target_hz / KHZ:.1f} kHz spectrum")
        if c.esn0_to_target_db is not None:
            lifts.append(f"Es/N0 {c.esn0_to_target_db:.2f} dB")
        if c.symbol_rate_needed_baud is not None:
            lifts.append(f"Rs {c.symbol_rate_needed_baud / MHZ:.4f} Mbaud")
        lifted = f"; to target: {', '.join(lifts)}" if lifts else ""
        lines.append(
            f"below target {c.demand_id}: {c.limited_by.value}{also}{lifted} ({c.limit_detail})"
        )
    return lines


def _totals(plan: PlanOut) -> list[str]:
    """Use of the block; throughput against the bounds and the requested rates; the hand
    method on the same request."""
    s = plan.summary
    gap = "—" if s.optimality_gap is None else f"{s.optimality_gap * PERCENT:.2f} %"
    lines = [
        f"used {s.used_bandwidth_hz / MHZ:.4f} MHz, free {s.free_bandwidth_hz / MHZ:.4f} MHz "
        f"(largest segment {s.largest_free_segment_hz / MHZ:.4f} MHz); throughput "
        f"{s.total_throughput_bps / MHZ:.3f} Mbit/s, {s.spectral_efficiency_bps_per_hz:.3f} "
        f"bit/s/Hz; gap {gap}; solved in {s.solve_time_s:.2f} s",
        f"throughput is {s.efficiency_vs_capacity_bound * PERCENT:.1f} % of the block's capacity "
        f"bound ({s.capacity_bound_bps / MHZ:.3f} Mbit/s), "
        f"{s.efficiency_vs_target_capped_bound * PERCENT:.1f} % of the target-capped bound "
        f"({s.target_capped_bound_bps / MHZ:.3f} Mbit/s) and "
        f"{s.fraction_of_requested * PERCENT:.1f} % of the requested "
        f"{s.requested_rate_bps / MHZ:.3f} Mbit/s",
    ]
    hand = s.hand_method
    if hand is not None:
        demands = len(plan.carriers) + len(plan.unserved)
        ratio = "—" if hand.plan_to_hand_ratio is None else f"{hand.plan_to_hand_ratio:.2f}×"
        lines.append(
            f"hand method on the same request, verified: serves "
            f"{hand.served_demands} of {demands} demands, {hand.throughput_bps / MHZ:.3f} Mbit/s "
            f"in {hand.used_bandwidth_hz / MHZ:.4f} MHz; this plan carries {ratio} as much"
        )
    return lines


def _gain_text(g: SpectrumGainOut) -> str:
    """A gain per MHz as bound (method) and achieved (method), in Mbit/s per MHz."""

    def mbps(value: float | None) -> str:
        return "—" if value is None else f"{value / MHZ:.3f}"

    achieved = f"achieved {mbps(g.achieved_bps_per_mhz)}"
    if g.achieved_method is not None:
        achieved += f" ({g.achieved_method})"
    return f"bound {mbps(g.bound_bps_per_mhz)} ({g.bound_method}), {achieved}"


def _value_lines(plan: PlanOut) -> list[str]:
    """What more spectrum is worth, in Mbit/s per MHz: each edge, then each exclusion."""
    v = plan.summary.spectrum_value
    if v is None:
        return []
    lines = [
        f"spectrum value (Mbit/s per MHz, {v.step_hz / MHZ:.3f} MHz step): "
        f"lower edge {_gain_text(v.lower_edge)}; upper edge {_gain_text(v.upper_edge)}"
    ]
    for x in v.exclusions:
        note = f" {x.note!r}" if x.note else ""
        lines.append(f"  exclusion {x.index}{note} ({x.freed_hz / MHZ:.3f} MHz): {_gain_text(x)}")
    if v.achieved_note:
        lines.append(f"  ({v.achieved_note})")
    return lines


def retune_line(plan: PlanOut) -> str:
    """One line for a nightly notification: ``retuned K of N carriers: a, b`` (by centre).

    Parameters
    ----------
    plan : PlanOut
        A replanned plan as on the wire.

    Returns
    -------
    str
        The line, ending in a newline; without retunes it ends after ``carriers``.
    """
    carriers = sorted(plan.carriers, key=lambda c: c.center_hz)
    moved = [c.demand_id for c in carriers if c.retuned]
    text = f"retuned {len(moved)} of {len(carriers)} carriers"
    return (f"{text}: {', '.join(moved)}" if moved else text) + "\n"


@dataclass(frozen=True)
class Outputs:
    """Where to write the plan (JSON), its pictures and its carriers (CSV); None: nowhere."""

    plan_path: Path | None = None
    svg_path: Path | None = None
    png_path: Path | None = None
    csv_path: Path | None = None

    def formats(self) -> tuple[ImageFormat, ...]:
        """The picture formats asked for."""
        asked: dict[ImageFormat, Path | None] = {"svg": self.svg_path, "png": self.png_path}
        return tuple(fmt for fmt, path in asked.items() if path is not None)

    def paths(self) -> list[Path]:
        """Every path asked for, in the order of the fields."""
        found = (getattr(self, f.name) for f in fields(self))
        return [path for path in found if path is not None]


def write_outputs(plan: PlanOut, pictures: dict[ImageFormat, bytes], outputs: Outputs) -> None:
    """Write each asked-for file, making its directory.

    Raises
    ------
    ValueError
        When a picture is asked for that ``pictures`` does not hold.
    """
    missing = [fmt for fmt in outputs.formats() if fmt not in pictures]
    if missing:
        raise ValueError(f"no {' or '.join(missing)} picture was produced")
    contents: list[tuple[Path | None, bytes]] = [
        (outputs.plan_path, (plan.model_dump_json(indent=2) + "\n").encode()),
        (outputs.svg_path, pictures.get("svg", b"")),
        (outputs.png_path, pictures.get("png", b"")),
        (outputs.csv_path, carriers_csv(plan).encode()),
    ]
    for path, content in contents:
        if path is not None:
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(content)
