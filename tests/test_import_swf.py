"""SWF import: counts against an independent reading of a published trace, follows, errors."""

from __future__ import annotations

import json
from collections import Counter
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
import typer
from typer.testing import CliRunner

from assignplan.errors import InputError
from assignplan.expand import expand_batch, load_batch
from assignplan.importers import Inventory, load_inventory
from assignplan.importers.cli import import_app
from assignplan.importers.swf import parse_swf, read_swf, week_batch
from assignplan.units import MAX_JOB_HOURS

DATA = Path(__file__).parent / "data" / "published" / "swf"
# Published source: Parallel Workloads Archive, KTH-SP2-1996-2.1-cln (Feitelson, Tsafrir,
# Krakov, JPDC 74(10), 2014); the slice is its first 2023 lines (tests/data/published/swf/).
SLICE = DATA / "KTH-SP2-1996-2.1-cln.first2023lines.swf"
SLICE_LINES = 2023
PUBLISHED = DATA / "KTH-SP2-1996-2.1-cln.swf"
WEEK = 7 * 24 * 3600

# Two node sizes so that both the cores and the memory limit can reject a job.
NODES = {
    "nodes": [
        {"name": "std", "count": 4, "cores": 16, "memory_gib": 64},
        {"name": "wide", "cores": 32, "memory_gib": 96},
    ]
}


def _app() -> typer.Typer:
    app = typer.Typer()
    app.add_typer(import_app, name="import")
    return app


def _invoke(*args: str):
    return CliRunner().invoke(_app(), ["import", *args])


