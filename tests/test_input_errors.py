"""Bad input: each problem is one line naming its JSON path or file, exit 2, nothing written."""

from __future__ import annotations

import copy
import json
import re
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
    ("cores-as-string", mutated(_set(["jobs", 0, "cores"], "4")),
     'jobs[0].cores: must be a whole number (got the text "4")'),
    ("cores-as-float", mutated(_set(["jobs", 0, "cores"], 4.5)), "jobs[0].cores: must be a whole number (got 4.5)"),
    ("zero-memory", mutated(_set(["jobs", 2, "memory_gib"], 0)), "jobs[2].memory_gib: must be greater than 0"),
    ("negative-hours", mutated(_set(["jobs", 1, "hours"], -2)),
     "jobs[1].hours: must be at least 0.0001 and at most 10,000 h (got -2)"),
    # A few microseconds vanished from the float sums of the priority order, which then put a
    # job before the job it follows: greedy failed with exit 1 (found by the fuzz test).
    ("hours-vanishing", mutated(_set(["jobs", 0, "hours"], 3.5e-226)),
     "jobs[0].hours: must be at least 0.0001 and at most 10,000 h (got 3.5e-226)"),
    ("negative-node-cores", mutated(_set(["nodes", 0, "cores"], -32)), "nodes[0].cores: must be greater than 0"),
    ("zero-speed", mutated(_set(["nodes", 1, "speed"], 0)), "nodes[1].speed: must be at least 0.01 and at most 1,000 (got 0)"),
    ("unknown-field", mutated(_set(["jobs", 0, "walltime"], 3)),
     "jobs[0].walltime: unknown field; the fields here are name, count, cores, memory_gib, hours"),
    ("missing-field", mutated(lambda d: d["jobs"][0].pop("hours")), "jobs[0].hours: required field is missing"),
    ("bad-window-start", mutated(_set(["window", "start"], "next monday")),
     'window.start: must be an ISO 8601 calendar time such as 2026-12-07T08:00 or 2026-12-07 (got the text "next monday")'),
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
    ("no-jobs", mutated(_set(["jobs"], [])), "jobs: must list at least 1 job (the list is empty)"),
    ("negative-ready", mutated(_set(["jobs", 0, "ready_h"], -1)),
     "jobs[0].ready_h: must be at least 0 and at most 100,000 h (got -1)"),
    ("bool-as-number", mutated(_set(["jobs", 0, "gpus"], True)), "jobs[0].gpus: must be a whole number (got true)"),
    ("limit-below-hours", mutated(_set(["jobs", 1, "limit_h"], 1.5)), "jobs[1].limit_h: 1.5 h is below the job's own estimate of 2 h"),
    ("zero-limit", mutated(_set(["jobs", 1, "limit_h"], 0)), "jobs[1].limit_h: must be greater than 0 and at most 100,000 h (got 0)"),
]

