"""Files a plan is written to: PLAN.json, CSV tables; every write is atomic."""

from __future__ import annotations

import json
import os
import tempfile
from collections.abc import Callable
from pathlib import Path

import pandas as pd

from assignplan.errors import InputError


def atomic_write(path: Path | str, write: Callable[[Path], None]) -> None:
    """Write through a temp file in the target folder, then rename: never a half-written file."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        write(Path(tmp))
        # mkstemp makes the file private (0600); a plan or report is an ordinary file.
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_text(path: Path | str, text: str) -> None:
    atomic_write(path, lambda p: p.write_text(text, encoding="utf-8"))


def check_output_file(path: Path | str | None, flag: str) -> None:
    """Fail before any work when an output file could not be written."""
    if path is None:
        return
    p = Path(path)
    if p.is_dir():
        raise InputError(f"{flag} {p}: is a directory; give a file name")
    if not p.parent.is_dir():
        raise InputError(f"{flag} {p}: folder {p.parent} does not exist")


def check_output_dir(path: Path | str | None, flag: str) -> None:
    if path is None:
        return
    p = Path(path)
    if p.exists() and not p.is_dir():
        raise InputError(f"{flag} {p}: exists and is not a folder")
    if not p.exists() and not p.parent.is_dir():
        raise InputError(f"{flag} {p}: folder {p.parent} does not exist")


def write_json(path: Path | str, payload: dict | list) -> None:
    atomic_write_text(path, json.dumps(payload, indent=2, ensure_ascii=False) + "\n")


def write_csv_tables(folder: Path | str, summary: dict, nodes: pd.DataFrame,
                     jobs: pd.DataFrame) -> list[Path]:
    """jobs.csv, nodes.csv and summary.csv (one row) in `folder`, each written atomically."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    # nested figures (the bound's parts) become one column each: lower_bound_parts_h.dff, ...
    frames = {"jobs.csv": jobs, "nodes.csv": nodes, "summary.csv": pd.json_normalize(summary)}
    written = []
    for name, frame in frames.items():
        atomic_write(folder / name, lambda p, f=frame: f.to_csv(p, index=False))
        written.append(folder / name)
    return written
