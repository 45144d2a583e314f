"""Job spreadsheets: a CSV with one job (group) per row, columns named as the JSON job fields.

Header is spreadsheet row 1; each later row is one entry of the batch's `jobs` list. Empty
cells take the field's default; `needs` and `follows` hold names separated by ';'. Rows are
validated by the same pydantic model as JSON input, and every problem names its row (the CSV
line number) and column, e.g. ``JOBS.csv:row 7 (jobs[5]).memory_gib: must be greater than 0``.
"""

from __future__ import annotations

import io
import math
import re
from pathlib import Path
from typing import Any

import pandas as pd
from pydantic import ValidationError

from assignplan.errors import InputError
from assignplan.importers import Inventory, finish_batch, load_inventory
from assignplan.model import Batch, JobGroup, _format_validation_error, read_text

COLUMNS = tuple(JobGroup.model_fields)
REQUIRED = tuple(name for name, f in JobGroup.model_fields.items() if f.is_required())
LIST_COLUMNS = ("needs", "follows")
INT_COLUMNS = ("count", "cores", "gpus")
FLOAT_COLUMNS = ("memory_gib", "hours", "ready_h", "due_h", "weight")
_PANDAS_WIDTH = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")


def import_csv(jobs_path: Path | str, nodes_path: Path | str) -> Batch:
    """Batch of the jobs in a CSV file on the inventory and window of a node file."""
    inventory = load_inventory(nodes_path)
    return csv_batch(read_text(jobs_path), inventory, str(jobs_path), str(nodes_path))


def csv_batch(text: str, inventory: Inventory, source: str = "<csv>",
              nodes_source: str = "<nodes>") -> Batch:
    """Validate the CSV's jobs and combine them with the inventory's window and nodes.

    The window is required in the node file: a spreadsheet carries no calendar.
    """
    if inventory.window is None:
        raise InputError(f"{nodes_source}: window: required field is missing (a CSV import"
                         " takes the planning window from the node file)")
    jobs, rows = parse_jobs_csv(text, source)
    doc = {
        "window": inventory.window.model_dump(mode="json"),
        "nodes": [g.model_dump(mode="json") for g in inventory.nodes],
        "jobs": [job.model_dump(mode="json") for job in jobs],
    }
    try:
        return finish_batch(doc, source)
    except InputError as err:
        raise InputError([_locate(p, source, rows) for p in err.problems]) from None


def parse_jobs_csv(text: str, source: str = "<csv>") -> tuple[list[JobGroup], list[int]]:
    """The validated job groups of a CSV text and the spreadsheet row of each."""
    table = _read_table(text, source)
    header = [str(h).strip() for h in table.iloc[0]]
    used = _check_header(header, table, source)
    jobs: list[JobGroup] = []
    rows: list[int] = []
    problems: list[str] = []
    for k in range(1, len(table)):
        cells = {header[c]: str(table.iat[k, c]).strip() for c in used}
        if not any(cells.values()):
            continue  # a blank line between rows is not a job
        row, where = k + 1, f"{source}:row {k + 1} (jobs[{len(rows)}])"
        try:
            jobs.append(JobGroup.model_validate(_job_doc(cells)))
        except ValidationError as err:
            problems += [f"{where}.{line}" for line in _format_validation_error(err, JobGroup)]
        rows.append(row)
    if problems:
        raise InputError(problems)
    if not rows:
        raise InputError(f"{source}: no job rows below the header")
    return jobs, rows


def _read_table(text: str, source: str) -> pd.DataFrame:
    """Every cell as a string; the header is row 0 so row k is spreadsheet row k + 1."""
    try:
        return pd.read_csv(io.StringIO(text), header=None, dtype=str, keep_default_na=False,
                           skip_blank_lines=False)
    except pd.errors.EmptyDataError:
        raise InputError(f"{source}: empty file; expected a header row naming the columns"
                         ) from None
    except pd.errors.ParserError as exc:
        width = _PANDAS_WIDTH.search(str(exc))
        if width:
            expected, line, found = width.groups()
            raise InputError(f"{source}:row {line}: expected {expected} cells like the header,"
                             f" found {found}") from None
        raise InputError(f"{source}: not a readable CSV file ({exc})") from None


def _check_header(header: list[str], table: pd.DataFrame, source: str) -> list[int]:
    """Indices of the columns to read; unknown, duplicate or missing columns are errors.

    A column without a header and without any value (a trailing comma) is ignored.
    """
    problems: list[str] = []
    used: list[int] = []
    for c, name in enumerate(header):
        if not name:
            if (table.iloc[1:, c].str.strip() != "").any():
                problems.append(f"{source}: column {c + 1} has values but no header")
        elif name not in COLUMNS:
            problems.append(f"{source}: column '{name}': unknown column; the columns are"
                            f" {', '.join(COLUMNS)}")
        elif name in header[:c]:
            problems.append(f"{source}: column '{name}': appears more than once")
        else:
            used.append(c)
    problems += [f"{source}: column '{name}': required column is missing"
                 for name in REQUIRED if name not in header]
    if problems:
        raise InputError(problems)
    return used


def _job_doc(cells: dict[str, str]) -> dict[str, Any]:
    """A job's fields from its non-empty cells; unconvertible cells stay strings so the
    model's own message ("must be a valid integer") reports them."""
    doc: dict[str, Any] = {}
    for name, cell in cells.items():
        if not cell:
            continue
        if name in LIST_COLUMNS:
            doc[name] = [part.strip() for part in cell.split(";") if part.strip()]
        elif name in INT_COLUMNS:
            doc[name] = _number(cell, whole=True)
        elif name in FLOAT_COLUMNS:
            doc[name] = _number(cell, whole=False)
        else:
            doc[name] = cell
    return doc


def _number(cell: str, *, whole: bool) -> int | float | str:
    try:
        value = float(cell)
    except ValueError:
        return cell
    if not math.isfinite(value):
        return cell
    if whole:
        # A spreadsheet may export 4 as 4.0; 4.5 stays a string and is reported as not whole.
        return int(value) if value.is_integer() else cell
    return value


def _locate(problem: str, source: str, rows: list[int]) -> str:
    """Turn ``SRC: jobs[5]...`` from the batch checks into ``SRC:row 7 (jobs[5])...``."""
    match = re.match(rf"{re.escape(source)}: jobs\[(\d+)\]", problem)
    if not match:
        return problem
    k = int(match.group(1))
    return f"{source}:row {rows[k]} (jobs[{k}])" + problem[match.end():]


def batch_to_csv(batch: Batch) -> str:
    """The batch's job list as CSV text in the import format (every column, every row)."""
    cells = [[_cell(getattr(job, name)) for name in COLUMNS] for job in batch.jobs]
    frame = pd.DataFrame(cells, columns=list(COLUMNS), dtype=str)
    return frame.to_csv(index=False, lineterminator="\n")


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, list):
        return ";".join(value)
    if isinstance(value, float):
        return repr(value)  # shortest text that reads back to the same float
    return str(value)


def inventory_of(batch: Batch) -> Inventory:
    """The window and nodes of a batch, as a node file holds them (for the round trip)."""
    return Inventory(window=batch.window, nodes=batch.nodes)
