"""``bandwright check`` and ``bandwright what-if``: exit codes (the project's contract, DESIGN.md:
0 served / valid, 3 some unserved, 2 invalid input, 5 unreachable), stdin, JSON output, and
agreement with the service's report.  Requests are invented."""

from __future__ import annotations

import io
import json
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from service.cli import main
from service.dryrun import check_request
from service.schemas import PlanRequest
from service.settings import Settings

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "demo-request.json"
REQUEST: dict[str, Any] = {
    "name": "cli test: invented block with a held-back stretch",
    "block": {
        "start_hz": 2.400e9,
        "stop_hz": 2.405e9,
        "raster_hz": 10e3,
        "exclusions": [{"start_hz": 2.401e9, "stop_hz": 2.404e9, "note": "held back"}],
    },
    "transmitter": {"filter_span_symbols": 16, "rolloffs": [0.2, 0.35]},
    "demands": [
        {"id": "small", "min_rate_bps": 0.2e6, "target_rate_bps": 0.4e6, "esn0_db": 12.0},
        {"id": "wide", "min_rate_bps": 4e6, "target_rate_bps": 4e6, "esn0_db": 12.0},
    ],
    "time_limit_s": 3.0,
}
"""``wide`` needs more than either 1 MHz stretch (see tests/api/test_api_whatif.py)."""


def _write(tmp_path: Path, data: Any, name: str) -> Path:
    path = tmp_path / name
    path.write_text(json.dumps(data), encoding="utf-8")
    return path


def test_check_of_the_example_exits_0_and_its_json_is_the_services_report(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main(["check", str(EXAMPLE), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    request = PlanRequest.model_validate(json.loads(EXAMPLE.read_text(encoding="utf-8")))
    assert report == json.loads(check_request(request, Settings(), None).model_dump_json())
    assert report["demands"] == 12 and report["candidate_configurations"] == 3148
    assert main(["check", str(EXAMPLE)]) == 0
    text = capsys.readouterr().out
    assert "usable 18.5000 MHz" in text and "3,148 carrier configurations" in text
    assert "teleprotection-ridge" in text and "3 × 16 × 6 × 1 × 1 = 288" in text


def test_check_reads_stdin_and_warns_about_an_unchecked_previous_plan(
    monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.setattr("sys.stdin", io.StringIO(json.dumps({**REQUEST, "previous_plan_id": "p1"})))
    assert main(["check", "-", "--json"]) == 0
    warnings = json.loads(capsys.readouterr().out)["warnings"]
    assert any("previous_plan_id 'p1' was not checked" in w for w in warnings)


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"time_limit_s": 0.03}, "time_limit_s"),  # the solver's own check: 20 ms per demand
        ({"demands": [REQUEST["demands"][0]] * 2}, "demands[1].id"),  # consistency
        ({"block": {"start_hz": 2.4e9, "stop_hz": 1.0}}, "block.stop_hz"),  # the wire model
    ],
)
def test_check_of_an_invalid_request_exits_2_naming_the_field(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], change: dict[str, Any], field: str
) -> None:
    path = _write(tmp_path, {**REQUEST, **change}, "bad.json")
    assert main(["check", str(path)]) == 2
    captured = capsys.readouterr()
    assert f"invalid input: {field}: " in captured.err and captured.out == ""


def test_check_of_unreadable_input_exits_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    (tmp_path / "broken.json").write_text("{not json", encoding="utf-8")
    assert main(["check", str(tmp_path / "broken.json")]) == 2
    assert main(["check", str(tmp_path / "missing.json")]) == 2
    assert capsys.readouterr().err.count("invalid input: REQUEST") == 2


@pytest.fixture
def live_server(tmp_path: Path) -> Iterator[str]:
    """The service on a loopback port of its own, with its own SQLite store."""
    import uvicorn

    from service.app import create_app

    settings = Settings(database_url=f"sqlite:///{tmp_path / 'server.db'}", job_workers=1)
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    server = uvicorn.Server(uvicorn.Config(create_app(settings), log_level="warning"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started and time.monotonic() < deadline:
        time.sleep(0.05)
    assert server.started
    try:
        yield f"http://127.0.0.1:{sock.getsockname()[1]}"
    finally:
        server.should_exit = True
        thread.join(timeout=30)
        sock.close()


def test_what_if_on_the_server_exits_with_the_changed_plans_code(
    tmp_path: Path, live_server: str, capsys: pytest.CaptureFixture[str]
) -> None:
    plan = httpx.post(f"{live_server}/v1/plans", json=REQUEST, timeout=60).json()
    assert [u["demand_id"] for u in plan["unserved"]] == ["wide"]
    rates = {"demand_rates": [{"demand_id": "small", "target_rate_bps": 0.3e6}]}
    keep = _write(tmp_path, {"changes": rates}, "keep.json")
    assert main(["what-if", plan["id"], str(keep), "--server", live_server]) == 3  # wide still out
    capsys.readouterr()
    gone = _write(tmp_path, {"changes": {"drop_demands": ["small"]}}, "gone.json")
    assert main(["what-if", plan["id"], str(gone), "--server", live_server]) == 4  # no carrier
    capsys.readouterr()
    freed = _write(tmp_path, {"changes": {"remove_exclusions": [0]}}, "freed.json")
    out_path = tmp_path / "changed.json"
    code = main(["what-if", plan["id"], str(freed), "--server", live_server, "-o", str(out_path)])
    assert code == 0  # every demand of the changed plan served
    text = capsys.readouterr().out
    assert "not stored" in text and "wide" in text and "added" in text and "served 1 → 2" in text
    assert json.loads(out_path.read_text(encoding="utf-8"))["id"] is None
    assert (
        main(["what-if", plan["id"], str(freed), "--server", live_server, "--store", "--json"]) == 0
    )
    stored = json.loads(capsys.readouterr().out)
    assert stored["stored"] is True and stored["plan"]["parent_id"] == plan["id"]
    total = httpx.get(f"{live_server}/v1/plans", timeout=10).json()["total"]
    assert total == 2  # the first plan and the one stored with --store


def test_what_if_errors_exit_2_or_5(
    tmp_path: Path, live_server: str, capsys: pytest.CaptureFixture[str]
) -> None:
    changes = _write(tmp_path, {"changes": {"drop_demands": ["nobody"]}}, "c.json")
    assert main(["what-if", "no-such-plan", str(changes), "--server", live_server]) == 2
    assert "PLAN_ID" in capsys.readouterr().err
    plan = httpx.post(f"{live_server}/v1/plans", json=REQUEST, timeout=60).json()
    assert main(["what-if", plan["id"], str(changes), "--server", live_server]) == 2
    assert "invalid input: changes.drop_demands[0]: " in capsys.readouterr().err
    assert main(["what-if", plan["id"], str(changes)]) == 2  # no --server
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        closed = f"http://127.0.0.1:{sock.getsockname()[1]}"
    assert main(["what-if", plan["id"], str(changes), "--server", closed]) == 5
