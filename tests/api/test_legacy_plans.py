"""Plans stored (or written to a file) by an earlier version, before the headroom names and the
three bound figures, still load and are served with today's names.

The old document, ``tests/data/plan-before-headroom-names.json``, was written by the code as it
was before the rename (a plan of the small request with ``margin_db``,
``margin_after_interference_db``, ``shannon_bound_bps`` and ``efficiency_vs_bound``), and is
stored here as that code stored it: raw JSON text in the plans table.
"""

from __future__ import annotations

import copy
import csv
import io
import json
import math
from pathlib import Path
from typing import Any

import pytest
import sqlalchemy as sa
from api_support import serving

from service.app import create_app
from service.cli import main
from service.convert import to_problem
from service.legacy import LegacyPlanError, upgrade_plan_document
from service.runtime import new_id
from service.schemas import PlanRequest
from service.settings import Settings
from service.store import Store
from service.tables import PlanRow
from solver import capacity_bound

OLD_PLAN = Path(__file__).parent.parent / "data" / "plan-before-headroom-names.json"
OLD_CARRIER_NAMES = {"margin_db", "margin_after_interference_db"}
OLD_SUMMARY_NAMES = {"shannon_bound_bps", "efficiency_vs_bound"}


def _old() -> dict[str, Any]:
    document: dict[str, Any] = json.loads(OLD_PLAN.read_text(encoding="utf-8"))
    return document


def _store_raw(database_url: str, document: dict[str, Any]) -> str:
    """Insert the document as the earlier version did: its JSON text, as it was."""
    plan_id = new_id()
    engine = sa.create_engine(database_url)
    with engine.begin() as connection:
        connection.execute(
            sa.insert(PlanRow).values(
                id=plan_id,
                created_at=sa.func.now(),
                parent_id=None,
                name=document["name"],
                status=document["status"],
                request_json=json.dumps(document["request"]),
                plan_json=json.dumps({**document, "id": plan_id}),
                job_id=None,
            )
        )
    engine.dispose()
    return plan_id


def _check_upgraded(plan: dict[str, Any], old: dict[str, Any]) -> None:
    """Every old figure under its new name; the figures old plans lack computed from the
    request as a new plan computes them."""
    for new, before in zip(plan["carriers"], old["carriers"], strict=True):
        assert not OLD_CARRIER_NAMES & set(new)
        assert new["headroom_db"] == before["margin_db"]
        assert new["headroom_after_interference_db"] == before["margin_after_interference_db"]
    summary, was = plan["summary"], old["summary"]
    assert not OLD_SUMMARY_NAMES & set(summary)
    assert summary["target_capped_bound_bps"] == was["shannon_bound_bps"]
    assert summary["efficiency_vs_target_capped_bound"] == was["efficiency_vs_bound"]
    problem = to_problem(PlanRequest.model_validate(old["request"]))
    capacity = capacity_bound(problem.block.usable_width_hz, problem.demands).total_bps
    requested = sum(d["target_rate_bps"] for d in old["request"]["demands"])
    assert summary["capacity_bound_bps"] == pytest.approx(capacity, rel=1e-12)
    assert summary["capacity_bound_bps"] >= summary["target_capped_bound_bps"]
    assert summary["requested_rate_bps"] == pytest.approx(requested, rel=1e-12)
    total = was["total_throughput_bps"]
    assert summary["efficiency_vs_capacity_bound"] == pytest.approx(total / capacity)
    assert summary["fraction_of_requested"] == pytest.approx(total / requested)
    assert summary["hand_method"] is None  # not run for an old plan


def test_the_old_document_really_has_the_old_names() -> None:
    old = _old()
    assert all(set(c) >= OLD_CARRIER_NAMES for c in old["carriers"]) and old["carriers"]
    assert set(old["summary"]) >= OLD_SUMMARY_NAMES


def test_an_old_stored_plan_reads_back_with_the_new_names(settings: Settings) -> None:
    store = Store(settings.database_url)
    store.ensure_schema()
    try:
        old = _old()
        stored = store.get_plan(_store_raw(settings.database_url, old))
    finally:
        store.close()
    assert stored is not None
    _check_upgraded(json.loads(stored.plan.model_dump_json()), old)


@pytest.mark.anyio
async def test_an_old_stored_plan_is_served_with_the_new_names(settings: Settings) -> None:
    store = Store(settings.database_url)
    store.ensure_schema()
    old = _old()
    plan_id = _store_raw(settings.database_url, old)
    store.close()
    async with serving(create_app(settings)) as client:
        answer = await client.get(f"/v1/plans/{plan_id}")
        table = await client.get(f"/v1/plans/{plan_id}/carriers.csv")
    assert answer.status_code == 200, answer.text
    assert '"margin_db"' not in answer.text.split('"request"')[0]  # only the demands keep it
    _check_upgraded(answer.json(), old)
    assert table.status_code == 200, table.text
    rows = list(csv.DictReader(io.StringIO(table.text, newline="")))
    by_centre = sorted(old["carriers"], key=lambda c: c["center_hz"])
    assert [float(r["headroom_db"]) for r in rows] == [c["margin_db"] for c in by_centre]


def test_a_current_document_is_left_as_it_is() -> None:
    upgraded = upgrade_plan_document(_old())
    assert upgrade_plan_document(upgraded) == upgraded
    assert upgrade_plan_document([1, 2]) == [1, 2]  # not a plan: left to validation


def test_an_old_document_without_its_request_is_refused_by_name() -> None:
    old = _old()
    del old["request"]
    with pytest.raises(LegacyPlanError, match="capacity_bound_bps"):
        upgrade_plan_document(old)
    request = PlanRequest.model_validate(_old()["request"])
    assert math.isfinite(upgrade_plan_document(old, request)["summary"]["capacity_bound_bps"])


def test_replan_reads_an_old_plan_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    old = _old()
    previous = tmp_path / "old-plan.json"
    previous.write_text(json.dumps(old), encoding="utf-8")
    request = tmp_path / "request.json"
    request.write_text(json.dumps(old["request"]), encoding="utf-8")
    replanned = tmp_path / "new-plan.json"
    code = main(["replan", str(request), "--previous", str(previous), "-o", str(replanned)])
    assert code == 0, capsys.readouterr().err
    after = json.loads(replanned.read_text(encoding="utf-8"))
    assert {c["demand_id"] for c in after["carriers"]} == {c["demand_id"] for c in old["carriers"]}
    bare = copy.deepcopy(old)
    del bare["request"]
    previous.write_text(json.dumps(bare), encoding="utf-8")
    assert main(["replan", str(request), "--previous", str(previous)]) == 2
    assert "--previous" in capsys.readouterr().err