# Issue 18: every time-like input and every resource is bounded, so no minute count can
# overflow. Before, hours 1e9 planned a makespan of -2.2 million hours, 1e18 ran 1 minute, and
# 3.6e7 and 1e15 ended in a traceback.
LIMIT_CASES = [
    ("hours-1e9", mutated(_set(["jobs", 1, "hours"], 1e9)),
     "jobs[1].hours: must be at least 0.0001 and at most 10,000 h (got 1e+09)"),
    ("hours-1e18", mutated(_set(["jobs", 1, "hours"], 1e18)),
     "jobs[1].hours: must be at least 0.0001 and at most 10,000 h (got 1e+18)"),
    ("hours-3.6e7", mutated(_set(["jobs", 1, "hours"], 3.6e7)),
     "jobs[1].hours: must be at least 0.0001 and at most 10,000 h (got 3.6e+07)"),
    ("hours-1e15", mutated(_set(["jobs", 1, "hours"], 1e15)),
     "jobs[1].hours: must be at least 0.0001 and at most 10,000 h (got 1e+15)"),
    ("ready-huge", mutated(_set(["jobs", 0, "ready_h"], 1e9)),
     "jobs[0].ready_h: must be at least 0 and at most 100,000 h (got 1e+09)"),
    ("due-huge", mutated(_set(["jobs", 5, "due_h"], 1e12)),
     "jobs[5].due_h: must be at least 0 and at most 100,000 h (got 1e+12)"),
    ("maintenance-start-huge", mutated(_set(["nodes", 2, "maintenance"], [{"start_h": 1e9, "end_h": 4}])),
     "nodes[2].maintenance[0].start_h: must be at least 0 and at most 100,000 h (got 1e+09)"),
    ("maintenance-end-huge", mutated(_set(["nodes", 2, "maintenance"], [{"start_h": 1, "end_h": 1e7}])),
     "nodes[2].maintenance[0].end_h: must be at least 0 and at most 100,000 h (got 1e+07)"),
    ("window-huge", mutated(_set(["window", "hours"], 1e9)),
     "window.hours: must be greater than 0 and at most 100,000 h (got 1e+09)"),
    ("speed-tiny", mutated(_set(["nodes", 1, "speed"], 1e-9)),
     "nodes[1].speed: must be at least 0.01 and at most 1,000 (got 1e-09)"),
    ("speed-huge", mutated(_set(["nodes", 1, "speed"], 1e9)),
     "nodes[1].speed: must be at least 0.01 and at most 1,000 (got 1e+09)"),
    ("cores-huge", mutated(_set(["nodes", 0, "cores"], 10**12)),
     "nodes[0].cores: must be greater than 0 and at most 1,000,000 (got 1000000000000)"),
    ("cores-beyond-int64", mutated(_set(["jobs", 0, "cores"], 10**30)),
     "jobs[0].cores: must be greater than 0 and at most 1,000,000 (got 10000000000000000000"),
    ("gpus-huge", mutated(_set(["nodes", 2, "gpus"], 10**9)),
     "nodes[2].gpus: must be at least 0 and at most 100,000 (got 1000000000)"),
    ("memory-huge", mutated(_set(["nodes", 1, "memory_gib"], 1e12)),
     "nodes[1].memory_gib: must be greater than 0 and at most 1,048,576 GiB (got 1e+12)"),
    ("job-count", mutated(_set(["jobs", 4, "count"], 10**7)),
     "jobs[4].count: must be at least 1 and at most 1,000,000 (got 10000000)"),
    ("node-count", mutated(_set(["nodes", 0, "count"], 10**6)),
     "nodes[0].count: must be at least 1 and at most 100,000 (got 1000000)"),
    ("weight-huge", mutated(_set(["jobs", 5, "weight"], 1e300)),
     "jobs[5].weight: must be at least 0 and at most 1,000,000 (got 1e+300)"),
    # Each value within its limit, but a thousand 1 PiB jobs of 10,000 h on a node of speed
    # 0.01 add up to 6.4e19 MiB-minutes: more than int64 sums may safely hold.
    ("total-work", mutated(lambda d: (
        d["nodes"].append({"name": "slow", "cores": 4, "memory_gib": 1048576, "speed": 0.01}),
        d["jobs"].append({"name": "huge", "count": 1000, "cores": 1, "memory_gib": 1048576,
                          "hours": 10000}))),
     "jobs: together the jobs need 6.44e+19 MiB-minutes of memory on the slowest node (speed 0.01)"),
]


def _raw(doc: dict, marker: str, token: str) -> str:
    """The document as JSON text with the string `marker` replaced by a bare token (NaN...)."""
    return json.dumps(doc).replace(json.dumps(marker), token)


