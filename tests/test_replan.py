"""Replanning mid-week: pins never move, every replanned plan passes the checker with its pins,
an empty state at the window start gives solve's plan, bad states are refused one line each."""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from assignplan.check import check_plan
from assignplan.cli import app
from assignplan.errors import InputError
from assignplan.expand import load_batch
from assignplan.instance import build_instance
from assignplan.methods.ga import ga_settings
from assignplan.plan import objective, to_plan_doc
from assignplan.replan import load_replan, replan
from assignplan.solve import solve
from tests.strategies import instance_of, random_batch_doc

SMALL = Path(__file__).resolve().parents[1] / "examples" / "small.json"
runner = CliRunner()


def _write(folder: Path, name: str, payload) -> Path:
    path = folder / name
    path.write_text(json.dumps(payload), encoding="utf-8")
    return path


def _old_plan(folder: Path, batch_path: Path, method: str = "greedy", **kw) -> Path:
    inst = build_instance(load_batch(batch_path))
    result = solve(inst, method, **kw)
    return _write(folder, "old.json", to_plan_doc(inst, result).model_dump(mode="json"))


@pytest.mark.parametrize("method,kw", [
    ("greedy", {}), ("ga", {"settings": ga_settings(generations=8), "budget": 1e6, "seed": 3})])
def test_empty_state_at_window_start_is_solve(tmp_path, method, kw):
    """The issue's check: now = window start, nothing done or running, same seed and method:
    the replanned plan is solve's plan, start for start."""
    inst = build_instance(load_batch(SMALL))
    solved = solve(inst, method, **kw)
    old = _old_plan(tmp_path, SMALL, method, **kw)
    state = _write(tmp_path, "state.json", {"now_h": 0})
    out = replan(load_replan(SMALL, old, state, now=None), method,
                 seed=kw.get("seed", 0), budget=kw.get("budget", 30.0),
                 settings=kw.get("settings"))
    assert np.array_equal(out.result.assign, solved.assign)
    assert np.array_equal(out.result.start, solved.start)
    assert out.churn.key == (0, 0)


def _random_state(rng: np.random.Generator, batch, inst, old) -> dict:
    """A state drawn from the old plan: a random now; jobs started before it done or running
    in plan start order (a job only when every job it follows is done by its start), running
    ones sometimes overrunning; sometimes a node down since before now."""
    horizon = int(old.end.max())
    now = int(rng.integers(0, horizon + 1))
    jobs = {j.name: j for j in batch.jobs}
    state_jobs, done_by = [], {}
    for j in np.argsort(old.start, kind="stable").tolist():
        name, s, e = inst.job_names[j], int(old.start[j]), int(old.end[j])
        if s >= now or rng.random() < 0.2:
            continue
        if any(done_by.get(p, 10**9) > s for p in jobs[name].follows):
            continue
        node = inst.node_names[int(old.assign[j])]
        if e <= now:
            done_by[name] = e
            state_jobs.append({"job": name, "status": "done", "node": node,
                               "start_h": s / 60, "end_h": e / 60})
        else:
            late = int(rng.integers(0, 300)) if rng.random() < 0.5 else 0
            state_jobs.append({"job": name, "status": "running", "node": node,
                               "start_h": s / 60, "end_h": (e + late) / 60})
    nodes = []
    if rng.random() < 0.5:
        down = inst.node_names[int(rng.integers(inst.n_nodes))]
        nodes.append({"node": down, "status": "down", "start_h": max(0, now - 30) / 60})
    return {"now_h": now / 60, "jobs": state_jobs, "nodes": nodes}


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**32 - 1))
def test_pinned_jobs_never_move_and_plans_pass_the_checker(seed):
    """Property over random batches and states: every done or running job keeps its node and
    interval, nothing else starts before now, and the checker with the pins finds nothing."""
    rng = np.random.default_rng(seed)
    doc = random_batch_doc(rng, max_jobs=10)
    batch, inst = instance_of(doc)
    old = solve(inst, "greedy")
    state = _random_state(rng, batch, inst, old)
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        batch_path = _write(folder, "batch.json", doc)
        old_path = _write(folder, "old.json", to_plan_doc(inst, old).model_dump(mode="json"))
        state_path = _write(folder, "state.json", state)
        try:
            given_ = load_replan(batch_path, old_path, state_path, now=None)
        except InputError as err:  # a down window may leave a job no node: say so, not crash
            assert all("no node" in p for p in err.problems), err.problems
            return
        out = replan(given_, "greedy")
    pins = given_.pins
    index = {n: k for k, n in enumerate(out.inst.job_names)}
    for name, pin in pins.jobs.items():
        j = index[name]
        assert out.inst.node_names[int(out.result.assign[j])] == pin.node
        assert (int(out.result.start[j]), int(out.result.end[j])) == (pin.start, pin.end)
    free = [index[n] for n in out.inst.job_names if n not in pins.jobs]
    assert all(int(out.result.start[j]) >= pins.now for j in free)
    doc_new = to_plan_doc(out.inst, out.result)
    assert check_plan(given_.batch, doc_new, pins) == []


