"""What a first-time user meets around a plan: output paths checked before any work, all
outputs or none, timing, the late jobs named, the plan on stdout, help at 80 columns."""

from __future__ import annotations

import io
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from rich.console import Console
from typer.testing import CliRunner

from assignplan import __version__
from assignplan.cli import Steps, app
from assignplan.expand import load_batch
from assignplan.reading import load_plan

from assignplan.check import check_plan  # isort: skip  (after the model: it reads its types)

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
SMALL = EXAMPLES / "small.json"
runner = CliRunner()


@pytest.mark.parametrize("flag", ["--out", "--report"])
def test_unwritable_output_file_fails_before_reading_the_batch(tmp_path, flag):
    """Checked before any work: the batch named here does not even exist."""
    afile = tmp_path / "afile"
    afile.write_text("x")
    cases = {
        "/proc/plan.json": "cannot write in folder /proc",
        str(afile / "plan.json"): f"{afile} is a file, not a folder",
        str(tmp_path / "missing" / "plan.json"): "folder",
        str(tmp_path): "is a folder; give a file name",
    }
    for path, fragment in cases.items():
        result = runner.invoke(app, ["solve", str(tmp_path / "nothing.json"), flag, path])
        assert result.exit_code == 2, (path, result.output)
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith(f"{flag} {path}: "), lines
        assert fragment in lines[0], lines[0]
        assert "Traceback" not in result.output


def test_unwritable_output_folder_is_refused(tmp_path):
    afile = tmp_path / "afile"
    afile.write_text("x")
    for flag in ("--csv", "--png"):
        result = runner.invoke(app, ["solve", str(SMALL), flag, str(afile)])
        assert result.exit_code == 2 and "is a file, not a folder" in result.stderr
        result = runner.invoke(app, ["solve", str(SMALL), flag, "/proc/tables"])
        assert result.exit_code == 2 and "cannot write in folder /proc" in result.stderr


def test_outputs_are_all_or_nothing(tmp_path, monkeypatch):
    """A report that fails while being written takes the plan and the tables with it."""
    import assignplan.report.html as html

    def broken(*args, **kwargs):
        raise OSError(28, "No space left on device", str(tmp_path / "r.html"))

    monkeypatch.setattr(html, "write_html_report", broken)
    out, tables = tmp_path / "ok.json", tmp_path / "tables" / "deep"
    result = runner.invoke(app, ["solve", str(SMALL), "--method", "greedy", "--out", str(out),
                                 "--csv", str(tables), "--report", str(tmp_path / "r.html")])
    assert result.exit_code == 1, result.output
    assert "No space left on device" in result.stderr and "nothing was written" in result.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == []  # no plan, no folders, no temp


def test_all_outputs_written_together(tmp_path):
    out, tables, report = tmp_path / "p.json", tmp_path / "t", tmp_path / "r.html"
    result = runner.invoke(app, ["solve", str(SMALL), "--method", "greedy", "--out", str(out),
                                 "--csv", str(tables), "--report", str(report)])
    assert result.exit_code == 0, result.output
    assert out.exists() and report.exists() and (tables / "jobs.csv").exists()
    assert not list(tmp_path.rglob(".*.tmp"))
    assert f"wrote {out}" in result.stderr


def test_version():
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0 and result.stdout.strip() == f"assignplan {__version__}"


def test_wall_time_and_method_time_both_reported():
    data = json.loads(runner.invoke(app, ["solve", str(SMALL), "--method", "greedy",
                                          "--json"]).stdout)
    assert data["wall_seconds"] >= data["seconds"] >= 0
    table = runner.invoke(app, ["solve", str(SMALL), "--method", "greedy"]).stdout
    assert "s in all (method" in table


def _late_batch(tmp_path: Path, n_late: int) -> Path:
    """One core node, n_late + 1 one-hour jobs all due after 1 hour: all but one are late,
    the k-th by k - 1 hours (whatever the order, the ends are 1, 2, ... hours)."""
    doc = {"window": {"start": "2026-12-07T08:00:00", "hours": 5},
           "nodes": [{"name": "n", "cores": 1, "memory_gib": 1}],
           "jobs": [{"name": f"j{k:02d}", "cores": 1, "memory_gib": 1, "hours": 1, "due_h": 1}
                    for k in range(n_late + 1)]}
    path = tmp_path / "late.json"
    path.write_text(json.dumps(doc))
    return path


def test_summary_names_the_late_jobs_worst_first(tmp_path):
    batch = _late_batch(tmp_path, 12)
    data = json.loads(runner.invoke(app, ["solve", str(batch), "--method", "greedy",
                                          "--json"]).stdout)
    assert data["late_jobs"] == 12 and len(data["late"]) == 10
    assert [r["late_h"] for r in data["late"]] == [12.0 - k for k in range(10)]
    assert data["jobs_past_window"] == 8 and len(data["past_window"]) == 8
    assert data["past_window"][0]["past_h"] == 8.0
    table = runner.invoke(app, ["solve", str(batch), "--method", "greedy"]).stdout
    assert "12.0 h late" in table and "and 2 more" in table


