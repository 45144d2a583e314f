"""assignplan export: a plan through the admin's own text template."""

from __future__ import annotations

import csv
import json
import math
import os
import shutil
import subprocess
import time
from datetime import datetime, timedelta
from functools import cache
from pathlib import Path

import pytest
from typer.testing import CliRunner

from assignplan.check import check_plan
from assignplan.cli import app
from assignplan.documents import Assignment, PlanDoc
from assignplan.expand import load_batch
from assignplan.export import JOB_FIELDS
from assignplan.instance import build_instance
from assignplan.methods.greedy import solve_greedy
from assignplan.plan import to_plan_doc

ROOT = Path(__file__).resolve().parents[1]
WEEK = ROOT / "examples" / "institute-week.json"
TEMPLATES = ROOT / "examples" / "templates"


@cache
def _week_plan(folder: str) -> Path:
    inst = build_instance(load_batch(WEEK))
    plan = Path(folder) / "week-plan.json"
    plan.write_text(to_plan_doc(inst, solve_greedy(inst, lower_bound=0)).model_dump_json())
    return plan


@pytest.fixture(scope="module")
def week_plan(tmp_path_factory):
    return _week_plan(str(tmp_path_factory.mktemp("week")))


def _export(*args: str):
    return CliRunner().invoke(app, ["export", *map(str, args)])


def test_every_field_renders_for_every_job_of_the_week(week_plan, tmp_path):
    template = tmp_path / "all.template"
    template.write_text("@@ header\n" + "\t".join(JOB_FIELDS) + "\n@@ job\n"
                        + "\t".join(f"{{{f}}}" for f in JOB_FIELDS) + "\n")
    out = tmp_path / "all.tsv"
    res = _export(WEEK, week_plan, "--template", template, "--out", out)
    assert res.exit_code == 0, res.output
    rows = list(csv.DictReader(out.read_text().splitlines(), delimiter="\t"))
    batch = load_batch(WEEK)
    inst = build_instance(batch)
    plan = PlanDoc.model_validate_json(week_plan.read_text())
    planned = {a.job: a for a in plan.assignments}
    assert sorted(r["job"] for r in rows) == sorted(inst.job_names)
    origin = inst.window_start
    starts = [float(r["start_h"]) for r in rows]
    assert starts == sorted(starts)  # planned start order
    assert [int(r["seq"]) for r in rows] == list(range(1, len(rows) + 1))
    for r in rows:
        j = inst.job_names.index(r["job"])
        a = planned[r["job"]]
        assert r["node"] == a.node
        assert datetime.fromisoformat(r["start"]) == a.start
        assert datetime.fromisoformat(r["end"]) == a.end
        assert math.isclose(float(r["start_h"]), a.start_h, abs_tol=1e-4)
        assert int(r["start_min"]) == round(a.start_h * 60)
        assert int(r["minutes"]) == round((a.end_h - a.start_h) * 60)
        assert math.isclose(float(r["hours"]), a.end_h - a.start_h, abs_tol=2e-4)
        assert (int(r["cores"]), float(r["memory_gib"]), int(r["gpus"])) == (
            inst.demand[j, 0], inst.demand[j, 1] / 1024, inst.demand[j, 2])
        assert r["after"].split() == [inst.job_names[k] for k in inst.predecessors(j)]
        assert r["group"] == inst.job_groups[j]
        due = r["due"]
        assert (due == "") == (inst.due[j] > 10**12)
        if due:
            assert datetime.fromisoformat(due) == origin + timedelta(minutes=int(inst.due[j]))


def test_readme_shows_the_manifest_of_the_greedy_due_first_plan(tmp_path):
    readme = (ROOT / "README.md").read_text(encoding="utf-8").splitlines()
    first = readme.index("seq,job,group,node,start,end,hours,cores,memory_gib,gpus,after,due")
    plan, out = tmp_path / "plan.json", tmp_path / "manifest.csv"
    runner = CliRunner()
    res = runner.invoke(app, ["solve", str(WEEK), "--method", "greedy", "--priority", "due",
                              "--out", str(plan), "--quiet"])
    assert res.exit_code == 0, res.output
    res = _export(WEEK, plan, "--out", out, "--template",
                  TEMPLATES / "manifest.csv.template")
    assert res.exit_code == 0, res.output
    assert out.read_text().splitlines()[:2] == readme[first:first + 2]


def test_manifest_example_first_lines(week_plan, tmp_path):
    out = tmp_path / "manifest.csv"
    res = _export(WEEK, week_plan, "--template", TEMPLATES / "manifest.csv.template",
                  "--out", out)
    assert res.exit_code == 0, res.output
    lines = out.read_text().splitlines()
    assert lines[0] == "seq,job,group,node,start,end,hours,cores,memory_gib,gpus,after,due"
    assert len(lines) == 1 + 482
    assert lines[1].startswith("1,")


