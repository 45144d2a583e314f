"""`assignplan risk` and `solve --risk / --robust`: outputs, determinism, and bad input (one
line each, exit 2, nothing written)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from assignplan.cli import app
from assignplan.expand import load_batch
from assignplan.reading import load_plan
from assignplan.risk.replay import MAX_SAMPLES

from assignplan.check import check_plan  # isort: skip  (after the model: it reads its types)

ROOT = Path(__file__).resolve().parents[1]
SMALL = ROOT / "examples" / "small.json"
runner = CliRunner()


@pytest.fixture(scope="module")
def plan(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("plan") / "plan.json"
    result = runner.invoke(app, ["solve", str(SMALL), "--method", "greedy", "--out", str(path)])
    assert result.exit_code == 0, result.output
    return path


def _risk(*args: str) -> dict:
    result = runner.invoke(app, ["risk", str(SMALL), *args, "--json"])
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def test_risk_json_is_seeded_and_a_future_without_spread_is_the_plan(plan):
    first = _risk(str(plan), "--model", "lognormal:0.3", "--samples", "300", "--seed", "4")
    again = _risk(str(plan), "--model", "lognormal:0.3", "--samples", "300", "--seed", "4")
    first.pop("seconds"), again.pop("seconds")
    assert first == again
    assert first["samples"] == 300 and set(first["policies"]) == {"keep", "dispatch"}
    keep = first["policies"]["keep"]
    quantiles = [keep["makespan_h"][q] for q in ("p10", "p50", "p90", "p99")]
    assert quantiles == sorted(quantiles) and 0 <= keep["inside_window"] <= 1
    exact = _risk(str(plan), "--model", "scale:1", "--samples", "5")
    planned = load_plan(plan).makespan_h
    assert exact["planned_makespan_h"] == planned
    assert set(exact["policies"]["keep"]["makespan_h"].values()) == {planned}
    late = _risk(str(plan), "--model", "scale:3", "--samples", "5")["policies"]["keep"]
    assert late["inside_window"] == 0.0 and late["riskiest"]  # 3x longer: past the 24 h window


def test_risk_tables_csv_and_report(plan, tmp_path):
    csv, report = tmp_path / "tables", tmp_path / "report.html"
    result = runner.invoke(app, ["risk", str(SMALL), str(plan), "--samples", "200",
                                 "--model", "uniform:0.8,1.6", "--csv", str(csv),
                                 "--report", str(report)])
    assert result.exit_code == 0, result.output
    assert "Runtime risk" in result.stdout and "uniform factor 0.8-1.6" in result.stdout
    assert "an assumption you chose" in result.stdout
    assert sorted(p.name for p in csv.iterdir()) == ["risk-jobs.csv", "risk-nodes.csv",
                                                     "risk-summary.csv"]
    assert len((csv / "risk-jobs.csv").read_text().splitlines()) == 1 + 2 * 13
    page = report.read_text()
    assert 'id="runtime-risk"' in page and 'id="risk-makespan"' in page


def test_solve_with_risk_and_robust(tmp_path):
    out = tmp_path / "plan.json"
    result = runner.invoke(app, ["solve", str(SMALL), "--robust", "0.9", "--samples", "8",
                                 "--model", "lognormal:0.4", "--generations", "3", "--risk",
                                 "--json", "--out", str(out)])
    assert result.exit_code == 0, result.output
    summary = json.loads(result.stdout)
    assert summary["risk"]["samples"] == 1_000
    assert summary["risk"]["model"] == {"model": "lognormal", "cv": 0.4, "groups": {}}
    assert check_plan(load_batch(SMALL), load_plan(out)) == []


def _trace_without_usable_jobs(tmp_path: Path) -> str:
    swf = tmp_path / "no-requests.swf"
    swf.write_text("".join(f"{k} 0 0 100 4 -1 -1 4 -1 -1 1 1 1 -1 1 -1 -1 -1\n"
                           for k in range(1, 4)))
    return f"trace:{swf}"


def _plan_with(plan: Path, tmp_path: Path, change) -> str:
    doc = json.loads(plan.read_text())
    change(doc["assignments"])
    path = tmp_path / "changed-plan.json"
    path.write_text(json.dumps(doc))
    return str(path)


BAD = [
    ("unknown-model", lambda p, t: ["--model", "gamma:2"], "unknown runtime model"),
    ("zero-cv", lambda p, t: ["--model", "lognormal:0"], "cv: must be greater than 0"),
    ("negative-cv", lambda p, t: ["--model", "lognormal:-0.3"], "cv: must be greater than 0"),
    ("min-above-max", lambda p, t: ["--model", "uniform:1.5,0.5"],
     "low 1.5 is above high 0.5"),
    ("trace-without-usable-jobs", lambda p, t: ["--model", _trace_without_usable_jobs(t)],
     "no job has both a requested time and a run time"),
    ("plan-missing-a-job", lambda p, t: [_plan_with(p, t, lambda a: a.pop(3))],
     "1 job without a row"),
    ("plan-with-an-extra-job", lambda p, t: [_plan_with(p, t, lambda a: a.append(
        {**a[0], "job": "not-in-the-batch"}))], "no job named 'not-in-the-batch'"),
    ("zero-samples", lambda p, t: ["--samples", "0"], "--samples 0: must be between 1"),
    ("too-many-samples", lambda p, t: ["--samples", str(MAX_SAMPLES + 1)],
     f"must be between 1 and {MAX_SAMPLES:,}"),
]


@pytest.mark.parametrize(("case", "args", "fragment"), BAD, ids=[c[0] for c in BAD])
def test_bad_risk_input_is_one_line_exit_2_and_nothing_written(plan, tmp_path, case, args,
                                                                fragment):
    given = args(plan, tmp_path)
    plan_args = [] if given and not given[0].startswith("--") else [str(plan)]
    csv, report = tmp_path / "tables", tmp_path / "report.html"
    # a --samples in the case comes later, so it is the one read
    result = runner.invoke(app, ["risk", str(SMALL), *plan_args, "--samples", "20", *given,
                                 "--csv", str(csv), "--report", str(report)])
    assert result.exit_code == 2, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and fragment in lines[0], lines
    assert "Traceback" not in result.output
    assert not csv.exists() and not report.exists()


@pytest.mark.parametrize(("args", "fragment"), [
    (["--method", "greedy", "--robust", "0.9"], "--robust: only the ga method plans for it"),
    (["--samples", "8"], "--samples: only --robust reads it"),
    (["--model", "scale:1.2"], "--model: only --risk and --robust read it"),
    (["--robust", "0"], "--robust 0: the makespan quantile"),
    (["--robust", "0.9", "--samples", "5000"], "--samples 5000: must be between 1 and 1,000"),
    (["--risk", "--model", "uniform:2,1"], "low 2 is above high 1"),
])
def test_misplaced_solve_options_are_refused_before_any_work(tmp_path, args, fragment):
    out = tmp_path / "plan.json"
    result = runner.invoke(app, ["solve", str(tmp_path / "no-batch.json"), *args, "--out",
                                 str(out)])
    assert result.exit_code == 2, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and fragment in lines[0], lines
    assert not out.exists()