# NaN and Infinity are JSON tokens some readers (pydantic's among them) accept: they are
# "not a finite number", whatever the limits of the field say.
NAN_CASES = [
    ("hours-nan", _raw(mutated(_set(["jobs", 1, "hours"], "@X")), "@X", "NaN"),
     "jobs[1].hours: not a finite number (got NaN); must be at least 0.0001 and at most 10,000 h"),
    ("hours-infinity", _raw(mutated(_set(["jobs", 1, "hours"], "@X")), "@X", "Infinity"),
     "jobs[1].hours: not a finite number (got Infinity)"),
    ("hours-minus-infinity", _raw(mutated(_set(["jobs", 1, "hours"], "@X")), "@X", "-Infinity"),
     "jobs[1].hours: not a finite number (got -Infinity)"),
    ("hours-overflowing-literal", _raw(mutated(_set(["jobs", 1, "hours"], "@X")), "@X", "1e400"),
     "jobs[1].hours: not a finite number"),
    ("speed-nan", _raw(mutated(_set(["nodes", 0, "speed"], "@X")), "@X", "NaN"),
     "nodes[0].speed: not a finite number (got NaN)"),
    ("ready-nan", _raw(mutated(_set(["jobs", 0, "ready_h"], "@X")), "@X", "NaN"),
     "jobs[0].ready_h: not a finite number (got NaN)"),
    ("hours-nan-as-text", mutated(_set(["jobs", 1, "hours"], "NaN")),
     'jobs[1].hours: must be a number (got the text "NaN")'),
    ("hours-infinity-as-text", mutated(_set(["jobs", 1, "hours"], "Infinity")),
     'jobs[1].hours: must be a number (got the text "Infinity")'),
]

# Every kind of pydantic problem in our words: what is wrong and what is allowed.
WORDING_CASES = [
    ("name-with-space", mutated(_set(["jobs", 0, "name"], "fetch data")),
     'jobs[0].name: may contain only letters a-z and A-Z, digits and . _ : + - ("fetch data" has a space)'),
    ("tag-with-umlaut", mutated(_set(["nodes", 2, "tags"], ["gpü"])),
     "nodes[2].tags[0]: may contain only letters a-z and A-Z, digits and . _ : + - (\"gpü\" has 'ü')"),
    ("empty-name", mutated(_set(["jobs", 0, "name"], "")), "jobs[0].name: must not be empty"),
    ("long-name", mutated(_set(["jobs", 0, "name"], "x" * 201)),
     "jobs[0].name: must be at most 200 characters (got 201)"),
    ("no-nodes", mutated(_set(["nodes"], [])), "nodes: must list at least 1 node (the list is empty)"),
    ("list-for-object", mutated(_set(["window"], [])), "window: must be an object {...} (got a list)"),
    ("object-for-list", mutated(_set(["jobs", 0, "needs"], {})),
     "jobs[0].needs: must be a list [...] (got an object)"),
    ("number-for-name", mutated(_set(["jobs", 0, "name"], 5)),
     "jobs[0].name: must be text in double quotes (got 5)"),
    ("null-for-number", mutated(_set(["jobs", 0, "cores"], None)),
     "jobs[0].cores: must be a whole number (got null)"),
    ("bool-for-float", mutated(_set(["jobs", 0, "memory_gib"], True)),
     "jobs[0].memory_gib: must be a number (got true)"),
    ("number-for-time", mutated(_set(["window", "start"], 20261207)),
     "window.start: must be an ISO 8601 calendar time such as 2026-12-07T08:00 or 2026-12-07 (got 20261207)"),
    ("text-for-time", mutated(_set(["jobs", 0, "ready"], "tomorrow")),
     'jobs[0].ready: must be an ISO 8601 calendar time such as 2026-12-07T08:00 or 2026-12-07 (got the text "tomorrow")'),
    ("deep-nesting", _raw(mutated(_set(["jobs", 0, "needs"], "@X")), "@X", "[" * 300 + "]" * 300),
     "(document): not valid JSON: nested too deeply"),
]

