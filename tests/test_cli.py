"""The commands end to end, through typer's runner and through the installed entry point."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from assignplan.cli import app

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
SMALL = EXAMPLES / "small.json"
WEEK = EXAMPLES / "institute-week.json"
JSON_KEYS = {"method", "makespan_h", "lower_bound_h", "gap_pct", "core_utilisation_pct",
             "jobs_past_window", "late_jobs", "seconds"}

runner = CliRunner()


def solve(*args: str):
    result = runner.invoke(app, ["solve", *args])
    assert result.exit_code == 0, result.output
    return result


def test_solve_prints_three_tables():
    out = solve(str(SMALL), "--method", "greedy").stdout
    for title in ("Plan summary (greedy)", "Nodes", "Jobs"):
        assert title in out
    for name in ("cpu-1", "bigmem", "gpu", "summarise", "preprocess-3"):
        assert name in out


def test_job_table_truncates_unless_all():
    out = solve(str(WEEK), "--method", "greedy").stdout
    assert "first 30 of 482" in out
    everything = solve(str(WEEK), "--method", "greedy", "--all").stdout
    assert "first 30" not in everything and "genome-align-96" in everything


def test_json_summary_has_the_documented_keys():
    data = json.loads(solve(str(SMALL), "--method", "greedy", "--json").stdout)
    assert JSON_KEYS <= data.keys()
    assert data["makespan_h"] >= data["lower_bound_h"] > 0
    assert data["jobs"] == 13 and data["nodes"] == 4


def test_summary_and_plan_name_what_sets_the_bound(tmp_path):
    """The bound's parts travel to the summary, PLAN.json and summary.csv: the largest part
    is the bound (greedy proves nothing of its own), and lower_bound_set_by names it."""
    plan, tables = tmp_path / "plan.json", tmp_path / "tables"
    data = json.loads(solve(str(SMALL), "--method", "greedy", "--json", "--out", str(plan),
                            "--csv", str(tables)).stdout)
    parts = data["lower_bound_parts_h"]
    assert {"job", "critical_path", "cores", "dff", "clique", "grid"} <= parts.keys()
    assert max(parts.values()) == data["lower_bound_h"]
    named = data["lower_bound_set_by"].split(", ")
    assert named and all(parts[k] == data["lower_bound_h"] for k in named)
    assert json.loads(plan.read_text())["lower_bound_parts_h"] == parts
    row = pd.read_csv(tables / "summary.csv").iloc[0]
    assert row["lower_bound_parts_h.dff"] == pytest.approx(parts["dff"])
    assert "set by" in solve(str(SMALL), "--method", "greedy").stdout


def test_exact_optimum_above_every_part_is_set_by_the_solver():
    """small.json: CP-SAT proves 15.5 h, above every part of the bound (15.0 h at most)."""
    data = json.loads(solve(str(SMALL), "--method", "exact", "--json").stdout)
    assert data["status"] == "optimal"
    assert data["lower_bound_h"] > max(data["lower_bound_parts_h"].values())
    assert data["lower_bound_set_by"] == "solver"


def test_plan_file_passes_check_and_a_broken_edit_fails(tmp_path):
    plan = tmp_path / "plan.json"
    solve(str(SMALL), "--method", "greedy", "--out", str(plan))
    doc = json.loads(plan.read_text())
    assert {"method", "makespan_h", "lower_bound_h", "assignments"} <= doc.keys()
    assert {"job", "node", "start_h", "end_h", "start", "end"} == doc["assignments"][0].keys()
    ok = runner.invoke(app, ["check", str(SMALL), str(plan)])
    assert ok.exit_code == 0 and ok.stdout.startswith("plan OK")
    # Hand edit: the GPU job onto a CPU node, and a job removed.
    train = next(a for a in doc["assignments"] if a["job"] == "train")
    train["node"] = "cpu-1"
    doc["assignments"] = [a for a in doc["assignments"] if a["job"] != "sweep-1"]
    plan.write_text(json.dumps(doc))
    bad = runner.invoke(app, ["check", str(SMALL), str(plan)])
    assert bad.exit_code == 1
    assert "sweep-1" in bad.stdout and "train" in bad.stdout
    as_json = json.loads(runner.invoke(app, ["check", str(SMALL), str(plan), "--json"]).stdout)
    assert {v["kind"] for v in as_json["violations"]} >= {"missing_job", "cannot_hold"}


def test_check_rejects_a_malformed_plan_with_exit_2(tmp_path):
    plan = tmp_path / "plan.json"
    plan.write_text('{"method": "greedy", "assignments": [{"job": 1}]}')
    result = runner.invoke(app, ["check", str(SMALL), str(plan)])
    assert result.exit_code == 2
    assert "assignments[0].job" in result.stderr and "Traceback" not in result.output


def test_csv_tables(tmp_path):
    solve(str(SMALL), "--method", "greedy", "--csv", str(tmp_path / "tables"))
    jobs = pd.read_csv(tmp_path / "tables" / "jobs.csv")
    nodes = pd.read_csv(tmp_path / "tables" / "nodes.csv")
    summary = pd.read_csv(tmp_path / "tables" / "summary.csv")
    assert len(jobs) == 13 and len(nodes) == 4 and len(summary) == 1
    assert set(jobs["node"]) <= set(nodes["node"])
    # Core-hours per node add up from the job rows (hours on the node x cores).
    per_node = (jobs["hours"] * jobs["cores"]).groupby(jobs["node"]).sum()
    for row in nodes.itertuples():
        assert row.core_hours == pytest.approx(per_node.get(row.node, 0.0), abs=0.01)


def test_installed_entry_point_solves(tmp_path):
    exe = Path(sys.executable).with_name("assignplan")
    proc = subprocess.run([str(exe), "solve", str(SMALL), "--method", "greedy", "--json",
                           "--out", str(tmp_path / "p.json")],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert JSON_KEYS <= json.loads(proc.stdout).keys()
    check = subprocess.run([str(exe), "check", str(SMALL), str(tmp_path / "p.json")],
                           capture_output=True, text=True, timeout=300)
    assert check.returncode == 0 and "no violations" in check.stdout


def test_ga_is_the_default_and_reproducible(tmp_path):
    """Same batch + seed + options => byte-identical assignments in PLAN.json."""
    # a budget no run reaches: its time-based stops (the deadline, and the makespan phase's
    # patience, a share of it) would make the plan depend on the machine's load
    args = [str(SMALL), "--generations", "40", "--seed", "7", "--quiet", "--budget", "600"]
    first, second = tmp_path / "a.json", tmp_path / "b.json"
    solve(*args, "--out", str(first))
    solve(*args, "--out", str(second))
    a, b = json.loads(first.read_text()), json.loads(second.read_text())
    assert a["method"] == "ga" and a["seed"] == 7
    assert json.dumps(a["assignments"]) == json.dumps(b["assignments"])
    assert 0 < len(a["history"]) <= 41 + 12  # 40 makespan generations, 30 % more at most
    assert {"generation", "best_makespan_h", "median_makespan_h"} <= a["history"][0].keys()
    assert runner.invoke(app, ["check", str(SMALL), str(first)]).exit_code == 0


def test_ga_options_are_validated():
    result = runner.invoke(app, ["solve", str(SMALL), "--crossover", "halfway"])
    assert result.exit_code == 2
    assert "--crossover" in result.stderr and "Traceback" not in result.output
    result = runner.invoke(app, ["solve", str(SMALL), "--crossover-bias", "1.5"])
    assert result.exit_code == 2 and "--crossover-bias" in result.stderr
    result = runner.invoke(app, ["solve", str(SMALL), "--repack-nodes", "65"])
    assert result.exit_code == 2 and "--repack-nodes" in result.stderr
    result = runner.invoke(app, ["solve", str(SMALL), "--balanced-seeds", "-1"])
    assert result.exit_code == 2 and "--balanced-seeds" in result.stderr
    result = runner.invoke(app, ["solve", str(SMALL), "--descent-trials", "-5"])
    assert result.exit_code == 2 and "--descent-trials" in result.stderr
    result = runner.invoke(app, ["solve", str(SMALL), "--reserve-share", "1.5"])
    assert result.exit_code == 2 and "--reserve-share" in result.stderr


def test_repack_descent_and_balanced_seeds_off_still_plan(tmp_path):
    """A settings file turns the improvers and the extra seeds off: the plan is still valid."""
    out, settings = tmp_path / "plan.json", tmp_path / "ga.toml"
    settings.write_text("[improvement]\nrepack_nodes = 0\ndescent_trials = 0\n"
                        "[seeding]\nbalanced_seeds = 0\nreserve_share = 0\n")
    solve(str(SMALL), "--generations", "10", "--ga-settings", str(settings), "--quiet",
          "--out", str(out))
    assert runner.invoke(app, ["check", str(SMALL), str(out)]).exit_code == 0


def test_settings_file_errors_name_the_key_and_misplaced_options_are_refused(tmp_path):
    bad = tmp_path / "ga.toml"
    bad.write_text("[variation]\nmutation_flips = -1\nflips = 3\n[stoping]\n")
    result = runner.invoke(app, ["solve", str(SMALL), "--ga-settings", str(bad)])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert any(line.startswith(f"{bad}: variation.mutation_flips: ") for line in lines)
    assert f"{bad}: variation.flips: unknown setting" in lines
    assert f"{bad}: stoping: unknown setting" in lines
    for args, flag in ((["--method", "greedy", "--generations", "5"], "--generations"),
                       (["--method", "exact", "--ga-settings", str(bad)], "--ga-settings"),
                       (["--method", "ga", "--force"], "--force")):
        refused = runner.invoke(app, ["solve", str(SMALL), *args])
        assert refused.exit_code == 2 and refused.stderr.startswith(f"{flag}: only the")


def test_compare_small_has_three_rows_and_week_explains_skipped_exact():
    small = runner.invoke(app, ["compare", str(SMALL), "--budget", "5", "--json"])
    assert small.exit_code == 0, small.output
    rows = {r["method"]: r for r in json.loads(small.stdout)}
    assert set(rows) == {"greedy", "ga", "exact"}
    for r in rows.values():
        assert {"method", "makespan_h", "lower_bound_h", "gap_pct", "seconds", "status"} <= r.keys()
    if rows["exact"]["status"] == "optimal":
        best_heuristic = min(rows["ga"]["makespan_h"], rows["greedy"]["makespan_h"])
        assert rows["exact"]["makespan_h"] <= best_heuristic
    week = runner.invoke(app, ["compare", str(WEEK), "--budget", "3"])
    assert week.exit_code == 0, week.output
    assert "greedy" in week.stdout and "ga" in week.stdout
    assert "exact: skipped: 482 jobs is above the exact method's limit of 300" in week.stdout


def test_report_of_an_incomplete_plan_names_the_plan_file(tmp_path):
    plan = tmp_path / "plan.json"
    plan.write_text(json.dumps({"method": "hand", "makespan_h": 1, "lower_bound_h": 1,
                                "gap_pct": 0, "assignments": [
                                    {"job": "ghost", "node": "cpu-1", "start_h": 0, "end_h": 1}]}))
    result = runner.invoke(app, ["report", str(SMALL), str(plan), "--out",
                                 str(tmp_path / "r.html")])
    assert result.exit_code == 2
    assert f"{plan}: assignments[0].job: no job named 'ghost'" in result.stderr
    assert not (tmp_path / "r.html").exists()
    check = runner.invoke(app, ["check", str(SMALL), str(plan)])
    assert check.exit_code == 1 and "1 job on 1 node" in check.stdout
