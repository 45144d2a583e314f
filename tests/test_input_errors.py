"""Bad input: each problem is one line naming its JSON path or file, exit 2, nothing written."""

from __future__ import annotations

import copy
import json
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from assignplan.cli import app

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
SMALL = json.loads((EXAMPLES / "small.json").read_text())


def mutated(change) -> dict:
    doc = copy.deepcopy(SMALL)
    change(doc)
    return doc


def _set(path, value):
    def change(doc):
        target = doc
        for key in path[:-1]:
            target = target[key]
        target[path[-1]] = value
    return change


def _append_job(job):
    return lambda doc: doc["jobs"].append(job)


# (case id, document or raw text, expected fragment of the error line)
CASES = [
    ("malformed-json", '{"window": {"start": "2026-12-07T08:00:00"}, "nodes": [', "not valid JSON"),
    ("not-an-object", "[1, 2, 3]", "(document)"),
    ("cores-as-string", mutated(_set(["jobs", 0, "cores"], "4")), "jobs[0].cores: must be a valid integer"),
    ("cores-as-float", mutated(_set(["jobs", 0, "cores"], 4.5)), "jobs[0].cores: must be a valid integer"),
    ("zero-memory", mutated(_set(["jobs", 2, "memory_gib"], 0)), "jobs[2].memory_gib: must be greater than 0"),
    ("negative-hours", mutated(_set(["jobs", 1, "hours"], -2)), "jobs[1].hours: must be greater than 0"),
    ("negative-node-cores", mutated(_set(["nodes", 0, "cores"], -32)), "nodes[0].cores: must be greater than 0"),
    ("zero-speed", mutated(_set(["nodes", 1, "speed"], 0)), "nodes[1].speed: must be greater than 0"),
    ("unknown-field", mutated(_set(["jobs", 0, "walltime"], 3)), "jobs[0].walltime: unknown field"),
    ("missing-field", mutated(lambda d: d["jobs"][0].pop("hours")), "jobs[0].hours: required field is missing"),
    ("bad-window-start", mutated(_set(["window", "start"], "next monday")), "window.start: must be a valid datetime"),
    ("duplicate-names", mutated(_append_job({"name": "sweep-2", "cores": 1, "memory_gib": 1, "hours": 1})),
     "duplicates a job of jobs[4]"),
    ("duplicate-nodes", mutated(lambda d: d["nodes"].append({"name": "cpu-1", "cores": 1, "memory_gib": 1})),
     "node 'cpu-1' duplicates"),
    ("unknown-follows", mutated(_set(["jobs", 3, "follows"], ["preprocess", "postprocess"])),
     "jobs[3].follows[1]: no job or job group named 'postprocess'"),
    ("cycle", mutated(_set(["jobs", 0, "follows"], ["summarise"])), "dependency cycle"),
    ("too-big", mutated(_set(["jobs", 2, "memory_gib"], 4096)),
     "no node can hold job 'assemble'"),
    ("unknown-tag", mutated(_set(["jobs", 3, "needs"], ["quantum"])), "jobs[3].needs[0]: no node has tag 'quantum'"),
    ("maintenance-backwards", mutated(_set(["nodes", 2, "maintenance"], [{"start_h": 6, "end_h": 4}])),
     "nodes[2].maintenance[0]: ends at 4.0 h, not after it starts"),
    ("maintenance-overlap", mutated(_set(["nodes", 2, "maintenance"],
                                          [{"start_h": 1, "end_h": 5}, {"start_h": 4, "end_h": 8}])),
     "nodes[2].maintenance[1]: overlaps maintenance[0]"),
    ("no-jobs", mutated(_set(["jobs"], [])), "jobs: List should have at least 1 item"),
    ("negative-ready", mutated(_set(["jobs", 0, "ready_h"], -1)), "jobs[0].ready_h: must be greater than or equal to 0"),
    ("bool-as-number", mutated(_set(["jobs", 0, "gpus"], True)), "jobs[0].gpus: must be a valid integer"),
    ("limit-below-hours", mutated(_set(["jobs", 1, "limit_h"], 1.5)), "jobs[1].limit_h: 1.5 h is below the job's own estimate of 2 h"),
    ("zero-limit", mutated(_set(["jobs", 1, "limit_h"], 0)), "jobs[1].limit_h: must be greater than 0"),
]


@pytest.mark.parametrize(("case", "doc", "fragment"), CASES, ids=[c[0] for c in CASES])
def test_bad_batch_exits_2_with_path_and_writes_nothing(tmp_path, case, doc, fragment):
    batch = tmp_path / "batch.json"
    batch.write_text(doc if isinstance(doc, str) else json.dumps(doc))
    out, csv_dir = tmp_path / "plan.json", tmp_path / "csv"
    result = CliRunner().invoke(app, ["solve", str(batch), "--out", str(out), "--csv", str(csv_dir)])
    assert result.exit_code == 2, result.output
    assert fragment in result.stderr, result.stderr
    assert "Traceback" not in result.output
    assert all(line.startswith(str(batch)) for line in result.stderr.splitlines())
    assert not out.exists() and not csv_dir.exists()
    assert not list(tmp_path.glob(".*tmp"))


def test_missing_file_names_the_file(tmp_path):
    result = CliRunner().invoke(app, ["solve", str(tmp_path / "nope.json")])
    assert result.exit_code == 2
    assert "nope.json: no such file" in result.stderr


def test_directory_instead_of_file(tmp_path):
    result = CliRunner().invoke(app, ["solve", str(tmp_path)])
    assert result.exit_code == 2
    assert "is a directory" in result.stderr


def test_output_into_missing_folder_fails_before_solving(tmp_path):
    result = CliRunner().invoke(app, ["solve", str(EXAMPLES / "small.json"),
                                      "--out", str(tmp_path / "no" / "plan.json")])
    assert result.exit_code == 2
    assert "does not exist" in result.stderr


def test_all_problems_reported_together():
    """The bundled broken example shows every kind of cross-field problem at once."""
    result = CliRunner().invoke(app, ["solve", str(EXAMPLES / "broken.json")])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 5, lines
    for fragment in ("maintenance[0]", "postprocess", "'solve'", "'train'", "cycle"):
        assert any(fragment in line for line in lines), fragment


def test_installed_entry_point_reports_without_traceback(tmp_path):
    exe = Path(sys.executable).with_name("assignplan")
    proc = subprocess.run([str(exe), "solve", str(EXAMPLES / "broken.json")],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and "dependency cycle" in proc.stderr


def test_unknown_option_is_usage_error():
    result = CliRunner().invoke(app, ["solve", str(EXAMPLES / "small.json"), "--colour", "red"])
    assert result.exit_code == 2