# One time, given in one of two forms: `<name>_h` hours from the window start or `<name>` as an
# ISO 8601 calendar time (issue 18).
TIME_CASES = [
    ("ready-both-forms", mutated(lambda d: d["jobs"][0].update(ready_h=1, ready="2026-12-07T09:00")),
     "jobs[0].ready: give ready (a calendar time) or ready_h (hours from the window start), not both"),
    ("due-both-forms", mutated(lambda d: d["jobs"][5].update(due="2026-12-07T20:00")),
     "jobs[5].due: give due (a calendar time) or due_h (hours from the window start), not both"),
    ("ready-before-window", mutated(_set(["jobs", 0, "ready"], "2026-12-06T09:00")),
     "jobs[0].ready: 2026-12-06T09:00:00 is before the window starts (2026-12-07T08:00:00)"),
    ("ready-with-offset-naive-window", mutated(_set(["jobs", 0, "ready"], "2026-12-07T09:00+01:00")),
     "jobs[0].ready: 2026-12-07T09:00:00+01:00 has a UTC offset but the window start"
     " (2026-12-07T08:00:00) has none; give both an offset or neither"),
    ("due-too-far", mutated(lambda d: (d["jobs"][5].pop("due_h"), d["jobs"][5].update(due="2040-01-01"))),
     "jobs[5].due: 2040-01-01T00:00:00 is more than 100,000 h after the window start"),
    ("maintenance-without-start", mutated(_set(["nodes", 2, "maintenance"], [{"end_h": 5}])),
     "nodes[2].maintenance[0].start_h: required field is missing (or give start as an ISO 8601"),
    ("maintenance-both-ends", mutated(_set(["nodes", 2, "maintenance"],
                                           [{"start_h": 1, "end_h": 5, "end": "2026-12-07T13:00"}])),
     "nodes[2].maintenance[0].end: give end (a calendar time) or end_h"),
    ("maintenance-calendar-backwards", mutated(_set(["nodes", 2, "maintenance"],
                                                    [{"start": "2026-12-07T14:00", "end": "2026-12-07T12:00"}])),
     "nodes[2].maintenance[0]: ends at 4.0 h, not after it starts (6.0 h)"),
]

# A repeated key is not silently resolved to its last value.
DUPLICATE_CASES = [
    ("duplicate-key", json.dumps(SMALL).replace('"name": "fetch-data",', '"name": "fetch-data", "cores": 8,'),
     "jobs[0]: key 'cores' appears twice"),
    ("duplicate-key-three-times",
     json.dumps(SMALL).replace('"name": "bigmem",', '"name": "bigmem", "cores": 8, "cores": 9,'),
     "nodes[1]: key 'cores' appears 3 times"),
    ("duplicate-top-level-key", json.dumps(SMALL)[:-1] + ', "window": {"start": "2026-12-08"}}',
     "(document): key 'window' appears twice"),
]
ALL_CASES = CASES + LIMIT_CASES + NAN_CASES + WORDING_CASES + TIME_CASES + DUPLICATE_CASES
# Words of the validation library, which an admin should never have to decode.
LIBRARY_WORDING = re.compile(r"should|Input |Error|pattern|\^\[|validation|Unicode|Value error")


@pytest.mark.parametrize(("case", "doc", "fragment"), ALL_CASES, ids=[c[0] for c in ALL_CASES])
def test_bad_batch_exits_2_with_path_and_writes_nothing(tmp_path, case, doc, fragment):
    batch = tmp_path / "batch.json"
    batch.write_text(doc if isinstance(doc, str) else json.dumps(doc))
    out, csv_dir = tmp_path / "plan.json", tmp_path / "csv"
    result = CliRunner().invoke(app, ["solve", str(batch), "--out", str(out), "--csv", str(csv_dir)])
    assert result.exit_code == 2, result.output
    assert fragment in result.stderr, result.stderr
    assert "Traceback" not in result.output
    assert all(line.startswith(f"{batch}: ") for line in result.stderr.splitlines())
    assert not LIBRARY_WORDING.search(result.stderr), result.stderr
    assert not out.exists() and not csv_dir.exists()
    assert not list(tmp_path.glob(".*tmp"))


def test_missing_file_names_the_file(tmp_path):
    result = CliRunner().invoke(app, ["solve", str(tmp_path / "nope.json")])
    assert result.exit_code == 2
    assert "nope.json: no such file" in result.stderr


def test_directory_instead_of_file(tmp_path):
    result = CliRunner().invoke(app, ["solve", str(tmp_path)])
    assert result.exit_code == 2
    assert "is a folder, not a file" in result.stderr


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