@pytest.fixture
def inventory_file(tmp_path: Path) -> Path:
    path = tmp_path / "inventory.json"
    path.write_text(json.dumps(NODES), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def trace():
    return read_swf(SLICE)


def _swf(*jobs: str, header: str = "; UnixStartTime: 1000000000\n") -> str:
    """A synthetic trace: each job is given as its 18 fields."""
    return header + "".join(job + "\n" for job in jobs)


def _job(number: int, submit: int, run: int = 600, procs: int = 4, req_time: int = 3600,
         status: int = 1, preceding: int = -1, used_kb: int = -1, req_kb: int = -1) -> str:
    fields = [number, submit, 0, run, procs, -1, used_kb, procs, req_time, req_kb, status,
              1, 1, -1, -1, -1, preceding, -1]
    return " ".join(str(f) for f in fields)


def _independent_count(path: Path, week: int, mib_per_core: int) -> Counter:
    """Plain re-reading of the raw SWF by the rules the importer documents (no shared code)."""
    counts: Counter = Counter()
    for line in path.read_text().splitlines():
        if line.startswith(";") or not line.strip():
            continue
        f = [int(x) for x in line.split()]
        if f[1] < (week - 1) * WEEK or f[1] >= week * WEEK:
            continue
        counts["submitted"] += 1
        procs = f[7] if f[7] > 0 else f[4]
        fits = any(procs <= c and procs * mib_per_core <= m for c, m in ((16, 65536), (32, 98304)))
        if (f[10] == 5 and f[3] <= 0) or (f[3] == 0 and f[10] != 1):
            counts["cancelled"] += 1
        elif procs <= 0:
            counts["no size"] += 1
        elif f[8] <= 0:
            counts["no estimate"] += 1
        elif not fits:
            counts["too large"] += 1
        else:
            counts["imported"] += 1
    return counts


def test_slice_is_the_head_of_the_published_trace():
    head = PUBLISHED.read_bytes().splitlines(keepends=True)[:SLICE_LINES]
    assert SLICE.read_bytes() == b"".join(head)


@pytest.mark.parametrize("week", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("gib_per_core", [2.0, 4.0])
def test_counts_agree_with_an_independent_count(trace, week, gib_per_core):
    # Published data: KTH-SP2 slice (Parallel Workloads Archive).
    inventory = Inventory.model_validate(NODES)
    result = week_batch(trace, inventory, week, gib_per_core=gib_per_core)
    expected = _independent_count(SLICE, week, int(gib_per_core * 1024))
    assert result.submitted == expected["submitted"]
    assert result.imported == expected["imported"] > 0
    too_large = sum(n for reason, n in result.skipped.items() if reason.startswith("larger"))
    assert too_large == expected["too large"]
    assert sum(result.skipped.values()) == expected["submitted"] - expected["imported"]


def test_gib_per_core_changes_what_fits(trace):
    # 4 GiB per core makes a 32-core job need 128 GiB, more than the 96 GiB node: more skips.
    inventory = Inventory.model_validate(NODES)
    lean = week_batch(trace, inventory, 2, gib_per_core=2.0)
    fat = week_batch(trace, inventory, 2, gib_per_core=4.0)
    assert fat.imported < lean.imported


def test_job_fields_follow_the_raw_line(trace):
    # Job 869 of the published slice: submit 1210742 s (week 3), 1 processor, 3300 s requested.
    raw = next(line.split() for line in SLICE.read_text().splitlines()
               if not line.startswith(";") and line.split()[0] == "869")
    submit, procs, req = int(raw[1]), int(raw[7]), int(raw[8])
    week = submit // WEEK + 1
    result = week_batch(trace, Inventory.model_validate(NODES), week)
    job = next(j for j in result.batch.jobs if j.name == "job-869")
    assert job.cores == procs
    assert job.hours == pytest.approx(req / 3600)
    assert job.ready_h == pytest.approx((submit - (week - 1) * WEEK) / 3600)
    assert job.memory_gib == 2.0 * procs
    assert job.follows == []


def test_actual_estimate_uses_run_time(trace):
    inventory = Inventory.model_validate(NODES)
    actual = week_batch(trace, inventory, 3, estimate="actual")
    runs = {f"job-{line.split()[0]}": int(line.split()[3]) for line in
            SLICE.read_text().splitlines() if not line.startswith(";")}
    assert all(j.hours == pytest.approx(max(runs[j.name], 1) / 3600) for j in actual.batch.jobs)


def test_window_starts_at_the_trace_start_plus_weeks(trace):
    # UnixStartTime 843480031 in the header of the published slice.
    result = week_batch(trace, Inventory.model_validate(NODES), 3)
    assert result.batch.window.start == datetime.fromtimestamp(843480031 + 2 * WEEK, UTC)
    assert result.batch.window.hours == 168.0


def test_window_from_inventory_and_start_option(trace):
    doc = {**NODES, "window": {"start": "2025-03-03T08:00:00+01:00", "hours": 120}}
    inventory = Inventory.model_validate_json(json.dumps(doc))
    from_file = week_batch(trace, inventory, 2)
    assert from_file.batch.window == inventory.window
    start = datetime(2026, 1, 5, 6, 0)
    overridden = week_batch(trace, inventory, 2, start=start)
    assert (overridden.batch.window.start, overridden.batch.window.hours) == (start, 120)


def test_follows_reproduced_and_never_dangling():
    text = _swf(
        _job(1, 10),
        _job(2, 20, status=5, run=-1),       # cancelled before starting: skipped
        _job(3, 30, preceding=1),            # -> follows job-1
        _job(4, 40, preceding=2),            # its preceding job was skipped: link dropped
        _job(5, 50, preceding=3),            # chain 1 -> 3 -> 5
        _job(6, WEEK + 5, preceding=5),      # week 2: its preceding job is in week 1
    )
    inventory = Inventory.model_validate(NODES)
    week1 = week_batch(parse_swf(text, "t.swf"), inventory, 1)
    follows = {j.name: j.follows for j in week1.batch.jobs}
    assert follows == {"job-1": [], "job-3": ["job-1"], "job-4": [], "job-5": ["job-3"]}
    assert (week1.dropped_follows, week1.skipped) == (1, {"cancelled before they started": 1})
    week2 = week_batch(parse_swf(text, "t.swf"), inventory, 2)
    assert [j.follows for j in week2.batch.jobs] == [[]] and week2.outside_follows == 1
    expanded = expand_batch(week1.batch)
    assert {p for j in expanded.jobs for p in j.follows} <= {j.name for j in expanded.jobs}


def test_cancel_rule_and_missing_estimate():
    text = _swf(
        _job(1, 0, status=5, run=-1),        # cancelled, never ran: skipped
        _job(2, 1, status=0, run=0),         # failed at once: counted as cancelled
        _job(3, 2, status=1, run=0),         # completed in 0 s: kept
        _job(4, 3, status=5, run=100),       # cancelled after it ran: kept
        _job(5, 4, req_time=-1),             # no requested time
        _job(6, 5, procs=-1),                # no processor count (requested and allocated)
        _job(7, 6, procs=33),                # larger than any node
    )
    result = week_batch(parse_swf(text, "t.swf"), Inventory.model_validate(NODES), 1)
    assert [j.name for j in result.batch.jobs] == ["job-3", "job-4"]
    assert result.skipped == {
        "cancelled before they started": 2,
        "no processor count": 1,
        "no requested time": 1,
        "larger than the largest node (32 cores, 96 GiB)": 1,
    }
    assert "skipped 2 jobs: cancelled before they started" in result.report_lines()


def test_memory_from_the_trace_fields():
    gib_kb = 1024 * 1024  # SWF memory is KB per processor
    text = _swf(_job(1, 0, procs=4, req_kb=gib_kb, used_kb=gib_kb // 2), _job(2, 1, procs=2))
    inventory = Inventory.model_validate(NODES)
    requested = week_batch(parse_swf(text), inventory, 1, gib_per_core=3)
    actual = week_batch(parse_swf(text), inventory, 1, estimate="actual", gib_per_core=3)
    assert [j.memory_gib for j in requested.batch.jobs] == [4.0, 6.0]
    assert [j.memory_gib for j in actual.batch.jobs] == [2.0, 6.0]


def test_malformed_line_names_its_line_or_is_skipped():
    text = _swf(_job(1, 0), "2 5 0 600 4 -1", _job(3, 9), "4 x 0 600 4" + " -1" * 13)
    with pytest.raises(InputError) as err:
        parse_swf(text, "T.swf")
    assert err.value.problems == [
        "T.swf:3: expected 18 fields, found 6",
        "T.swf:5: field 2 (submit time) is not a number: 'x'",
    ]
    trace = parse_swf(text, "T.swf", skip_bad=True)
    assert len(trace.jobs) == 2 and len(trace.bad) == 2
    result = week_batch(trace, Inventory.model_validate(NODES), 1)
    assert "skipped 2 malformed lines of the trace" in result.report_lines()


def test_duplicate_job_number_is_malformed():
    with pytest.raises(InputError, match=r"T.swf:3: job number 1 already used on line 2"):
        parse_swf(_swf(_job(1, 0), _job(1, 5)), "T.swf")


def test_node_checks_name_the_inventory_file(tmp_path: Path):
    path = tmp_path / "n.json"
    path.write_text(json.dumps({"nodes": [{"name": "a", "cores": 0, "memory_gib": 1}]}))
    with pytest.raises(InputError, match=r"n.json: nodes\[0\].cores: must be greater than 0"):
        load_inventory(path)
    path.write_text(json.dumps({"nodes": [{"name": "a", "count": 2, "cores": 1, "memory_gib": 1},
                                          {"name": "a-1", "cores": 1, "memory_gib": 1}]}))
    with pytest.raises(InputError, match=r"n.json: nodes\[1\].name: node 'a-1' duplicates"):
        load_inventory(path)


# --------------------------------------------------------------------------- command line


def test_cli_writes_a_batch_solve_accepts(tmp_path: Path, inventory_file: Path):
    out = tmp_path / "week2.json"
    result = _invoke("swf", str(SLICE), "--inventory", str(inventory_file), "--week", "2",
                     "--out", str(out))
    assert result.exit_code == 0, result.stderr
    expected = _independent_count(SLICE, 2, 2048)
    assert f"imported {expected['imported']} of {expected['submitted']} jobs" in result.stderr
    assert (f"skipped {expected['too large']} jobs: larger than the largest node (32 cores,"
            " 96 GiB)") in result.stderr
    assert len(load_batch(out).jobs) == expected["imported"]
    from assignplan.cli import app

    solved = CliRunner().invoke(app, ["solve", str(out), "--json"])
    assert solved.exit_code == 0, solved.stderr


def test_cli_skip_bad_counts_and_continues(tmp_path: Path, inventory_file: Path):
    trace = tmp_path / "T.swf"
    trace.write_text(_swf(_job(1, 0), "2 5 0", _job(3, 9)))
    out = tmp_path / "b.json"
    result = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", "1",
                     "--skip-bad", "--out", str(out))
    assert result.exit_code == 0, result.stderr
    assert "skipped 1 malformed line of the trace" in result.stderr
    assert [j.name for j in load_batch(out).jobs] == ["job-1", "job-3"]


BAD_TRACES = {
    "field count": (_swf(_job(1, 0), _job(2, 5).rsplit(" ", 1)[0]), 1,
                    "T.swf:3: expected 18 fields, found 17"),
    "non-numeric": (_swf(_job(1, 0), _job(2, 5).replace(" 4 ", " four ", 1)), 1,
                    "T.swf:3: field 5 (allocated processors) is not a number: 'four'"),
    "negative runtime": (_swf(_job(1, 0), _job(2, 5, run=-30)), 1,
                         "T.swf:3: field 4 (run time) is -30; only -1 (unknown) may be negative"),
    "unknown week": (_swf(_job(1, 0), _job(2, WEEK + 5)), 3,
                     "T.swf: week 3 is beyond the trace (its submit times cover weeks 1 to 2)"),
    "empty week": (_swf(_job(1, 0), _job(2, 2 * WEEK + 5)), 2,
                   "T.swf: week 2 has no jobs (none submitted between day 7 and day 14"),
    "nothing importable": (_swf(_job(1, 0, procs=64)), 1,
                           "T.swf: week 1: its only job cannot be imported"),
}


@pytest.mark.parametrize("case", sorted(BAD_TRACES))
def test_cli_bad_trace_exits_2_and_writes_nothing(tmp_path: Path, inventory_file: Path, case):
    text, week, message = BAD_TRACES[case]
    trace = tmp_path / "T.swf"
    trace.write_text(text)
    out = tmp_path / "b.json"
    result = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", str(week),
                     "--out", str(out))
    assert result.exit_code == 2
    assert message in result.stderr
    assert "Traceback" not in result.stderr
    assert set(tmp_path.iterdir()) == {trace, inventory_file}  # no batch, no temp file


def test_cli_missing_inventory_file(tmp_path: Path):
    out = tmp_path / "b.json"
    missing = tmp_path / "INVENTORY.json"
    result = _invoke("swf", str(SLICE), "--inventory", str(missing), "--week", "1",
                     "--out", str(out))
    assert result.exit_code == 2
    assert result.stderr.strip() == f"{missing}: no such file"
    assert not out.exists()


def test_cli_missing_trace_and_bad_start(tmp_path: Path, inventory_file: Path):
    out = tmp_path / "b.json"
    missing = _invoke("swf", str(tmp_path / "none.swf"), "--inventory", str(inventory_file),
                      "--week", "1", "--out", str(out))
    assert missing.exit_code == 2 and "none.swf: no such file" in missing.stderr
    bad_start = _invoke("swf", str(SLICE), "--inventory", str(inventory_file), "--week", "1",
                        "--start", "next monday", "--out", str(out))
    assert bad_start.exit_code == 2 and "--start next monday: not an ISO 8601" in bad_start.stderr
    assert not out.exists()


# --------------------------------------------------------------------------- not a trace at all

EXAMPLES = Path(__file__).parent.parent / "examples"
SWF_RULE = "not an SWF trace (one job per line: 18 whitespace-separated numbers)"
NOT_TRACES = {
    "json batch": ((EXAMPLES / "small.json").read_bytes(), f"looks like JSON, {SWF_RULE}"),
    "csv table": ((EXAMPLES / "jobs-template.csv").read_bytes(),
                  f"looks like a CSV table, {SWF_RULE}"),
    "binary with NUL bytes": (bytes(range(256)) * 8, f"looks like a binary file, {SWF_RULE}"),
    # Seeded bytes without a NUL: caught by the share of bytes that are neither UTF-8 nor text.
    "binary without NUL": (np.random.default_rng(0).integers(1, 256, 600, dtype=np.uint8)
                           .tobytes(), f"looks like a binary file, {SWF_RULE}"),
    "empty file": (b"", f"empty file, {SWF_RULE}"),
    "blank lines": (b"\n  \n\n", f"empty file, {SWF_RULE}"),
    "plain text": (b"Job list for next week\nsee the spreadsheet\n",
                   f"looks like plain text, {SWF_RULE}"),
    "utf-16 text": ("1 0 0 600 4 -1 -1 4 3600 -1 1 1 1 -1 -1 -1 -1 -1\n".encode("utf-16"),
                    "UTF-16 text; save it with the UTF-8 encoding"),
    "header only": (b"; Version: 2.2\n; UnixStartTime: 1000000000\n",
                    "';' header lines but no job lines (an SWF trace has one job per line: 18"
                    " whitespace-separated numbers)"),
    "no line of 18 numbers": (b"; Version: 2.2\n1 0 600 4\n2 5 600 4\n3 9 600 4\n",
                              "not an SWF trace: none of its 3 lines outside ';' comments is a"
                              " job line of 18 whitespace-separated numbers (line 2: expected"
                              " 18 fields, found 4)"),
}


@pytest.mark.parametrize("skip_bad", [False, True])
@pytest.mark.parametrize("case", sorted(NOT_TRACES))
def test_cli_file_that_is_not_a_trace_is_one_line(tmp_path: Path, inventory_file: Path, case,
                                                  skip_bad):
    data, message = NOT_TRACES[case]
    trace = tmp_path / "T.swf"
    trace.write_bytes(data)
    out = tmp_path / "b.json"
    result = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", "1",
                     "--out", str(out), *(["--skip-bad"] if skip_bad else []))
    assert result.exit_code == 2
    assert result.stderr.splitlines() == [f"{trace}: {message}"]
    assert set(tmp_path.iterdir()) == {trace, inventory_file}


def test_non_utf8_comment_does_not_stop_a_trace(tmp_path: Path):
    # A header comment written in Latin-1 (0xE4 is an a-umlaut there); its job lines are numbers.
    trace = tmp_path / "T.swf"
    trace.write_bytes(b"; Installation: Universit\xe4t\n" + _swf(_job(1, 0), header="").encode())
    assert [int(n) for n in read_swf(trace).jobs[:, 0]] == [1]


# --------------------------------------------------------------------------- counts and names


def test_cli_counts_in_the_right_number(tmp_path: Path, inventory_file: Path):
    trace = tmp_path / "T.swf"
    trace.write_text(_swf(_job(1, 0), _job(2, 5, procs=64), "3 9 0", _job(4, 20, preceding=2),
                          _job(5, 30, preceding=99)))
    out = tmp_path / "b.json"
    result = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", "1",
                     "--skip-bad", "--out", str(out))
    assert result.exit_code == 0, result.stderr
    lines = result.stderr.splitlines()
    assert lines[0].startswith(f"{trace}: imported 3 of 4 jobs of week 1")
    assert lines[1:] == [
        "skipped 1 job: larger than the largest node (32 cores, 96 GiB)",
        "skipped 1 malformed line of the trace",
        "dropped 1 follows link: the preceding job was skipped",
        "ignored 1 follows link to jobs of other weeks",
    ]
    assert result.stdout == f"wrote {out}: 3 jobs\n"
    trace.write_text(_swf(_job(1, 0)))
    one = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", "1",
                  "--out", str(out))
    assert "imported 1 of 1 job of week 1" in one.stderr and one.stdout == f"wrote {out}: 1 job\n"
    beyond = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", "2",
                     "--out", str(out))
    assert beyond.stderr == f"{trace}: week 2 is beyond the trace (its submit times cover week 1"\
        " only)\n"


