"""Job spreadsheets: a CSV with one job (group) per row, columns named as the JSON job fields.

Header is spreadsheet row 1; each later row is one entry of the batch's `jobs` list. Cells
are separated by ',', ';' or a tab, whichever the header row uses; header names are read
without regard to case or surrounding spaces. Empty cells take the field's default; `needs`
and `follows` hold names separated by ';' or ','. Rows are validated by the same model as
JSON input, and every problem names its row (the spreadsheet row) and column, e.g.
``JOBS.csv:row 7 (jobs[5]).memory_gib: must be greater than 0``.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from assignplan.documents import Batch, JobGroup
from assignplan.errors import InputError
from assignplan.importers import Inventory, finish_batch, load_inventory
from assignplan.importers.problems import validation_problems
from assignplan.importers.reading import NUMBER, looks_like, wrong_kind
from assignplan.reading import decode_text, read_bytes

COLUMNS = tuple(JobGroup.model_fields)
REQUIRED = tuple(name for name, f in JobGroup.model_fields.items() if f.is_required())
LIST_COLUMNS = ("needs", "follows")
INT_COLUMNS = ("count", "cores", "gpus")
FLOAT_COLUMNS = ("memory_gib", "hours", "ready_h", "due_h", "weight", "limit_h")
SEPARATORS = (",", ";", "\t")  # in order of preference when a header fits several
CSV_KIND = "a CSV table (a header row naming the columns, then one job per row)"
_LIST_SPLIT = re.compile(r"[;,]")


@dataclass(frozen=True)
class TableImport:
    """A spreadsheet turned into a batch, with what the admin should know about the inputs."""

    batch: Batch
    notes: tuple[str, ...] = ()


def import_csv(jobs_path: Path | str, inventory_path: Path | str) -> TableImport:
    """Batch of the jobs in a CSV file on the inventory and window of an inventory file."""
    inventory = load_inventory(inventory_path)
    data = read_bytes(jobs_path)
    kind = looks_like(data)
    if kind in ("binary", "utf16"):
        raise wrong_kind(jobs_path, kind, CSV_KIND)
    batch = csv_batch(decode_text(data, jobs_path), inventory, str(jobs_path),
                      str(inventory_path))
    return TableImport(batch, tuple(inventory.notes(str(inventory_path), str(jobs_path))))


def csv_batch(text: str, inventory: Inventory, source: str = "<csv>",
              inventory_source: str = "<inventory>") -> Batch:
    """Validate the CSV's jobs and combine them with the inventory's window and nodes.

    The window is required in the inventory file: a spreadsheet carries no calendar.
    """
    if inventory.window is None:
        raise InputError(f"{inventory_source}: window: required field is missing (a CSV import"
                         " takes the planning window from the inventory file)")
    jobs, rows = parse_jobs_csv(text, source)
    doc = {
        "window": inventory.window.model_dump(mode="json"),
        "nodes": [g.model_dump(mode="json") for g in inventory.nodes],
        "jobs": [job.model_dump(mode="json") for job in jobs],
    }
    return finish_batch(doc, source, [f"{source}:row {r} (jobs[{k}])" for k, r in enumerate(rows)])


def parse_jobs_csv(text: str, source: str = "<csv>") -> tuple[list[JobGroup], list[int]]:
    """The validated job groups of a CSV text and the spreadsheet row of each."""
    records = _read_records(text, source)
    columns = _check_header(records, source)
    jobs: list[JobGroup] = []
    rows: list[int] = []
    problems: list[str] = []
    for k, record in enumerate(records[1:], start=2):
        cells = {name: record[c].strip() if c < len(record) else "" for c, name in columns.items()}
        if not any(cells.values()):
            continue  # a blank line between rows is not a job
        where = f"{source}:row {k} (jobs[{len(rows)}])"
        try:
            jobs.append(JobGroup.model_validate(_job_doc(cells)))
        except ValidationError as err:
            problems += [f"{where}.{line}" for line in validation_problems(err, JobGroup)]
        rows.append(k)
    if problems:
        raise InputError(problems)
    if not rows:
        raise InputError(f"{source}: no job rows below the header")
    return jobs, rows


def _read_records(text: str, source: str) -> list[list[str]]:
    """Every record of the table (a blank line is an empty record, so record k + 1 is
    spreadsheet row k + 1); the separator is the one the header row uses."""
    text = text.removeprefix("\ufeff")
    kind = looks_like(text[:8192].encode("utf-8"))
    if kind in ("empty", "binary", "json", "swf"):
        raise wrong_kind(source, kind, CSV_KIND)
    separator = _separator(next(line for line in text.splitlines() if line.strip()))
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=separator, strict=True)
    records: list[list[str]] = []
    try:
        records.extend(reader)
    except csv.Error as exc:
        raise InputError(f"{source}:row {len(records) + 1}: {_quote_problem(str(exc))}"
                         ) from None
    for k, record in enumerate(records[1:], start=2):
        extra = [cell for cell in record[len(records[0]):] if cell.strip()]
        if extra:
            raise InputError(f"{source}:row {k}: expected {len(records[0])} cells like the"
                             f" header, found {len(record)}")
    return records


def _separator(header: str) -> str:
    """The separator that splits the header row into the most known column names."""
    def known(sep: str) -> tuple[int, int]:
        names = [_column_key(name) for name in header.split(sep)]
        return sum(name in COLUMNS for name in names), len(names)

    return max(SEPARATORS, key=known)  # max keeps the first of equals: ',' before ';'


def _quote_problem(message: str) -> str:
    """What a CSV reading error means, in our words."""
    if "unexpected end of data" in message:
        return ("a quoted cell is never closed: a '\"' opens it and no '\"' ends it (a '\"'"
                " inside a quoted cell is written twice)")
    if "expected after" in message:
        return ("text after the closing '\"' of a quoted cell (a '\"' inside a quoted cell is"
                " written twice)")
    if "field larger than field limit" in message:
        return f"a cell longer than {csv.field_size_limit():,} characters"
    return "not readable as a CSV row (check its quotes)"


def _column_key(name: str) -> str:
    return name.strip().strip('"').strip().lower()


def _check_header(records: list[list[str]], source: str) -> dict[int, str]:
    """Column index -> field name of the columns to read; unknown, duplicate or missing
    columns are errors. A column without a header and without any value is ignored."""
    header = records[0]
    problems: list[str] = []
    columns: dict[int, str] = {}
    for c, written in enumerate(header):
        name = _column_key(written)
        if not name:
            if any(c < len(r) and r[c].strip() for r in records[1:]):
                problems.append(f"{source}: column {c + 1} has values but no header")
        elif name not in COLUMNS:
            problems.append(f"{source}: column '{written.strip()}': unknown column; the columns"
                            f" are {', '.join(COLUMNS)}")
        elif name in columns.values():
            problems.append(f"{source}: column '{written.strip()}': appears more than once")
        else:
            columns[c] = name
    problems += [f"{source}: column '{name}': required column is missing"
                 for name in REQUIRED if name not in columns.values()]
    if problems:
        raise InputError(problems)
    return columns


def _job_doc(cells: dict[str, str]) -> dict[str, Any]:
    """A job's fields from its non-empty cells; unconvertible cells stay strings so that the
    validation reports them ("'two' is not a whole number")."""
    doc: dict[str, Any] = {}
    for name, cell in cells.items():
        if not cell:
            continue
        if name in LIST_COLUMNS:
            doc[name] = [part.strip() for part in _LIST_SPLIT.split(cell) if part.strip()]
        elif name in INT_COLUMNS:
            doc[name] = _number(cell, whole=True)
        elif name in FLOAT_COLUMNS:
            doc[name] = _number(cell, whole=False)
        else:
            doc[name] = cell
    return doc


def _number(cell: str, *, whole: bool) -> int | float | str:
    if not NUMBER.fullmatch(cell):
        return cell  # not '1,5', not '1_000', not 'nan': a number as every spreadsheet writes it
    value = float(cell)
    if not math.isfinite(value):
        return cell
    if whole:
        # A spreadsheet may export 4 as 4.0; 4.5 stays a string and is reported as not whole.
        return int(value) if value.is_integer() else cell
    return value


def batch_to_csv(batch: Batch) -> str:
    """The batch's job list as CSV text in the import format (every column, every row)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(COLUMNS)
    writer.writerows([_cell(getattr(job, name)) for name in COLUMNS] for job in batch.jobs)
    return out.getvalue()


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, list):
        return ";".join(value)
    if isinstance(value, float):
        return repr(value)  # shortest text that reads back to the same float
    return str(value)


def inventory_of(batch: Batch) -> Inventory:
    """The window and nodes of a batch, as an inventory file holds them (for the round trip)."""
    return Inventory(window=batch.window, nodes=batch.nodes)