def test_file_that_is_not_utf8_says_where_and_what_to_do(tmp_path):
    batch = tmp_path / "batch.json"
    text = json.dumps(SMALL, indent=1).replace('"fetch-data"', '"fetch-data-caf\u00e9"', 1)
    batch.write_bytes(text.encode("latin-1"))  # é is the single byte 0xe9 there
    line = next(k for k, s in enumerate(text.splitlines(), 1) if "caf" in s)
    column = text.splitlines()[line - 1].index("\u00e9") + 1
    result = CliRunner().invoke(app, ["solve", str(batch)])
    assert result.exit_code == 2
    assert result.stderr.strip() == (
        f"{batch}: not UTF-8 text: byte 0xe9 at line {line}, column {column} is not UTF-8;"
        " save the file as UTF-8")


def test_utf16_file_is_named_as_such(tmp_path):
    batch = tmp_path / "batch.json"
    batch.write_text(json.dumps(SMALL), encoding="utf-16")  # with its byte-order mark
    result = CliRunner().invoke(app, ["solve", str(batch)])
    assert result.exit_code == 2
    assert result.stderr.strip() == f"{batch}: not UTF-8 text but UTF-16; save it as UTF-8"


def test_utf8_with_byte_order_mark_is_read(tmp_path):
    # Spreadsheet and Windows editors write one; it carries no meaning in UTF-8.
    batch = tmp_path / "batch.json"
    batch.write_text(json.dumps(SMALL), encoding="utf-8-sig")
    result = CliRunner().invoke(app, ["solve", str(batch), "--method", "greedy", "--json"])
    assert result.exit_code == 0, result.output


def test_duplicate_keys_are_listed_with_the_other_problems(tmp_path):
    batch = tmp_path / "batch.json"
    text = json.dumps(mutated(_set(["jobs", 2, "hours"], -1)))
    batch.write_text(text.replace('"name": "train",', '"name": "train", "gpus": 1,'))
    result = CliRunner().invoke(app, ["solve", str(batch)])
    assert result.exit_code == 2
    assert result.stderr.splitlines() == [
        f"{batch}: jobs[3]: key 'gpus' appears twice",
        f"{batch}: jobs[2].hours: must be at least 0.0001 and at most 10,000 h (got -1)",
    ]


def test_duplicate_key_in_a_plan_is_refused(tmp_path):
    batch, plan = EXAMPLES / "small.json", tmp_path / "plan.json"
    assert CliRunner().invoke(app, ["solve", str(batch), "--method", "greedy",
                                    "--out", str(plan)]).exit_code == 0
    text = plan.read_text()
    plan.write_text(text.replace('"node":', '"node": "cpu-1", "node":', 1))
    result = CliRunner().invoke(app, ["check", str(batch), str(plan)])
    assert result.exit_code == 2
    assert result.stderr.strip() == f"{plan}: assignments[0]: key 'node' appears twice"


def test_doubtful_times_are_warnings_on_stderr_not_failures(tmp_path):
    # summarise is due at 12 h; ready at 13 h it cannot make it. sweep is ready after the
    # 24-hour window has ended.
    doc = mutated(lambda d: (d["jobs"][5].update(ready_h=13.0),
                             d["jobs"][4].update(ready="2026-12-08T09:00")))
    batch = tmp_path / "batch.json"
    batch.write_text(json.dumps(doc))
    result = CliRunner().invoke(app, ["solve", str(batch), "--method", "greedy", "--json"])
    assert result.exit_code == 0, result.output
    assert result.stderr.splitlines() == [
        f"{batch}: warning: jobs[4].ready: ready at Tue 08 Dec 09:00, when the window has"
        " ended (Tue 08 Dec 08:00); it can only run past the window",
        f"{batch}: warning: jobs[5].due_h: due at Mon 07 Dec 20:00 before it is ready at"
        " Mon 07 Dec 21:00, so it will be late",
    ]
    json.loads(result.stdout)  # stdout stays one JSON object
