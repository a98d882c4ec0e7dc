"""A replan's spectrum picture marks what changed since the earlier plan.

Cases are built by hand from the solver's dataclasses (one carrier kept, one moved, one added,
one dropped) and through the command (``bandwright replan --previous ... --svg``).  What the
picture calls added, moved or dropped is checked against the service's other implementation of
the same comparison, the one behind ``GET /v1/plans/{id}/retunes``
(:func:`service.routes.plans.compare_settings`, on wire objects).
"""

from __future__ import annotations

import json
import re
from dataclasses import replace
from pathlib import Path
from typing import Any

import pytest
from matplotlib.patches import Rectangle
from render_support import (
    default_block,
    make_carrier,
    make_plan,
    make_problem,
    svg_texts,
    texts_by_gid,
)

from service.cli import main
from service.convert import carrier_to_wire
from service.picture_marks import changes_since, settings_before
from service.render import build_spectrum_figure, render_spectrum
from service.routes.plans import _setting, compare_settings
from solver import CurrentSetting, Plan, Problem

SHIFT_HZ = 2e6


@pytest.fixture(scope="module")
def replan() -> tuple[Plan, Plan, Problem]:
    """Earlier: keep, move, drop.  Now: keep where it was, move 2 MHz up, a new one added."""
    keep = make_carrier("keep", 7_127e6, 1e6)
    move = make_carrier("move", 7_130e6, 1e6)
    drop = make_carrier("drop", 7_140e6, 500e3)
    add = make_carrier("add", 7_137e6, 250e3)
    moved = replace(move, center_hz=move.center_hz + SHIFT_HZ)
    parent = make_plan([keep, move, drop])
    plan = make_plan([keep, moved, add])
    problem = make_problem([keep, moved, add], default_block())
    return plan, parent, problem


def test_the_marks_of_a_moved_an_added_and_a_dropped_carrier(
    replan: tuple[Plan, Plan, Problem],
) -> None:
    plan, parent, problem = replan
    svg = render_spectrum(plan, problem, "svg", parent=parent).decode()
    ids = set(re.findall(r'<g id="([^"]+)"', svg))
    # moved: its earlier bar dashed and a line to the new one; dropped: its earlier bar;
    # kept: its earlier bar plain; added: no earlier bar at all
    assert {"ghost-move", "shift-move", "dropped-drop", "earlier-keep"} <= ids
    assert not {"ghost-keep", "shift-keep", "ghost-add", "earlier-add", "dropped-add"} & ids
    texts = svg_texts(svg.encode())
    joined = "\n".join(texts)
    assert "since the earlier plan: 1 added, 1 moved, 1 dropped" in joined
    assert "dropped since the earlier plan" in joined  # the legend explains the mark
    figure = build_spectrum_figure(plan, problem, parent=parent)
    labels = texts_by_gid(figure, "label-")
    assert "moved +2 MHz" in labels["label-move"].splitlines()
    assert "added" in labels["label-add"].splitlines()
    assert labels["label-dropped-drop"].splitlines()[:2] == ["drop", "dropped"]
    assert "keep" in labels["label-keep"] and "moved" not in labels["label-keep"]


def test_the_earlier_bar_is_where_the_carrier_was(replan: tuple[Plan, Plan, Problem]) -> None:
    plan, parent, problem = replan
    figure = build_spectrum_figure(plan, problem, parent=parent)
    (ghost,) = [p for p in figure.findobj(Rectangle) if p.get_gid() == "ghost-move"]
    before = next(c for c in parent.carriers if c.demand_id == "move")
    # 1 Mbaud × (1 + 0.2) = 1.2 MHz wide, wide enough to be drawn at its true width (MHz axis)
    assert ghost.get_x() == pytest.approx(before.lower_edge_hz / 1e6)
    assert ghost.get_width() == pytest.approx(1.2)
    assert ghost.get_linestyle() == "--"


def test_the_picture_and_the_retunes_list_agree(replan: tuple[Plan, Plan, Problem]) -> None:
    plan, parent, problem = replan
    before = settings_before(problem, parent)
    assert before is not None
    drawn = {(c.demand_id, c.change.value) for c in changes_since(plan.carriers, before)}
    wire_before = {c.demand_id: _setting(carrier_to_wire(c)) for c in parent.carriers}
    wire_after = {c.demand_id: _setting(carrier_to_wire(c)) for c in plan.carriers}
    listed = {(r.demand_id, r.change.value) for r in compare_settings(wire_before, wire_after)}
    assert drawn == listed == {("move", "moved"), ("add", "added"), ("drop", "dropped")}


def test_without_an_earlier_plan_nothing_is_marked(replan: tuple[Plan, Plan, Problem]) -> None:
    plan, _, problem = replan
    svg = render_spectrum(plan, problem, "svg").decode()
    assert "earlier" not in svg and 'id="ghost-' not in svg


def test_the_requests_current_settings_serve_when_there_is_no_parent(
    replan: tuple[Plan, Plan, Problem],
) -> None:
    # An offline replan sends the plan on air as each demand's `current` setting.
    plan, parent, problem = replan
    old = next(c for c in parent.carriers if c.demand_id == "move")
    cfg = old.config
    current = CurrentSetting(
        old.center_hz, cfg.symbol_rate_baud, cfg.rolloff, cfg.modulation, cfg.code_rate
    )
    demands = tuple(replace(d, current=current) if d.id == "move" else d for d in problem.demands)
    figure = build_spectrum_figure(plan, replace(problem, demands=demands))
    assert "moved +2 MHz" in texts_by_gid(figure, "label-")["label-move"]
    assert {p.get_gid() for p in figure.findobj(Rectangle)} >= {"ghost-move"}


CLI_REQUEST: dict[str, Any] = {
    "name": "picture test: invented two-link block",
    "block": {"start_hz": 2.40e9, "stop_hz": 2.41e9, "raster_hz": 10e3},
    "transmitter": {"filter_span_symbols": 16, "rolloffs": [0.2, 0.35]},
    "demands": [
        {"id": "north", "min_rate_bps": 1e6, "target_rate_bps": 2e6, "esn0_db": 12.0},
        {"id": "south", "min_rate_bps": 1e6, "target_rate_bps": 3e6, "cn0_dbhz": 78.0},
    ],
    "time_limit_s": 2.0,
}


def test_the_command_draws_a_replan_against_its_previous_plan(tmp_path: Path) -> None:
    first, previous = tmp_path / "first.json", tmp_path / "previous.json"
    first.write_text(json.dumps(CLI_REQUEST), encoding="utf-8")
    assert main(["plan", str(first), "-o", str(previous)]) == 0
    demands = [
        *CLI_REQUEST["demands"],
        {
            "id": "east",
            "min_rate_bps": 5e5,
            "target_rate_bps": 1e6,
            "esn0_db": 12.0,
        },
    ]
    second = tmp_path / "second.json"
    second.write_text(json.dumps({**CLI_REQUEST, "demands": demands}), encoding="utf-8")
    svg_path = tmp_path / "replan.svg"
    argv = ["replan", str(second), "--previous", str(previous), "--svg", str(svg_path)]
    assert main(argv) == 0
    texts = svg_texts(svg_path.read_bytes())
    assert any("since the earlier plan: 1 added" in t for t in texts)
    assert "earlier" in texts  # the caption of the earlier plan's row of bars
