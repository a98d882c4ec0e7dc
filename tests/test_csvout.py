"""``carriers_csv``: RFC 4180 §2 — CRLF record ends, a header row, a field holding a comma or a
double quote enclosed in double quotes with each inner quote doubled; null as an empty cell."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest

from service.cli import main
from service.csvout import carriers_csv
from service.schemas import PlanOut

REQUEST = {
    "name": "csv test: invented two-link block",
    "block": {"start_hz": 2.40e9, "stop_hz": 2.41e9, "raster_hz": 10e3},
    "demands": [
        {"id": "north", "min_rate_bps": 1e6, "target_rate_bps": 2e6, "esn0_db": 12.0},
        {"id": "south", "min_rate_bps": 1e6, "target_rate_bps": 3e6, "cn0_dbhz": 78.0},
    ],
    "time_limit_s": 2.0,
}


@pytest.fixture(scope="module")
def plan(tmp_path_factory: pytest.TempPathFactory) -> PlanOut:
    """A plan computed in process by the CLI (two carriers)."""
    folder = tmp_path_factory.mktemp("csv")
    request, out = folder / "request.json", folder / "plan.json"
    request.write_text(json.dumps(REQUEST), encoding="utf-8")
    assert main(["plan", str(request), "-o", str(out)]) == 0
    return PlanOut.model_validate_json(Path(out).read_text(encoding="utf-8"))


def test_a_field_with_a_comma_or_quote_is_quoted_and_reads_back(plan: PlanOut) -> None:
    awkward = 'ridge, north "A"'  # not a valid wire id: the CSV must cope all the same
    first = plan.carriers[0].model_copy(update={"demand_id": awkward})
    text = carriers_csv(plan.model_copy(update={"carriers": [first, *plan.carriers[1:]]}))
    assert '"ridge, north ""A"""' in text  # RFC 4180 §2 items 6 and 7
    rows = list(csv.DictReader(io.StringIO(text, newline="")))
    assert awkward in [r["demand_id"] for r in rows]


def test_null_is_an_empty_cell_and_records_end_in_crlf(plan: PlanOut) -> None:
    bare = plan.carriers[0].model_copy(
        update={"output_backoff_db": None, "headroom_after_interference_db": None}
    )
    text = carriers_csv(plan.model_copy(update={"carriers": [bare]}))
    assert text.count("\r\n") == 2 and text.endswith("\r\n")  # RFC 4180 §2 items 1-2
    (row,) = csv.DictReader(io.StringIO(text, newline=""))
    assert row["output_backoff_db"] == "" and row["headroom_after_interference_db"] == ""
    assert float(row["center_hz"]) == bare.center_hz


def test_rows_are_sorted_by_centre(plan: PlanOut) -> None:
    text = carriers_csv(plan.model_copy(update={"carriers": plan.carriers[::-1]}))
    centres = [float(r["center_hz"]) for r in csv.DictReader(io.StringIO(text, newline=""))]
    assert centres == sorted(centres) and len(centres) == len(plan.carriers)