def test_trace_without_one_readable_job_line_says_skip_bad_would_not_help():
    # Lines that look like job lines (18 numbers) but are all malformed: listed as in any
    # trace, and no suggestion of --skip-bad, which would import nothing.
    text = _swf(_job(1, 0, run=-30), _job(2, 5, run=-30))
    with pytest.raises(InputError) as err:
        parse_swf(text, "T.swf", skip_bad=True)
    assert err.value.problems == [
        "T.swf:2: field 4 (run time) is -30; only -1 (unknown) may be negative",
        "T.swf:3: field 4 (run time) is -30; only -1 (unknown) may be negative",
        "T.swf: not one of its 2 job lines could be read, so --skip-bad would import nothing",
    ]


def test_cli_many_malformed_lines_are_summarised_in_the_right_number(tmp_path: Path,
                                                                     inventory_file: Path):
    trace = tmp_path / "T.swf"
    trace.write_text(_swf(_job(1, 0), *["2 5 0"] * 21))
    result = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", "1",
                     "--out", str(tmp_path / "b.json"))
    assert result.exit_code == 2
    assert result.stderr.splitlines()[-1] == "... and 1 more malformed line (use --skip-bad to"\
        " skip them)"


def test_cli_gib_per_core_sets_the_memory_of_jobs_without_one(tmp_path: Path,
                                                              inventory_file: Path):
    trace = tmp_path / "T.swf"
    trace.write_text(_swf(_job(1, 0, procs=4)))
    out = tmp_path / "b.json"
    result = _invoke("swf", str(trace), "--inventory", str(inventory_file), "--week", "1",
                     "--gib-per-core", "3", "--out", str(out))
    assert result.exit_code == 0, result.stderr
    assert [j.memory_mib for j in load_batch(out).jobs] == [12 * 1024]


