"""CSV import: the template, the round trip batch -> CSV -> batch, errors naming row and column."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from assignplan.errors import InputError
from assignplan.expand import expand_batch, load_batch
from assignplan.importers import Inventory, batch_json, load_inventory
from assignplan.importers.cli import import_app
from assignplan.importers.swf import read_swf, week_batch
from assignplan.importers.table import (
    COLUMNS,
    batch_to_csv,
    csv_batch,
    import_csv,
    inventory_of,
    parse_jobs_csv,
)
from assignplan.reading import parse_batch_text

ROOT = Path(__file__).parent.parent
TEMPLATE = ROOT / "examples" / "jobs-template.csv"
INVENTORY = ROOT / "examples" / "inventory-24x32.json"
SWF_SLICE = (Path(__file__).parent / "data" / "published" / "swf"
             / "KTH-SP2-1996-2.1-cln.first2023lines.swf")
HEADER = "name,count,cores,memory_gib,hours,gpus,needs,follows,ready_h,due_h,weight\n"


def _invoke(*args: str):
    app = typer.Typer()
    app.add_typer(import_app, name="import")
    return CliRunner().invoke(app, ["import", *args])


def _errors(text: str) -> list[str]:
    with pytest.raises(InputError) as err:
        csv_batch(text, load_inventory(INVENTORY), "JOBS.csv", "N.json")
    return err.value.problems


def test_template_imports_with_every_column():
    batch = import_csv(TEMPLATE, INVENTORY).batch
    header = TEMPLATE.read_text().splitlines()[0].split(",")
    assert header == list(COLUMNS)
    expanded = expand_batch(batch)
    counts = [int(line.split(",")[1]) for line in TEMPLATE.read_text().splitlines()[1:]]
    assert len(expanded.jobs) == sum(counts)
    merge = next(j for j in expanded.jobs if j.name == "ensemble-merge")
    # `follows` naming a group (count 12) means every member.
    assert len(merge.follows) == 12 and merge.follows[0] == "coastal-ensemble-01"
    fold = next(g for g in batch.jobs if g.name == "enzyme-fold")
    assert (fold.needs, fold.due_h, fold.weight) == (["avx512", "scratch-ssd"], 96.0, 1.5)


def test_empty_cells_take_defaults_and_lists_split_on_semicolons():
    text = HEADER + "a,,2,4,1,,,,,,\nb,3,1,2,0.5,,avx512 ; scratch-ssd,a;,1.5,,\n"
    jobs, rows = parse_jobs_csv(text, "JOBS.csv")
    assert rows == [2, 3]
    a, b = jobs
    assert (a.count, a.gpus, a.needs, a.follows, a.ready_h, a.due_h, a.weight) == (
        1, 0, [], [], None, None, 1.0)
    assert (b.count, b.needs, b.follows, b.ready_h) == (3, ["avx512", "scratch-ssd"], ["a"], 1.5)


def test_columns_may_be_few_and_in_any_order():
    jobs, _ = parse_jobs_csv("hours,name,memory_gib,cores\n2,x,8,4\n", "J.csv")
    assert (jobs[0].name, jobs[0].cores, jobs[0].memory_gib, jobs[0].hours) == ("x", 4, 8.0, 2.0)


def test_round_trip_of_the_template_is_identity():
    batch = import_csv(TEMPLATE, INVENTORY).batch
    again = csv_batch(batch_to_csv(batch), inventory_of(batch))
    assert again == batch
    assert batch_json(again) == batch_json(batch)


def test_round_trip_of_a_real_week_is_identity():
    # Published data: KTH-SP2 slice (Parallel Workloads Archive), whose hours and ready times
    # are arbitrary floats (seconds / 3600), so the CSV must carry every float digit.
    inventory = Inventory.model_validate_json(json.dumps(
        {"nodes": [{"name": "n", "count": 4, "cores": 100, "memory_gib": 256}],
         "window": {"start": "1996-10-07T00:00:00Z"}}))
    batch = week_batch(read_swf(SWF_SLICE), inventory, 3).batch
    text = batch_to_csv(batch)
    assert len(text.splitlines()) == len(batch.jobs) + 1
    assert csv_batch(text, inventory_of(batch)) == batch


def test_round_trip_through_files_and_json(tmp_path: Path):
    batch = import_csv(TEMPLATE, INVENTORY).batch
    (tmp_path / "jobs.csv").write_text(batch_to_csv(batch))
    (tmp_path / "inventory.json").write_text(inventory_of(batch).model_dump_json())
    again = import_csv(tmp_path / "jobs.csv", tmp_path / "inventory.json").batch
    assert parse_batch_text(batch_json(again)) == batch


def test_bad_value_names_row_and_column():
    rows = [f"j{k},1,2,4,1,,,,,," for k in range(5)] + ["j5,1,2,0,1,,,,,,"]
    problems = _errors(HEADER + "\n".join(rows) + "\n")
    assert problems == ["JOBS.csv:row 7 (jobs[5]).memory_gib: must be greater than 0 and at"
                        " most 1,048,576 GiB (got 0)"]


def test_every_bad_cell_is_reported_once():
    problems = _errors(HEADER + "a,two,2,4,1,,,,,,\nb,1,2.5,4,x,,,,,,\n,1,1,1,1,,,,,,\n")
    assert problems == [
        'JOBS.csv:row 2 (jobs[0]).count: must be a whole number (got the text "two")',
        'JOBS.csv:row 3 (jobs[1]).cores: must be a whole number (got the text "2.5")',
        'JOBS.csv:row 3 (jobs[1]).hours: must be a number (got the text "x")',
        "JOBS.csv:row 4 (jobs[2]).name: required field is missing",
    ]


def test_blank_lines_keep_row_numbers():
    problems = _errors(HEADER + "a,1,2,4,1,,,,,,\n\nb,1,2,4,-1,,,,,,\n")
    assert problems == ["JOBS.csv:row 4 (jobs[1]).hours: must be at least 0.0001 and at most"
                        " 10,000 h (got -1)"]


def test_cross_field_problems_name_the_row():
    problems = _errors(HEADER + "a,1,2,4,1,,,,,,\nb,1,2,4,1,,gpu-a100,nope,,,\n")
    assert "JOBS.csv:row 3 (jobs[1]).needs[0]: no node has tag 'gpu-a100'" in problems
    assert "JOBS.csv:row 3 (jobs[1]).follows[0]: no job or job group named 'nope'" in problems
    assert all(p.startswith("JOBS.csv:row 3 (jobs[1])") for p in problems)


def test_header_problems():
    assert _errors("name,cores,memory_gib,hours,mem\na,1,1,1,1\n") == [
        "JOBS.csv: column 'mem': unknown column; the columns are " + ", ".join(COLUMNS)
    ]
    assert _errors("name,cores,cores,memory_gib,hours\na,1,1,1,1\n") == [
        "JOBS.csv: column 'cores': appears more than once"
    ]
    assert _errors("name,cores,memory_gib\na,1,1\n") == [
        "JOBS.csv: column 'hours': required column is missing"
    ]
    assert _errors("name,cores,memory_gib,hours\na,1,1,1,1\n") == [
        "JOBS.csv:row 2: expected 4 cells like the header, found 5"
    ]
    assert _errors("") == ["JOBS.csv: empty file, not a CSV table (a header row naming the"
                           " columns, then one job per row)"]
    assert _errors("name,cores,memory_gib,hours\n") == ["JOBS.csv: no job rows below the header"]


def test_trailing_empty_column_is_ignored():
    jobs, _ = parse_jobs_csv("name,cores,memory_gib,hours,\na,1,1,1,\n", "J.csv")
    assert [j.name for j in jobs] == ["a"]


def test_csv_needs_a_window_in_the_inventory(tmp_path: Path):
    inventory = tmp_path / "N.json"
    inventory.write_text(json.dumps({"nodes": [{"name": "n", "cores": 4, "memory_gib": 8}]}))
    with pytest.raises(InputError, match=r"N.json: window: required field is missing"):
        import_csv(TEMPLATE, inventory)


# --------------------------------------------------------------------------- command line


def test_cli_writes_a_batch_solve_accepts(tmp_path: Path):
    out = tmp_path / "batch.json"
    result = _invoke("csv", str(TEMPLATE), "--inventory", str(INVENTORY), "--out", str(out))
    assert result.exit_code == 0, result.stderr
    # The template's 7 rows are job groups; their counts add up to 62 jobs.
    assert result.stdout == f"wrote {out}: 7 job groups (62 jobs)\n"
    assert len(load_batch(out).jobs) == 62
    from assignplan.cli import app

    solved = CliRunner().invoke(app, ["solve", str(out), "--json"])
    assert solved.exit_code == 0, solved.stderr


BAD_CSV = {
    "unknown column": (HEADER.replace("weight", "priority") + "a,1,2,4,1,,,,,,\n",
                       "JOBS.csv: column 'priority': unknown column"),
    "bad value": (HEADER + "a,1,2,4,1,,,,,,\nb,1,-3,4,1,,,,,,\n",
                  "JOBS.csv:row 3 (jobs[1]).cores: must be greater than 0"),
    "too large for every node": (HEADER + "a,1,64,4,1,,,,,,\n",
                                 "JOBS.csv:row 2 (jobs[0]): no node can hold job 'a'"),
    "dependency cycle": (HEADER + "a,1,1,1,1,,,b,,,\nb,1,1,1,1,,,a,,,\n",
                         "JOBS.csv:row 2 (jobs[0]).follows: dependency cycle"),
}


@pytest.mark.parametrize("case", sorted(BAD_CSV))
def test_cli_bad_csv_exits_2_and_writes_nothing(tmp_path: Path, case: str):
    text, message = BAD_CSV[case]
    jobs = tmp_path / "JOBS.csv"
    jobs.write_text(text)
    out = tmp_path / "batch.json"
    result = _invoke("csv", str(jobs), "--inventory", str(INVENTORY), "--out", str(out))
    assert result.exit_code == 2
    assert message.replace("JOBS.csv", str(jobs)) in result.stderr
    assert "Traceback" not in result.stderr
    assert set(tmp_path.iterdir()) == {jobs}  # no batch, no temp file


def test_cli_missing_files(tmp_path: Path):
    out = tmp_path / "batch.json"
    no_jobs = _invoke("csv", str(tmp_path / "J.csv"), "--inventory", str(INVENTORY),
                      "--out", str(out))
    assert no_jobs.exit_code == 2
    assert no_jobs.stderr.strip() == f"{tmp_path / 'J.csv'}: no such file"
    no_inventory = _invoke("csv", str(TEMPLATE), "--inventory", str(tmp_path / "N.json"),
                           "--out", str(out))
    assert no_inventory.exit_code == 2
    assert no_inventory.stderr.strip() == f"{tmp_path / 'N.json'}: no such file"
    no_option = _invoke("csv", str(TEMPLATE), "--out", str(out))
    assert no_option.exit_code == 2 and "--inventory" in no_option.stderr
    assert not out.exists()


# --------------------------------------------------------------------------- separators, headers


@pytest.mark.parametrize("separator", [";", "\t"])
def test_separator_is_detected_from_the_header(separator: str):
    rows = [["name", "cores", "memory_gib", "hours", "needs"],
            ["a", "2", "4", "1.5", ""],
            ["b", "1", "2", "0.5", "avx512"]]
    text = "".join(separator.join(row) + "\n" for row in rows)
    jobs, found_rows = parse_jobs_csv(text, "J.csv")
    assert [(j.name, j.cores, j.memory_gib, j.hours, j.needs) for j in jobs] == [
        ("a", 2, 4.0, 1.5, []), ("b", 1, 2.0, 0.5, ["avx512"])]
    assert found_rows == [2, 3]


def test_semicolon_file_lists_names_with_commas():
    # With ';' between cells, a list cell separates its names with ',' (no quotes needed).
    text = "name;cores;memory_gib;hours;needs;follows\na;1;1;1;;\nb;1;1;1;avx512,scratch-ssd;a\n"
    jobs, _ = parse_jobs_csv(text, "J.csv")
    assert (jobs[1].needs, jobs[1].follows) == (["avx512", "scratch-ssd"], ["a"])


def test_template_with_semicolons_and_tabs_imports_the_same_batch(tmp_path: Path):
    rows = list(csv.reader(io.StringIO(TEMPLATE.read_text())))
    expected = import_csv(TEMPLATE, INVENTORY).batch
    for separator in (";", "\t"):
        path = tmp_path / "jobs.csv"
        with path.open("w", newline="") as handle:
            csv.writer(handle, delimiter=separator, lineterminator="\n").writerows(rows)
        assert import_csv(path, INVENTORY).batch == expected


def test_header_names_ignore_case_and_spaces():
    jobs, _ = parse_jobs_csv(" Name ,CORES, Memory_GiB,Hours \nx,4,8,2\n", "J.csv")
    assert (jobs[0].name, jobs[0].cores, jobs[0].memory_gib, jobs[0].hours) == ("x", 4, 8.0, 2.0)
    assert _errors("name,cores,Cores,memory_gib,hours\na,1,1,1,1\n") == [
        "JOBS.csv: column 'Cores': appears more than once"
    ]


def test_byte_order_mark_of_a_spreadsheet_export_is_ignored(tmp_path: Path):
    path = tmp_path / "jobs.csv"
    path.write_bytes(b"\xef\xbb\xbf" + TEMPLATE.read_bytes())
    assert import_csv(path, INVENTORY).batch == import_csv(TEMPLATE, INVENTORY).batch


# --------------------------------------------------------------------------- our words


def test_problems_of_cells_in_our_words():
    problems = _errors(HEADER + "my job,1,2,4,1,,,,,,\nb,1,2,4,1,5,,,,,\nc,1,2,nan,1,,,,,,\n"
                       "d,1,2,4,\"1,5\",,,,,,\n")
    assert problems == [
        "JOBS.csv:row 2 (jobs[0]).name: may contain only letters a-z and A-Z, digits and"
        ' . _ : + - ("my job" has a space)',
        'JOBS.csv:row 4 (jobs[2]).memory_gib: must be a number (got the text "nan")',
        "JOBS.csv:row 5 (jobs[3]).hours: '1,5' is not a number: use a point for decimals and no"
        " thousands separator",
    ]


QUOTE_PROBLEMS = {
    "unclosed quote": ('name,cores,memory_gib,hours\na,1,1,1\n"b,1,1,1\n',
                       "JOBS.csv:row 3: a quoted cell is never closed: a '\"' opens it and no"
                       " '\"' ends it (a '\"' inside a quoted cell is written twice)"),
    "text after a quote": ('name,cores,memory_gib,hours\n"a"b,1,1,1\n',
                           "JOBS.csv:row 2: text after the closing '\"' of a quoted cell (a '\"'"
                           " inside a quoted cell is written twice)"),
}


@pytest.mark.parametrize("case", sorted(QUOTE_PROBLEMS))
def test_quote_problems_in_our_words(case: str):
    text, message = QUOTE_PROBLEMS[case]
    assert _errors(text) == [message]


NOT_CSV = {
    "json": ((ROOT / "examples" / "small.json").read_bytes(), "looks like JSON, not a CSV table"),
    "swf": (SWF_SLICE.read_bytes()[:4000], "looks like an SWF trace, not a CSV table"),
    "binary": (bytes(range(256)) * 4, "looks like a binary file, not a CSV table"),
    "utf-16": (TEMPLATE.read_text().encode("utf-16"), "UTF-16 text; save it with the UTF-8"
               " encoding"),
    "not utf-8": ((HEADER + "caf\xe9,1,2,4,1,,,,,,\n").encode("latin-1"),
                  "not UTF-8 text: byte 0xe9 at line 2, column 4 is not UTF-8; save the file as"
                  " UTF-8"),
}


@pytest.mark.parametrize("case", sorted(NOT_CSV))
def test_cli_file_that_is_not_a_csv_is_one_line(tmp_path: Path, case: str):
    data, message = NOT_CSV[case]
    jobs = tmp_path / "JOBS.csv"
    jobs.write_bytes(data)
    out = tmp_path / "batch.json"
    result = _invoke("csv", str(jobs), "--inventory", str(INVENTORY), "--out", str(out))
    assert result.exit_code == 2
    assert len(result.stderr.splitlines()) == 1
    sep = "" if message.startswith("line") else " "
    assert result.stderr.startswith(f"{jobs}:{sep}{message}")
    assert set(tmp_path.iterdir()) == {jobs}


# --------------------------------------------------------------------------- the inventory


def test_cli_batch_file_as_inventory_is_used_with_a_note(tmp_path: Path):
    doc = json.loads(INVENTORY.read_text())
    doc["jobs"] = [{"name": "old", "cores": 1, "memory_gib": 1, "hours": 1}]
    batch_file = tmp_path / "last-week.json"
    batch_file.write_text(json.dumps(doc))
    out = tmp_path / "batch.json"
    result = _invoke("csv", str(TEMPLATE), "--inventory", str(batch_file), "--out", str(out))
    assert result.exit_code == 0, result.stderr
    assert result.stderr == (f"{batch_file}: a batch file: its window and nodes are the"
                             f" inventory, its 1 job group ignored (the jobs come from"
                             f" {TEMPLATE})\n")
    assert load_batch(out) == load_batch_of(TEMPLATE, INVENTORY, tmp_path)


def load_batch_of(jobs: Path, inventory: Path, tmp_path: Path):
    """The expanded batch a plain import of `jobs` on `inventory` writes."""
    out = tmp_path / "plain.json"
    assert _invoke("csv", str(jobs), "--inventory", str(inventory), "--out", str(out)
                   ).exit_code == 0
    return load_batch(out)
