"""The ``bandwright`` command: exit codes a nightly script branches on, outputs, the demo.

Exit codes are the project's contract (DESIGN.md, Command line): 0 every demand served,
3 some unserved, 4 infeasible, 2 invalid input, 5 server unreachable.  Requests are invented.
"""

from __future__ import annotations

import copy
import json
import socket
from pathlib import Path
from typing import Any

import pytest

from service.cli import main

REQUEST: dict[str, Any] = {
    "name": "cli test: invented two-link block",
    "block": {"start_hz": 2.40e9, "stop_hz": 2.41e9, "raster_hz": 10e3},
    "transmitter": {"filter_span_symbols": 16, "rolloffs": [0.2, 0.35]},
    "demands": [
        {"id": "north", "min_rate_bps": 1e6, "target_rate_bps": 2e6, "esn0_db": 12.0},
        {"id": "south", "min_rate_bps": 1e6, "target_rate_bps": 3e6, "cn0_dbhz": 78.0},
    ],
    "time_limit_s": 2.0,
}


def _write(tmp_path: Path, request: dict[str, Any], name: str = "request.json") -> Path:
    path = tmp_path / name
    path.write_text(json.dumps(request), encoding="utf-8")
    return path


def _variant(**changes: Any) -> dict[str, Any]:
    request = copy.deepcopy(REQUEST)
    request.update(changes)
    return request


def test_all_served_exits_0_and_writes_plan_and_picture(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    plan_path, svg_path = tmp_path / "plan.json", tmp_path / "plan.svg"
    code = main(
        ["plan", str(_write(tmp_path, REQUEST)), "-o", str(plan_path), "--svg", str(svg_path)]
    )
    out = capsys.readouterr().out
    assert code == 0
    plan = json.loads(plan_path.read_text(encoding="utf-8"))
    assert plan["id"] is None  # computed here, not stored
    assert {c["demand_id"] for c in plan["carriers"]} == {"north", "south"}
    assert b"<svg" in svg_path.read_bytes()[:2000]
    assert "north" in out and "south" in out and "note:" in out


def test_replan_from_a_previous_plan_file(tmp_path: Path) -> None:
    previous = tmp_path / "previous.json"
    assert main(["plan", str(_write(tmp_path, REQUEST)), "-o", str(previous)]) == 0
    replanned = tmp_path / "replanned.json"
    code = main(
        [
            "replan",
            str(_write(tmp_path, REQUEST)),
            "--previous",
            str(previous),
            "-o",
            str(replanned),
        ]
    )
    assert code == 0
    before = {c["demand_id"]: c["center_hz"] for c in json.loads(previous.read_text())["carriers"]}
    after = json.loads(replanned.read_text())
    # Same request, same block: with the retune penalty nothing needs to move.
    assert {c["demand_id"]: c["center_hz"] for c in after["carriers"]} == before
    assert after["summary"]["retune_count"] == 0


def test_some_unserved_exits_3(tmp_path: Path) -> None:
    hopeless = {"id": "far", "min_rate_bps": 1e6, "target_rate_bps": 1e6, "esn0_db": -25.0}
    request = _variant(demands=[*REQUEST["demands"], hopeless])
    assert main(["plan", str(_write(tmp_path, request))]) == 3


def test_infeasible_exits_4(tmp_path: Path) -> None:
    request = _variant(
        block={"start_hz": 2.4e9, "stop_hz": 2.4001e9, "raster_hz": 1e3},
        demands=[{"id": "big", "min_rate_bps": 5e7, "target_rate_bps": 5e7, "esn0_db": 20.0}],
    )
    assert main(["plan", str(_write(tmp_path, request))]) == 4


@pytest.mark.parametrize(
    ("path", "value", "field"),
    [
        (("demands", 1, "target_rate_bps"), 1.0, "demands[1].target_rate_bps"),
        (("block", "stop_hz"), 1.0, "block.stop_hz"),
        (("time_limit_s",), 1000, "time_limit_s"),
    ],
)
def test_invalid_input_exits_2_naming_the_field(
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
    path: tuple[Any, ...],
    value: Any,
    field: str,
) -> None:
    request: Any = copy.deepcopy(REQUEST)
    target = request
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    assert main(["plan", str(_write(tmp_path, request))]) == 2
    assert field in capsys.readouterr().err


def test_unreadable_request_exits_2(tmp_path: Path) -> None:
    (tmp_path / "broken.json").write_text("{not json", encoding="utf-8")
    assert main(["plan", str(tmp_path / "broken.json")]) == 2
    assert main(["plan", str(tmp_path / "missing.json")]) == 2


def test_unreachable_server_exits_5(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    with socket.socket() as sock:  # a port nobody listens on once this closes
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    server = f"http://127.0.0.1:{port}"
    assert main(["plan", str(_write(tmp_path, REQUEST)), "--server", server]) == 5
    assert "unreachable" in capsys.readouterr().err


def test_demo_serves_on_loopback_and_writes_the_picture(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.chdir(tmp_path)  # the demo's SQLite default ./bandwright.db lands here
    svg = tmp_path / "out" / "demo-spectrum.svg"
    code = main(["demo", "--request", str(_write(tmp_path, REQUEST)), "--svg", str(svg)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert svg.read_bytes().lstrip().startswith((b"<?xml", b"<svg"))
    assert "plan " in captured.out and "(not stored)" not in captured.out
    assert (tmp_path / "bandwright.db").exists()