@pytest.mark.parametrize(("args", "message"), [
    (["--gib-per-core", "0"], "--gib-per-core 0: must be greater than 0"),
    (["--gib-per-core", "nan"], "--gib-per-core nan: not a number of GiB"),
    (["--gib-per-core", "inf"], "--gib-per-core inf: not a number of GiB"),
    (["--gib-per-core", "two"], "--gib-per-core two: not a number of GiB"),
    (["--week", "0"], "--week 0: weeks are numbered from 1"),
    (["--week", "1.5"], "--week 1.5: not a whole number"),
    (["--estimate", "guess"], "--estimate guess: choose requested or actual"),
])
def test_cli_bad_option_values_in_our_words(tmp_path: Path, inventory_file: Path, args, message):
    out = tmp_path / "b.json"
    week = [] if "--week" in args else ["--week", "1"]
    result = _invoke("swf", str(SLICE), "--inventory", str(inventory_file), *week,
                     *args, "--out", str(out))
    assert result.exit_code == 2
    assert result.stderr == message + "\n"
    assert not out.exists()


def test_run_time_over_the_planners_limit_is_skipped():
    # units.MAX_JOB_HOURS is the largest job the model plans; a longer request is skipped,
    # not left to fail the whole import.
    text = _swf(_job(1, 0), _job(2, 5, req_time=int(MAX_JOB_HOURS * 3600) + 1))
    result = week_batch(parse_swf(text, "t.swf"), Inventory.model_validate(NODES), 1)
    assert [j.name for j in result.batch.jobs] == ["job-1"]
    assert result.skipped == {"run time over the planner's limit of 10,000 h": 1}