def test_checker_catches_a_moved_pin_and_a_start_before_now(tmp_path):
    old = _old_plan(tmp_path, SMALL)
    plan = json.loads(old.read_text())
    first = plan["assignments"][0]
    state = _write(tmp_path, "state.json", {"now_h": 30, "jobs": [
        {"job": first["job"], "status": "done", "start_h": first["start_h"],
         "end_h": first["end_h"]}]})
    given_ = load_replan(SMALL, old, state, now=None)
    out = replan(given_, "greedy")
    doc = to_plan_doc(out.inst, out.result)
    assert check_plan(given_.batch, doc, given_.pins) == []
    rows = doc.assignments
    k = next(k for k, a in enumerate(rows) if a.job == first["job"])
    other = next(k for k, a in enumerate(rows) if a.job != first["job"])
    bad = doc.model_copy(update={"assignments": [
        a.model_copy(update={"start_h": a.start_h + 1.0, "start": None, "end": None,
                             "end_h": None}) if i == k
        else a.model_copy(update={"start_h": 1.0, "start": None, "end": None, "end_h": None})
        if i == other else a for i, a in enumerate(rows)]})
    kinds = {v.kind for v in check_plan(given_.batch, bad, given_.pins)}
    assert {"pinned", "before_now"} <= kinds


def test_lower_bound_counts_from_now_and_pins(tmp_path):
    old = _old_plan(tmp_path, SMALL)
    state = _write(tmp_path, "state.json", {"now_h": 10})
    out = replan(load_replan(SMALL, old, state, now=None), "greedy")
    shortest = int(out.inst.dur.min())
    assert out.result.lower_bound >= 600 + shortest
    assert out.result.makespan >= out.result.lower_bound


def test_churn_tie_break_never_moves_more_than_free(tmp_path):
    """Same method and seed: the tie-break only takes plans no worse on the objective and
    with less churn, so it never moves more jobs than planning the rest from scratch."""
    old = _old_plan(tmp_path, SMALL)
    state = _write(tmp_path, "state.json", {"now_h": 2, "nodes": [
        {"node": "cpu-1", "status": "down", "start_h": 1, "end_h": 6}]})
    given_ = load_replan(SMALL, old, state, now=None)
    kept = replan(given_, "greedy")
    free = replan(given_, "greedy", free=True)
    fewer = replan(given_, "greedy", fewer_moves=True)
    assert kept.result.makespan <= free.result.makespan
    assert kept.churn.key <= free.churn.key
    # churn before the completion time: makespan and tardiness no worse, churn no higher
    assert objective(fewer.inst, fewer.result.end)[:2] <= objective(free.inst,
                                                                    free.result.end)[:2]
    assert fewer.churn.key <= kept.churn.key


def _cli_replan(tmp_path, state: dict, *extra: str):
    old = _old_plan(tmp_path, SMALL)
    path = _write(tmp_path, "state.json", state)
    new = tmp_path / "new.json"
    result = runner.invoke(app, ["replan", str(SMALL), str(old), "--state", str(path),
                                 "--method", "greedy", "--out", str(new), *extra])
    return result, new


def test_replan_command_says_moves_and_diff(tmp_path):
    result, new = _cli_replan(tmp_path, {"now": "2026-12-07T12:00:00", "nodes": [
        {"node": "cpu-2", "status": "down", "start_h": 3}]}, "--as-planned")
    assert result.exit_code == 0, result.output
    assert new.exists()
    out = result.stdout
    assert "moved to another node" in out and "shifted by more than an hour" in out
    assert "differences against the old plan" in out
    assert "what-if: cpu-2 down from Mon 07 Dec 11:00" in out


@pytest.mark.parametrize("state,expected", [
    ({"now_h": 5, "jobs": [{"job": "sweep-1", "status": "done", "end_h": 1},
                           {"job": "sweep-1", "status": "running", "start_h": 1}]},
     "state.json: jobs[1]: job 'sweep-1' is listed again"),
    ({"now_h": 5, "jobs": [{"job": "train", "status": "running", "node": "cpu-1",
                            "start_h": 1}]},
     "state.json: jobs[0].node: node 'cpu-1' cannot hold job 'train'"),
    ({"now_h": 5, "jobs": [{"job": "sweep-2", "status": "running", "start_h": 6}]},
     "state.json: jobs[0].start: Mon 07 Dec 14:00 is after now"),
    ({"now_h": 5, "jobs": [{"job": "nosuch", "status": "done", "end_h": 1}]},
     "state.json: jobs[0].job: no job named 'nosuch'"),
    ({"now_h": 5, "jobs": [{"job": "sweep-3", "status": "running", "node": "nosuch",
                            "start_h": 1}]},
     "state.json: jobs[0].node: no node named 'nosuch'"),
    ({"now_h": 5, "nodes": [{"node": "nosuch", "status": "down", "start_h": 1}]},
     "state.json: nodes[0]: no node or node group matches 'nosuch'"),
    ({"now_h": 5, "nodes": [{"node": "cpu-1", "status": "maintenance", "start_h": 4,
                             "end_h": 2}]},
     "state.json: nodes[0].end: ends at Mon 07 Dec 10:00, not after it starts"),
])
def test_bad_state_is_one_line_with_its_path_exit_2_nothing_written(tmp_path, state,
                                                                     expected):
    result, new = _cli_replan(tmp_path, state)
    assert result.exit_code == 2, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(str(tmp_path / expected.split(":")[0]))
    assert expected.split(": ", 1)[1] in lines[0], lines[0]
    assert not new.exists()