@pytest.mark.parametrize(("text", "line", "says"), [
    ("@@ job\n{job} on {nodes}\n", 2, "unknown field {nodes} in the job section"),
    ("@@ header\nrun {job}\n@@ job\n{job}\n", 2, "unknown field {job} in the header section"),
    ("{job} {start\n", 1, "a '{' without its '}'"),
    ("{job} }\n", 1, "a '}' without its '{'"),
    ("{job.__class__}\n", 1, "unknown field {job.__class__}"),
    ("{}\n", 1, "a field needs a name"),
    ("@@ body\n{job}\n", 1, "unknown section 'body'"),
    ("{job:.2f}\n", 1, "Unknown format code 'f'"),
    ("@@ name\n{group}.sh\n@@ job\n{job}\n", 2, "two jobs get the file name"),
])
def test_bad_template_one_line_exit_2_nothing_written(week_plan, tmp_path, text, line, says):
    template = tmp_path / "bad.template"
    template.write_text(text)
    out = tmp_path / "out"
    res = _export(WEEK, week_plan, "--template", template, "--out", out)
    assert res.exit_code == 2
    assert res.output.strip().splitlines() == [res.output.strip()]
    assert res.output.startswith(f"{template}:{line}: ") and says in res.output
    assert not out.exists()


def test_unwritable_output_exit_2_nothing_written(week_plan, tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("")
    for template in ("job-script.sh.template", "manifest.csv.template"):
        res = _export(WEEK, week_plan, "--template", TEMPLATES / template,
                      "--out", blocker / "inside")
        assert res.exit_code == 2
        inside = blocker / "inside"
        assert res.output.strip() == f"--out {inside}: {blocker} is a file, not a folder"
    res = _export(WEEK, week_plan, "--template", TEMPLATES / "manifest.csv.template",
                  "--out", tmp_path)
    assert res.exit_code == 2 and "is a folder" in res.output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a-file"]


# A tiny plan to rehearse: prep -> (sim-1, sim-2) -> merge, and a job ready at 30 min.
TINY = {
    "window": {"start": "2026-12-07T08:00", "hours": 12},
    "nodes": [{"name": "n", "count": 2, "cores": 8, "memory_gib": 32}],
    "jobs": [
        {"name": "prep", "cores": 8, "memory_gib": 8, "hours": 0.5},
        {"name": "sim", "count": 2, "cores": 4, "memory_gib": 8, "hours": 1,
         "follows": ["prep"]},
        {"name": "late-start", "cores": 4, "memory_gib": 8, "hours": 0.5, "ready_h": 0.5},
        {"name": "merge", "cores": 8, "memory_gib": 8, "hours": 0.25, "follows": ["sim"]},
    ],
}
SCALE = 3600.0  # plan seconds per real second: the 1.75 h plan runs in under 2 s


@pytest.mark.skipif(shutil.which("awk") is None, reason="the example script needs awk")
def test_shell_example_starts_jobs_in_a_checked_order(tmp_path):
    batch_path = tmp_path / "tiny.json"
    batch_path.write_text(json.dumps(TINY))
    batch = load_batch(batch_path)
    inst = build_instance(batch)
    plan = to_plan_doc(inst, solve_greedy(inst, lower_bound=0))
    plan_path = tmp_path / "plan.json"
    plan_path.write_text(plan.model_dump_json())
    scripts = tmp_path / "scripts"
    res = _export(batch_path, plan_path, "--template", TEMPLATES / "job-script.sh.template",
                  "--out", scripts)
    assert res.exit_code == 0, res.output
    assert len(list(scripts.glob("*.sh"))) == inst.n_jobs
    markers = tmp_path / "markers"
    epoch = time.time() + 0.5
    env = {**os.environ, "PLAN_EPOCH": f"{epoch:.3f}", "TIME_SCALE": f"{SCALE:g}",
           "MARKERS": str(markers)}
    running = [subprocess.Popen(["sh", str(p)], env=env) for p in sorted(scripts.glob("*.sh"))]
    for proc in running:
        assert proc.wait(timeout=30) == 0
    started = {p.stem: float(p.read_text()) for p in markers.glob("*.started")}
    assert sorted(started) == sorted(inst.job_names)
    # real start -> plan minutes, rounded down: a successor that waited for its
    # predecessor's marker (written after its scaled run) still starts after its end
    rehearsed = PlanDoc(assignments=[
        Assignment(job=a.job, node=a.node,
                   start_h=math.floor((started[a.job] - epoch) * SCALE / 60) / 60)
        for a in plan.assignments])
    kinds = {v.kind for v in check_plan(batch, rehearsed)}
    assert not kinds & {"dependency", "before_ready", "negative_start"}, kinds
    for a, r in zip(plan.assignments, rehearsed.assignments, strict=True):
        assert r.start_h >= a.start_h  # no job before its planned start
    done = {p.stem: p.stat().st_mtime for p in markers.glob("*.done")}
    for j, name in enumerate(inst.job_names):  # and none before its predecessors' markers
        for k in inst.predecessors(j).tolist():
            assert started[name] >= done[inst.job_names[k]] - 0.01