def test_batch_problems_name_the_trace_line():
    # Two jobs each preceded by the other: a cycle, told at the line of the job it starts at.
    text = _swf(_job(1, 0, preceding=2), _job(2, 5, preceding=1))
    with pytest.raises(InputError) as err:
        week_batch(parse_swf(text, "T.swf"), Inventory.model_validate(NODES), 1)
    assert err.value.problems == [
        "T.swf:2 (job-1).follows: dependency cycle job-1 -> job-2 -> job-1 (each must end"
        " before the next starts)"
    ]


# --------------------------------------------------------------------------- the inventory


def test_cli_batch_file_as_inventory_is_used_with_a_note(tmp_path: Path):
    batch = EXAMPLES / "small.json"
    trace = tmp_path / "T.swf"
    trace.write_text(_swf(_job(1, 0), _job(2, 60)))
    out = tmp_path / "b.json"
    result = _invoke("swf", str(trace), "--inventory", str(batch), "--week", "1",
                     "--out", str(out))
    assert result.exit_code == 0, result.stderr
    n_groups = len(json.loads(batch.read_text())["jobs"])
    assert result.stderr.splitlines()[0] == (
        f"{batch}: a batch file: its window and nodes are the inventory, its {n_groups} job"
        f" groups ignored (the jobs come from {trace})")
    written = load_batch(out)
    assert [j.name for j in written.jobs] == ["job-1", "job-2"]
    assert {n.group for n in written.nodes} == {"cpu", "bigmem", "gpu"}