def test_plan_on_standard_output_is_the_plan_document(tmp_path):
    result = runner.invoke(app, ["solve", str(SMALL), "--method", "greedy", "--out", "-"])
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    plan = tmp_path / "p.json"
    plan.write_text(result.stdout)
    assert len(doc["assignments"]) == 13
    assert check_plan(load_batch(SMALL), load_plan(plan)) == []
    both = runner.invoke(app, ["solve", str(SMALL), "--out", "-", "--json"])
    assert both.exit_code == 2 and "choose one" in both.stderr


def test_compare_writes_the_best_plan_and_says_where_the_bound_came_from(tmp_path):
    """small.json: exact proves 15.5 h, above every part of the bound solve reports alone."""
    best = tmp_path / "best.json"
    result = runner.invoke(app, ["compare", str(SMALL), "--budget", "5", "--out", str(best)])
    assert result.exit_code == 0, result.output
    assert "which the exact solver proved" in result.stdout
    doc = json.loads(best.read_text())
    records = json.loads(runner.invoke(app, ["compare", str(SMALL), "--budget", "5",
                                             "--json"]).stdout)
    assert doc["makespan_h"] == min(r["makespan_h"] for r in records)
    assert check_plan(load_batch(SMALL), load_plan(best)) == []


def test_help_reads_at_80_columns():
    for command in (["--help"], ["solve", "--help"], ["compare", "--help"],
                    ["check", "--help"], ["report", "--help"]):
        result = runner.invoke(app, command, env={"COLUMNS": "80"}, terminal_width=80)
        assert result.exit_code == 0
        assert "<bool>" not in result.stdout and "…" not in result.stdout
        assert max(len(line) for line in result.stdout.splitlines()) <= 80, command
    solve_help = runner.invoke(app, ["solve", "--help"], terminal_width=80).stdout
    for name in ("--method", "--seed", "--budget", "--out", "--csv", "--json", "--report"):
        assert name in solve_help


def test_progress_steps_show_on_a_terminal():
    steps = Steps(True)
    buffer = io.StringIO()
    steps.console = Console(file=buffer, force_terminal=True, width=80)
    steps.enabled = True
    with steps.step("lower bound"):
        pass
    assert "lower bound" in buffer.getvalue()
    assert not Steps(False).enabled


def test_compare_reports_each_method_as_it_finishes_to_a_progress_bar():
    from assignplan.compare import compare_batches
    from assignplan.instance import build_instance

    inst = build_instance(load_batch(SMALL))
    steps = Steps(True)
    buffer = io.StringIO()
    steps.console = Console(file=buffer, force_terminal=True, width=100)
    steps.enabled = True
    heard = []
    with steps.tasks(4, "compare") as tick:
        def done(task, row):
            heard.append((task.batch, task.method, row.status))
            tick(f"{task.method}: {row.status}")

        rows = compare_batches([inst, inst], ("greedy", "exact"), seed=0, budget=5.0,
                               on_done=done)
    assert sorted(heard) == sorted((b, r.method, r.status)
                                   for b, batch in enumerate(rows) for r in batch)
    assert len(heard) == 4 and "compare" in buffer.getvalue() and "4/4" in buffer.getvalue()


def test_runs_where_the_package_folder_cannot_hold_the_compiler_cache(tmp_path):
    """A copy of the package whose cache folders cannot be created (a file stands where
    each __pycache__ would go) and no usable home: numba's own fallbacks all fail, yet
    --help and a greedy plan work, with the kernels cached in ASSIGNPLAN_CACHE_DIR's place
    (here: the per-user temp folder)."""
    import assignplan

    copy = tmp_path / "site"
    shutil.copytree(Path(assignplan.__file__).parent, copy / "assignplan",
                    ignore=shutil.ignore_patterns("__pycache__"))
    for folder in (copy / "assignplan").rglob("*"):
        if folder.is_dir():
            (folder / "__pycache__").write_text("")
    (copy / "assignplan" / "__pycache__").write_text("")
    env = {k: v for k, v in os.environ.items()
           if k not in ("XDG_CACHE_HOME", "NUMBA_CACHE_DIR", "ASSIGNPLAN_CACHE_DIR")}
    env.update(HOME="/dev/null/home", PYTHONPATH=str(copy), TMPDIR=str(tmp_path))
    run = [sys.executable, "-c", "import sys; from assignplan.cli import app; app(sys.argv[1:])"]
    helped = subprocess.run(run + ["--help"], env=env, capture_output=True, text=True)
    assert helped.returncode == 0 and "Traceback" not in helped.stderr, helped.stderr
    solved = subprocess.run(run + ["solve", str(SMALL), "--method", "greedy", "--json"],
                            env=env, capture_output=True, text=True, cwd=tmp_path)
    assert solved.returncode == 0, solved.stderr
    assert json.loads(solved.stdout)["jobs"] == 13
    assert any((tmp_path / f"assignplan-{os.getuid()}").iterdir())
