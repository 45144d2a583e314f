"""`assignplan diff`: jobs moved, starts shifted past a threshold, objective and load change."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
from typer.testing import CliRunner

from assignplan.cli import app
from assignplan.expand import load_batch
from assignplan.instance import build_instance
from assignplan.plan import to_plan_doc
from assignplan.solve import solve

SMALL = Path(__file__).resolve().parents[1] / "examples" / "small.json"
runner = CliRunner()


def _plans(tmp_path: Path) -> tuple[Path, Path]:
    """The greedy plan of small.json, and the same with 'sweep-1' on another cpu node two
    hours later and 'sweep-2' 30 minutes later (both stated ends dropped)."""
    inst = build_instance(load_batch(SMALL))
    doc = to_plan_doc(inst, solve(inst, "greedy")).model_dump(mode="json")
    a = tmp_path / "a.json"
    a.write_text(json.dumps(doc))
    for row in doc["assignments"]:
        row.pop("end_h"), row.pop("end"), row.pop("start")
        if row["job"] == "sweep-1":
            row["node"] = "cpu-2" if row["node"] != "cpu-2" else "cpu-1"
            row["start_h"] += 2
        elif row["job"] == "sweep-2":
            row["start_h"] += 0.5
    doc.pop("makespan_h")
    b = tmp_path / "b.json"
    b.write_text(json.dumps(doc))
    return a, b


def test_a_plan_against_itself_differs_in_nothing(tmp_path):
    a, _ = _plans(tmp_path)
    result = runner.invoke(app, ["diff", str(SMALL), str(a), str(a), "--json"])
    assert result.exit_code == 0, result.output
    record = json.loads(result.stdout)
    assert record["moved"] == [] and record["shifted"] == [] and record["nodes"] == []
    assert record["makespan_h"]["change"] == 0


def test_moved_and_shifted_jobs_and_node_load(tmp_path):
    a, b = _plans(tmp_path)
    result = runner.invoke(app, ["diff", str(SMALL), str(a), str(b), "--json"])
    record = json.loads(result.stdout)
    assert [m["job"] for m in record["moved"]] == ["sweep-1"]
    assert [s["job"] for s in record["shifted"]] == ["sweep-1"]  # 0.5 h is under 1 h
    assert record["shifted"][0]["shift_h"] == 2.0
    moved = record["moved"][0]
    changed = {n["node"]: n for n in record["nodes"]}
    assert changed[moved["node_a"]]["jobs_b"] == changed[moved["node_a"]]["jobs_a"] - 1
    assert changed[moved["node_b"]]["jobs_b"] == changed[moved["node_b"]]["jobs_a"] + 1
    result = runner.invoke(app, ["diff", str(SMALL), str(a), str(b), "--threshold", "0.25",
                                 "--csv", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    assert "1 job of 13 moved to another node; 2 starts shifted by more than 0.25 h" \
        in result.stdout
    jobs = pd.read_csv(tmp_path / "out" / "diff-jobs.csv")
    assert jobs.loc[jobs.job == "sweep-2", "shift_h"].item() == 0.5
    assert set(pd.read_csv(tmp_path / "out" / "diff-nodes.csv").node) == set(changed)


def test_a_plan_naming_an_unknown_job_is_refused(tmp_path):
    a, b = _plans(tmp_path)
    doc = json.loads(b.read_text())
    doc["assignments"][0]["job"] = "nosuch"
    b.write_text(json.dumps(doc))
    result = runner.invoke(app, ["diff", str(SMALL), str(a), str(b)])
    assert result.exit_code == 2
    assert result.stderr.strip() == f"{b}: assignments[0].job: no job named 'nosuch' in the batch"
