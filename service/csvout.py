"""A plan's carriers as CSV (RFC 4180): one header row, then one row per carrier by centre.

Column names carry their units (``_hz``, ``_baud``, ``_db``, ``_pct``, ``_bps``); a null value
is an empty cell; ``retuned`` is ``true`` or ``false``; a carrier below its target says what
binds it (``limited_by``, ``also_limited_by`` joined by ``;``) and what would lift it.  The
plan's cautions (its ``notices``) are not in the CSV, which has no place for comments: they
apply to every row all the same.
"""

from __future__ import annotations

import csv
import io
from enum import Enum

from service.schemas import CarrierOut, PlanOut

__all__ = ["CSV_COLUMNS", "CSV_MEDIA_TYPE", "carriers_csv"]

CSV_MEDIA_TYPE = "text/csv; charset=utf-8"
"""RFC 4180 §3 registers ``text/csv``; the body is UTF-8."""

CSV_COLUMNS: tuple[str, ...] = (
    "demand_id",
    "profile",
    "center_hz",
    "lower_edge_hz",
    "upper_edge_hz",
    "symbol_rate_baud",
    "rolloff",
    "modulation",
    "code_rate",
    "output_backoff_db",
    "evm_pct",
    "throughput_bps",
    "esn0_db",
    "required_esn0_db",
    "headroom_db",
    "headroom_after_interference_db",
    "guard_below_hz",
    "guard_above_hz",
    "retuned",
    "limited_by",
    "also_limited_by",
    "spectrum_to_target_hz",
    "esn0_to_target_db",
    "symbol_rate_needed_baud",
    "limit_detail",
)
"""The header row: names of :class:`~service.schemas.CarrierOut` fields, units in the names."""

LIST_SEPARATOR = ";"
"""Joins the entries of a list field (``also_limited_by``) in one cell."""


def _cell(value: object) -> str:
    """One cell: empty for null, ``true``/``false`` for a flag, an enum's value, else ``str``
    a list's entries joined by :data:`LIST_SEPARATOR` (for a float the shortest text that reads
    back to the same number)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, Enum):
        return str(value.value)
    if isinstance(value, list):
        return LIST_SEPARATOR.join(_cell(v) for v in value)
    return str(value)


def _row(carrier: CarrierOut) -> list[str]:
    return [_cell(getattr(carrier, column)) for column in CSV_COLUMNS]


def carriers_csv(plan: PlanOut) -> str:
    """The plan's carriers as CSV text.

    Parameters
    ----------
    plan : PlanOut
        A plan as on the wire.

    Returns
    -------
    str
        A header row of :data:`CSV_COLUMNS`, then one row per carrier sorted by centre
        frequency (Hz); records end in CRLF and a field is quoted only when it holds a comma,
        a double quote or a line break (RFC 4180 §2).  Frequencies in Hz, symbol rates in
        baud, levels in dB, EVM in % rms, throughput in bit/s.

    References
    ----------
    .. [1] Y. Shafranovich, "Common Format and MIME Type for Comma-Separated Values (CSV)
       Files", RFC 4180, 2005.
    """
    buffer = io.StringIO(newline="")
    writer = csv.writer(buffer, lineterminator="\r\n", quoting=csv.QUOTE_MINIMAL)
    writer.writerow(CSV_COLUMNS)
    writer.writerows(_row(c) for c in sorted(plan.carriers, key=lambda c: c.center_hz))
    return buffer.getvalue()