def test_new_jobs_in_the_state_are_planned_and_their_problems_named(tmp_path):
    new_job = {"name": "late-arrival", "cores": 4, "memory_gib": 8, "hours": 2}
    result, new = _cli_replan(tmp_path, {"now_h": 3, "new_jobs": [new_job]})
    assert result.exit_code == 0, result.output
    assert any(a["job"] == "late-arrival" and a["start_h"] >= 3
               for a in json.loads(new.read_text())["assignments"])
    result, _ = _cli_replan(tmp_path, {"now_h": 3, "new_jobs": [{**new_job, "cores": 999}]})
    assert result.exit_code == 2
    assert "state.json: new_jobs[0]: no node can hold job 'late-arrival'" in result.stderr


def test_csv_state_and_a_ga_replan_that_keeps_its_pins(tmp_path):
    """A state in CSV (one row per job or node) reads like its JSON twin, and a ga replan
    (which starts from the old plan) keeps the pins and passes the checker."""
    old = _old_plan(tmp_path, SMALL)
    rows = {a["job"]: a for a in json.loads(old.read_text())["assignments"]}
    first = min(rows.values(), key=lambda a: a["end_h"])
    csv = tmp_path / "state.csv"
    csv.write_text("name,status,node,start,end\n"
                   f"{first['job']},done,{first['node']},{first['start_h']},{first['end_h']}\n"
                   f"sweep-5,running,{rows['sweep-5']['node']},"
                   f"{rows['sweep-5']['start_h']},{rows['sweep-5']['end_h'] + 1}\n"
                   "gpu,down,,2026-12-07T12:00,2026-12-07T20:00\n")
    now = rows["sweep-5"]["start_h"] + 0.5
    given_ = load_replan(SMALL, old, csv, now=now)
    assert given_.pins.jobs["sweep-5"].running and first["job"] in given_.pins.jobs
    assert given_.batch.changes == ("gpu down from Mon 07 Dec 12:00 until Mon 07 Dec 20:00",)
    out = replan(given_, "ga", seed=1, budget=1e6, settings=ga_settings(generations=5))
    doc = to_plan_doc(out.inst, out.result)
    assert check_plan(given_.batch, doc, given_.pins) == []
    train = out.inst.job_names.index("train")  # only the gpu node holds it: after its window
    assert out.result.start[train] >= 12 * 60


def test_a_job_running_on_a_node_that_went_down_is_replanned_and_said_so(tmp_path):
    old = _old_plan(tmp_path, SMALL)
    rows = {a["job"]: a for a in json.loads(old.read_text())["assignments"]}
    job = rows["train"]
    now = job["start_h"] + 1
    result, new = _cli_replan(tmp_path, {"now_h": now, "jobs": [
        {"job": "train", "status": "running", "start_h": job["start_h"]}], "nodes": [
        {"node": job["node"], "status": "down", "start_h": now - 0.5, "end_h": now + 2}]},
        "--as-planned")
    assert result.exit_code == 0, result.output
    assert (f"train was running on {job['node']}, which is out of service from" in
            result.stdout and "its progress lost" in result.stdout)
    train = next(a for a in json.loads(new.read_text())["assignments"] if a["job"] == "train")
    assert train["start_h"] >= now + 2  # the only node that can hold it is down until then


def test_the_readme_example_replans_the_bundled_week(tmp_path):
    """README: the bundled week on Wednesday noon (examples/week-wednesday.json)."""
    examples = SMALL.parent
    week = examples / "institute-week.json"
    old = tmp_path / "week.json"
    result = runner.invoke(app, ["solve", str(week), "--method", "greedy", "--out", str(old)])
    assert result.exit_code == 0, result.output
    new = tmp_path / "week-new.json"
    result = runner.invoke(app, ["replan", str(week), str(old), "--state",
                                 str(examples / "week-wednesday.json"), "--as-planned",
                                 "--method", "greedy", "--out", str(new), "--json"])
    assert result.exit_code == 0, result.output
    summary = json.loads(result.stdout)["replan"]
    assert summary["now"] == "Wed 09 Dec 12:00"
    assert len(summary["progress_lost"]) >= 1  # a job was running on a node that went down
    assert summary["diff"]["only_in_b"] == ["urgent-reanalysis", "ml-finetune",
                                            "climate-extra-plots"]
    rows = {a["job"]: a for a in json.loads(new.read_text())["assignments"]}
    assert rows["materials-md-24"]["end"] == "2026-12-10T02:00:00"  # overran, pinned
