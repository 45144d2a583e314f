"""The plan document: calendar times beside minute-grid offsets, hand-written plans accepted.

Issue 18: `check` takes a plan of job, node and start alone (hours or ISO 8601); `solve --out`
writes ISO 8601 start and end beside offsets rounded to the minute grid; `check --json` speaks
hours and calendar times like every other output.
"""

from __future__ import annotations

import json
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from assignplan.bounds import lower_bound
from assignplan.cli import app
from assignplan.documents import PlanDoc
from assignplan.expand import load_batch
from assignplan.instance import build_instance
from assignplan.plan import result_from_doc

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
runner = CliRunner()


@pytest.fixture(scope="module")
def odd_speeds(tmp_path_factory) -> Path:
    """small.json with a node of speed 1.3: runs of 47 or 346 minutes, offsets of 1/60 h."""
    doc = json.loads((EXAMPLES / "small.json").read_text())
    doc["nodes"][0]["speed"] = 1.3
    path = tmp_path_factory.mktemp("batch") / "batch.json"
    path.write_text(json.dumps(doc))
    return path


@pytest.fixture(scope="module")
def solved(odd_speeds, tmp_path_factory) -> tuple[Path, dict]:
    plan = tmp_path_factory.mktemp("plan") / "plan.json"
    result = runner.invoke(app, ["solve", str(odd_speeds), "--method", "greedy",
                                 "--out", str(plan), "--json"])
    assert result.exit_code == 0, result.output
    return plan, json.loads(plan.read_text())


def _on_minute_grid(hours: float) -> bool:
    return round(hours, 4) == hours and abs(hours * 60 - round(hours * 60)) <= 0.003


def test_solve_writes_calendar_times_beside_offsets_on_the_minute_grid(odd_speeds, solved):
    plan, doc = solved
    origin = datetime.fromisoformat(doc["window_start"])
    assert any(not float(a["end_h"] * 4).is_integer() for a in doc["assignments"])
    for a in doc["assignments"]:
        assert {"job", "node", "start_h", "end_h", "start", "end"} == a.keys()
        for key in ("start", "end"):
            assert _on_minute_grid(a[f"{key}_h"]), a
            minute = round(a[f"{key}_h"] * 60)
            assert datetime.fromisoformat(a[key]) == origin + timedelta(minutes=minute)
    for hours in [doc["makespan_h"], doc["lower_bound_h"], *doc["lower_bound_parts_h"].values(),
                  doc["objective"]["makespan_h"]]:
        assert _on_minute_grid(hours)
    # The rounded offsets read back to their minutes: the plan passes the check.
    result = runner.invoke(app, ["check", str(odd_speeds), str(plan)])
    assert result.exit_code == 0, result.output
    assert result.stdout.startswith("plan OK: 13 jobs on 4 nodes")


def _hand_written(doc: dict, keys: tuple[str, ...]) -> dict:
    return {"assignments": [{k: a[k] for k in keys} for a in doc["assignments"]]}


@pytest.mark.parametrize("keys", [("job", "node", "start_h"), ("job", "node", "start"),
                                  ("job", "node", "start", "end_h")])
def test_hand_written_plan_of_job_node_start_is_checked(tmp_path, odd_speeds, solved, keys):
    _, doc = solved
    plan = tmp_path / "hand.json"
    plan.write_text(json.dumps(_hand_written(doc, keys)))
    result = runner.invoke(app, ["check", str(odd_speeds), str(plan)])
    assert result.exit_code == 0, result.output
    assert result.stdout.strip() == (
        f"plan OK: 13 jobs on 4 nodes, makespan {round(doc['makespan_h'], 2):g} h, no violations")


def test_hand_written_plan_with_a_wrong_end_or_makespan_fails_the_check(tmp_path, odd_speeds,
                                                                          solved):
    _, doc = solved
    hand = _hand_written(doc, ("job", "node", "start", "end"))
    first = hand["assignments"][0]
    first["end"] = (datetime.fromisoformat(first["end"]) + timedelta(minutes=5)).isoformat()
    hand["makespan_h"] = 1.0
    plan = tmp_path / "hand.json"
    plan.write_text(json.dumps(hand))
    result = runner.invoke(app, ["check", str(odd_speeds), str(plan)])
    assert result.exit_code == 1
    assert "2 violations (duration 1, makespan 1)" in result.stdout
    assert f"job {first['job']} is stated to end at" in result.stdout


def test_start_given_twice_and_disagreeing_is_bad_input(tmp_path, odd_speeds, solved):
    _, doc = solved
    hand = _hand_written(doc, ("job", "node", "start_h", "start"))
    hand["assignments"][2]["start_h"] += 1.0
    plan = tmp_path / "hand.json"
    plan.write_text(json.dumps(hand))
    result = runner.invoke(app, ["check", str(odd_speeds), str(plan)])
    assert result.exit_code == 2
    (line,) = result.stderr.splitlines()
    assert line.startswith(f"{plan}: assignments[2].start: {hand['assignments'][2]['start']} is")
    assert line.endswith(f"but start_h says {hand['assignments'][2]['start_h']:g} h; give one of"
                         " them, or make them agree")


def test_result_from_doc_reads_calendar_times_and_derives_what_is_missing(odd_speeds, solved):
    _, doc = solved
    inst = build_instance(load_batch(odd_speeds))
    full = result_from_doc(inst, PlanDoc.model_validate_json(json.dumps(doc)))
    hand = result_from_doc(inst, PlanDoc.model_validate_json(json.dumps(
        _hand_written(doc, ("job", "node", "start")))))
    assert np.array_equal(hand.assign, full.assign) and np.array_equal(hand.start, full.start)
    assert np.array_equal(hand.end, full.end)  # the model's durations
    assert hand.lower_bound == lower_bound(inst).value == full.lower_bound
    assert hand.method == "hand-written"


def test_check_json_speaks_hours_and_calendar_times(tmp_path, odd_speeds, solved):
    _, doc = solved
    hand = _hand_written(doc, ("job", "node", "start_h"))
    hand["assignments"][0]["start_h"] = -1.0
    plan = tmp_path / "hand.json"
    plan.write_text(json.dumps(hand))
    result = runner.invoke(app, ["check", str(odd_speeds), str(plan), "--json"])
    assert result.exit_code == 1
    (violation,) = json.loads(result.stdout)["violations"]
    assert "minute" not in violation
    assert (violation["kind"], violation["at_h"], violation["at"]) == (
        "negative_start", -1.0, "2026-12-07T07:00:00")
    assert violation["message"] == (
        f"job {hand['assignments'][0]['job']} starts at Mon 07 Dec 07:00 (-1.0 h), before the"
        " window opens at Mon 07 Dec 08:00")


def test_report_of_a_hand_written_plan(tmp_path, odd_speeds, solved):
    _, doc = solved
    plan = tmp_path / "hand.json"
    plan.write_text(json.dumps(_hand_written(doc, ("job", "node", "start"))))
    out = tmp_path / "report.html"
    result = runner.invoke(app, ["report", str(odd_speeds), str(plan), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert out.stat().st_size > 0
