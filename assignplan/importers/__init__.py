"""Importers: turn an accounting trace (SWF) or a job spreadsheet (CSV) into a batch document.

Both importers take the admin's own inventory from an inventory file, a JSON document
``{"window": {...}?, "nodes": [...]}`` in the batch's node-group format (a whole batch file
will do: its jobs are ignored), and hand back a `Batch` that has already passed the same
validation and cross-field checks as a batch file, so `assignplan solve` accepts what they
write unchanged.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from assignplan.documents import Batch, NodeGroup, Window
from assignplan.errors import InputError
from assignplan.expand import expand_batch, expand_nodes
from assignplan.files import atomic_write_text, check_output_file
from assignplan.importers.problems import json_syntax_problem, validation_problems
from assignplan.importers.reading import looks_like, wrong_kind
from assignplan.reading import decode_text, parse_batch_text, read_bytes
from assignplan.units import counted

INVENTORY_KIND = 'a JSON inventory ({"window": {...}, "nodes": [...]})'


class Inventory(BaseModel):
    """An inventory file: the cluster's node groups and, optionally, the planning window.

    The window is optional because a trace replay can take its start from the trace; the CSV
    importer, whose jobs carry no calendar, requires it. A batch file is an inventory too: its
    `jobs` are accepted unread and left out of everything the importers write.
    """

    model_config = ConfigDict(strict=True, extra="forbid", frozen=True)
    window: Window | None = None
    nodes: list[NodeGroup] = Field(min_length=1)
    jobs: Any = Field(default=None, exclude=True,
                      description="A batch file's jobs, ignored: the importers bring their own.")

    def notes(self, source: str, jobs_source: str) -> list[str]:
        """What the admin should know about this inventory file (read from `source`)."""
        if self.jobs is None:
            return []
        what = counted(len(self.jobs), "job group") if isinstance(self.jobs, list) else "jobs"
        return [f"{source}: a batch file: its window and nodes are the inventory, its {what}"
                f" ignored (the jobs come from {jobs_source})"]


def load_inventory(path: Path | str) -> Inventory:
    """Read and validate an inventory file; every problem is one line naming the file and
    its JSON path (or line and column).

    The node checks of a batch (duplicate names, maintenance windows) run here too, so their
    problems name the inventory file rather than the jobs' source.
    """
    data = read_bytes(path)
    kind = looks_like(data)
    if kind != "json":
        raise wrong_kind(path, kind, INVENTORY_KIND)
    text = decode_text(data, path)
    syntax = json_syntax_problem(text, str(path))
    if syntax:
        raise InputError(syntax)
    try:
        inventory = Inventory.model_validate_json(text)
    except ValidationError as err:
        raise InputError([f"{path}: {line}" for line in validation_problems(err, Inventory)]
                         ) from None
    problems: list[str] = []
    expand_nodes(inventory, problems)  # reads only `.nodes`, which an Inventory has
    if problems:
        raise InputError([f"{path}: {p}" for p in problems])
    return inventory


def batch_size(batch: Batch) -> str:
    """'62 jobs', or '7 job groups (62 jobs)' when `count` groups them."""
    jobs = sum(group.count for group in batch.jobs)
    if jobs == len(batch.jobs):
        return counted(jobs, "job")
    return f"{counted(len(batch.jobs), 'job group')} ({counted(jobs, 'job')})"


def finish_batch(doc: dict[str, Any], source: str, where: list[str] | None = None) -> Batch:
    """Validate a built batch document exactly as a batch file would be, then return it.

    Going through the JSON text (not the Python objects) is deliberate: it is the very path
    `assignplan solve` takes, so what passes here is what solve accepts. A problem of
    ``jobs[k]`` is told at ``where[k]`` (the row or line the job came from) when given.
    """
    try:
        batch = parse_batch_text(json.dumps(doc, default=str), source)
        expand_batch(batch, source=source)
    except InputError as err:
        if where is None:
            raise
        raise InputError([_relocate(p, source, where) for p in err.problems]) from None
    return batch


def _relocate(problem: str, source: str, where: list[str]) -> str:
    """``SRC: jobs[5].hours: ...`` -> ``JOBS.csv:row 7 (jobs[5]).hours: ...``."""
    match = re.match(rf"{re.escape(source)}: jobs\[(\d+)\]", problem)
    if not match:
        return problem
    return where[int(match.group(1))] + problem[match.end():]


def batch_json(batch: Batch) -> str:
    """The batch as the JSON text written to disk (defaults left out, stable field order)."""
    doc = batch.model_dump(mode="json", exclude_defaults=True)
    doc["window"] = batch.window.model_dump(mode="json")
    return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"


def write_batch(batch: Batch, path: Path | str) -> None:
    """Write the batch atomically: a reader never sees a half-written file."""
    check_output_file(path, "--out")
    atomic_write_text(path, batch_json(batch))
