"""A plan's files besides the report: PLAN.json and the CSV tables (written atomically)."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from assignplan.files import atomic_write, atomic_write_text, ensure_folder


def write_json(path: Path | str, payload: dict | list) -> None:
    atomic_write_text(path, json.dumps(payload, indent=2, ensure_ascii=False) + "\n")


def write_csv_tables(folder: Path | str, summary: dict, nodes: pd.DataFrame,
                     jobs: pd.DataFrame) -> list[Path]:
    """jobs.csv, nodes.csv and summary.csv (one row) in `folder`, each written atomically."""
    folder = ensure_folder(folder)
    # files carry calendar times as ISO 8601 (the tables' short form is for reading);
    # nested figures (the bound's parts) become one column each: lower_bound_parts_h.dff, ...
    flat = {k: v for k, v in summary.items() if not isinstance(v, list)}
    frames = {"jobs.csv": _iso_columns(jobs, ("start", "end")),
              "nodes.csv": _iso_columns(nodes, ("busy_until",)),
              "summary.csv": pd.json_normalize(flat)}
    written = []
    for name, frame in frames.items():
        atomic_write(folder / name, lambda p, f=frame: f.to_csv(p, index=False))
        written.append(folder / name)
    return written


def _iso_columns(frame: pd.DataFrame, names: tuple[str, ...]) -> pd.DataFrame:
    """The frame with each display column `name` replaced by its ISO 8601 twin `name_iso`."""
    twins = [f"{n}_iso" for n in names]
    return frame.assign(**{n: frame[t] for n, t in zip(names, twins, strict=True)}).drop(
        columns=twins)