INVENTORY_PROBLEMS = {
    "empty node list": ('{"nodes": []}', "I.json: nodes: must list at least 1 node (the list is"
                        " empty)"),
    "name with a space": ('{"nodes": [{"name": "cpu node", "cores": 4, "memory_gib": 8}]}',
                          'I.json: nodes[0].name: may contain only letters a-z and A-Z, digits'
                          ' and . _ : + - ("cpu node" has a space)'),
    "unknown field": ('{"nodes": [{"name": "a", "cores": 4, "memory_gib": 8, "ram": 8}]}',
                      "I.json: nodes[0].ram: unknown field; the fields here are name, count,"
                      " cores, memory_gib, gpus, speed, tags, maintenance, cost"),
    "not whole": ('{"nodes": [{"name": "a", "cores": 4.5, "memory_gib": 8}]}',
                  "I.json: nodes[0].cores: must be a whole number (got 4.5)"),
    "not a list": ('{"nodes": {"name": "a"}}',
                   "I.json: nodes: must be a list [...] (got an object)"),
    "bad start": ('{"window": {"start": "next monday"}, "nodes": [{"name": "a", "cores": 4,'
                  ' "memory_gib": 8}]}',
                  "I.json: window.start: must be an ISO 8601 calendar time such as"
                  ' 2026-12-07T08:00 or 2026-12-07 (got the text "next monday")'),
    "unclosed": ('{"nodes": [\n', "I.json:line 2 column 1: not valid JSON: the text ends before"
                 " the document does (a '}' or ']' is missing)"),
    "missing comma": ('{"nodes": []\n "window": {}}', "I.json:line 2 column 2: not valid JSON:"
                      " a comma is missing between two entries"),
    "single quotes": ("{'nodes': []}", "I.json:line 1 column 2: not valid JSON: a field name in"
                      " double quotes is expected here (a comma before '}' is one too many)"),
    "a CSV": ("name,cores\na,1\n", 'I.json: looks like a CSV table, not a JSON inventory'
              ' ({"window": {...}, "nodes": [...]})'),
    "not UTF-8": (b'{"nodes": [\n{"name": "n\xe9", "cores": 1, "memory_gib": 1}]}',
                  "I.json: not UTF-8 text: byte 0xe9 at line 2, column 12 is not UTF-8; save"
                  " the file as UTF-8"),
}


@pytest.mark.parametrize("case", sorted(INVENTORY_PROBLEMS))
def test_inventory_problems_in_our_words(tmp_path: Path, case):
    text, message = INVENTORY_PROBLEMS[case]
    path = tmp_path / "I.json"
    path.write_bytes(text if isinstance(text, bytes) else text.encode())
    with pytest.raises(InputError) as err:
        load_inventory(path)
    assert [p.replace(str(tmp_path) + "/", "") for p in err.value.problems] == [message]
