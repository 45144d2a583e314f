"""Importers: turn an accounting trace (SWF) or a job spreadsheet (CSV) into a batch document.

Both importers take the admin's own inventory from a node file, a JSON document
``{"window": {...}?, "nodes": [...]}`` in the batch's node-group format, and hand back a
`Batch` that has already passed the same validation and cross-field checks as a batch file,
so `assignplan solve` accepts what they write unchanged.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from assignplan.errors import InputError
from assignplan.model import (
    Batch,
    NodeGroup,
    Window,
    _expand_nodes,
    _format_validation_error,
    expand_batch,
    parse_batch_text,
    read_text,
)
from assignplan.report.exports import atomic_write_text, check_output_file


class Inventory(BaseModel):
    """A node file: the cluster's node groups and, optionally, the planning window.

    The window is optional because a trace replay can take its start from the trace; the CSV
    importer, whose jobs carry no calendar, requires it.
    """

    model_config = ConfigDict(strict=True, extra="forbid", frozen=True)
    window: Window | None = None
    nodes: list[NodeGroup] = Field(min_length=1)


def load_inventory(path: Path | str) -> Inventory:
    """Read and validate a node file; every problem is one line naming the file and JSON path.

    The node checks of a batch (duplicate names, maintenance windows) run here too, so their
    problems name the node file rather than the jobs' source.
    """
    try:
        inventory = Inventory.model_validate_json(read_text(path))
    except ValidationError as err:
        raise InputError([f"{path}: {line}"
                          for line in _format_validation_error(err, Inventory)]) from None
    problems: list[str] = []
    _expand_nodes(inventory, problems)  # reads only `.nodes`, which an Inventory has
    if problems:
        raise InputError([f"{path}: {p}" for p in problems])
    return inventory


def finish_batch(doc: dict[str, Any], source: str) -> Batch:
    """Validate a built batch document exactly as a batch file would be, then return it.

    Going through the JSON text (not the Python objects) is deliberate: it is the very path
    `assignplan solve` takes, so what passes here is what solve accepts.
    """
    batch = parse_batch_text(json.dumps(doc, default=str), source)
    expand_batch(batch, source=source)
    return batch


def batch_json(batch: Batch) -> str:
    """The batch as the JSON text written to disk (defaults left out, stable field order)."""
    doc = batch.model_dump(mode="json", exclude_defaults=True)
    doc["window"] = batch.window.model_dump(mode="json")
    return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"


def write_batch(batch: Batch, path: Path | str) -> None:
    """Write the batch atomically: a reader never sees a half-written file."""
    check_output_file(path, "--out")
    atomic_write_text(path, batch_json(batch))
