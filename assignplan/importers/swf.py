"""Replay one week of a Standard Workload Format (SWF) accounting trace as a batch.

SWF is the open format of the Parallel Workloads Archive: `;` header lines, then one line per
job with 18 whitespace-separated numeric fields, -1 meaning unknown. Each job of the chosen
week becomes a single-node job on the admin's own inventory: its processors become cores, its
requested (or actual) run time becomes hours, its submit time its ready time, and its
"preceding job" a `follows` link when that job is imported in the same week (the SWF think
time after it is not modelled: `follows` has no lag). Memory in SWF is KB per processor, read
as KiB. A file that is not a trace at all (JSON, a CSV table, a binary file, an empty file)
is told in one line, not line by line.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Literal

import numpy as np

from assignplan.documents import Batch
from assignplan.errors import InputError
from assignplan.importers import Inventory, finish_batch, load_inventory
from assignplan.importers.reading import looks_like, wrong_kind
from assignplan.reading import read_bytes
from assignplan.units import MAX_JOB_HOURS, counted

FIELDS = (
    "job number", "submit time", "wait time", "run time", "allocated processors",
    "average CPU time", "used memory", "requested processors", "requested time",
    "requested memory", "status", "user", "group", "executable", "queue", "partition",
    "preceding job", "think time",
)
(JOB, SUBMIT, WAIT, RUN, ALLOC, CPU, USED_MEM, REQ_PROCS, REQ_TIME, REQ_MEM, STATUS,
 USER, GROUP, EXE, QUEUE, PARTITION, PRECEDING, THINK) = range(len(FIELDS))
WEEK_S = 7 * 24 * 3600
SWF_LINE = "one job per line: 18 whitespace-separated numbers"
SWF_KIND = f"an SWF trace ({SWF_LINE})"
# Without a start in the inventory file or the trace, week 1 starts on a fixed Monday so that the
# same command always writes the same batch.
FIXED_START = datetime(2000, 1, 3, tzinfo=UTC)
MAX_LISTED = 20  # malformed lines listed one by one before the rest are summarised

Estimate = Literal["requested", "actual"]


class _BadLine(ValueError):
    """One malformed job line; the message already names the file and line."""


@dataclass(frozen=True, eq=False)
class Trace:
    """The job lines of an SWF file.

    ``jobs``: float64[n, 18], the fields in SWF order; ``line``: int64[n], the file line of
    each job (1-based); ``bad``: the malformed lines skipped under ``skip_bad``.
    """

    source: str
    jobs: np.ndarray
    line: np.ndarray
    unix_start: int | None = None
    bad: tuple[str, ...] = ()

    @property
    def n_weeks(self) -> int:
        """Weeks the trace spans: week K holds submit times in [(K-1)*7 d, K*7 d)."""
        submit = self.jobs[:, SUBMIT]
        submit = submit[submit >= 0]
        return int(submit.max() // WEEK_S) + 1 if len(submit) else 0


def parse_swf(text: str, source: str = "<swf>", *, skip_bad: bool = False) -> Trace:
    """Parse SWF text; malformed lines are errors naming their line, or skipped if asked.

    Text in which not one line is a job line is not a trace: one line says what it looks like.
    """
    kind = looks_like(text[:8192].encode("utf-8"))
    if kind in ("empty", "binary", "json"):
        raise wrong_kind(source, kind, SWF_KIND)
    rows: list[list[float]] = []
    lines: list[int] = []
    bad: list[str] = []
    first_line: dict[int, int] = {}
    unix_start = None
    for lineno, raw in enumerate(text.splitlines(), start=1):
        stripped = raw.strip()
        if not stripped:
            continue
        if stripped.startswith(";"):
            if unix_start is None:
                unix_start = _header_start(stripped, lineno, source)
            continue
        try:
            values = _parse_job_line(stripped, lineno, source)
            _check_unique(int(values[JOB]), lineno, source, first_line)
        except _BadLine as exc:
            bad.append(str(exc))
            continue
        rows.append(values)
        lines.append(lineno)
    if not rows:
        raise _not_a_trace(source, kind, bad)
    if bad and not skip_bad:
        raise InputError(_listed(bad, "malformed line", "(use --skip-bad to skip them)"))
    jobs = np.asarray(rows, dtype=np.float64)
    return Trace(source, jobs, np.asarray(lines, dtype=np.int64), unix_start, tuple(bad))


def read_swf(path: Path | str, *, skip_bad: bool = False) -> Trace:
    """Read and parse an SWF file (see `parse_swf`).

    Bytes that are not UTF-8 are read as replacement characters: in a trace they can only sit
    in ';' comments (a job line holds numbers), so a comment in another encoding does no harm.
    """
    data = read_bytes(path)
    kind = looks_like(data)
    if kind in ("binary", "utf16"):
        raise wrong_kind(path, kind, SWF_KIND)
    return parse_swf(data.decode("utf-8", errors="replace"), str(path), skip_bad=skip_bad)


def _not_a_trace(source: str, kind: str, bad: list[str]) -> InputError:
    """The problem of text without a single job line that could be read: one line, unless its
    first line looks like a trace line, when the malformed lines are listed as in a trace."""
    if not bad:
        return InputError(f"{source}: ';' header lines but no job lines (an SWF trace has"
                          f" {SWF_LINE})")
    if kind in ("csv", "text"):
        return wrong_kind(source, kind, SWF_KIND)
    if kind == "swf":
        return InputError(_listed(bad, "malformed line", "") + [
            f"{source}: not one of its {counted(len(bad), 'job line')} could be read, so"
            " --skip-bad would import nothing"])
    first = bad[0].removeprefix(f"{source}:")
    return InputError(
        f"{source}: not an SWF trace: none of its {counted(len(bad), 'line')} outside ';'"
        f" comments is a job line of 18 whitespace-separated numbers (line {first})"
    )


def _header_start(line: str, lineno: int, source: str) -> int | None:
    key, sep, value = line.lstrip(";").partition(":")
    if not sep or key.strip() != "UnixStartTime":
        return None
    try:
        return int(value.strip())
    except ValueError:
        raise InputError(
            f"{source}:{lineno}: UnixStartTime is not a whole number of seconds: '{value.strip()}'"
        ) from None


def _parse_job_line(line: str, lineno: int, source: str) -> list[float]:
    parts = line.split()
    if len(parts) != len(FIELDS):
        raise _BadLine(f"{source}:{lineno}: expected {len(FIELDS)} fields, found {len(parts)}")
    values = []
    for k, part in enumerate(parts):
        try:
            value = float(part)
        except ValueError:
            value = math.nan
        where = f"{source}:{lineno}: field {k + 1} ({FIELDS[k]})"
        if not math.isfinite(value):
            raise _BadLine(f"{where} is not a number: '{part}'")
        if value < 0 and value != -1:
            raise _BadLine(f"{where} is {part}; only -1 (unknown) may be negative")
        if k in (JOB, PRECEDING) and value != int(value):
            raise _BadLine(f"{where} is {part}; job numbers are whole numbers")
        values.append(value)
    return values


def _check_unique(number: int, lineno: int, source: str, first_line: dict[int, int]) -> None:
    if number in first_line:
        raise _BadLine(
            f"{source}:{lineno}: job number {number} already used on line {first_line[number]}"
        )
    first_line[number] = lineno


def _listed(problems: list[str], noun: str, hint: str) -> list[str]:
    out = problems[:MAX_LISTED]
    if len(problems) > MAX_LISTED:
        more = counted(len(problems) - MAX_LISTED, "more " + noun)
        out.append(f"... and {more} {hint}".rstrip())
    return out


# --------------------------------------------------------------------------- one week


@dataclass(frozen=True)
class WeekImport:
    """A week turned into a batch, with what was left out and why."""

    batch: Batch
    week: int
    source: str
    submitted: int  # job lines of the week before any skipping
    skipped: dict[str, int] = field(default_factory=dict)  # reason -> jobs, in report order
    bad_lines: int = 0
    dropped_follows: int = 0  # preceding job in the week but skipped
    outside_follows: int = 0  # preceding job in another week
    notes: tuple[str, ...] = ()  # about the inventory file

    @property
    def imported(self) -> int:
        return len(self.batch.jobs)

    def report_lines(self) -> list[str]:
        """One line per fact the admin should know, for stderr."""
        lines = list(self.notes) + [
            f"{self.source}: imported {self.imported:,} of {counted(self.submitted, 'job')}"
            f" of week {self.week} (window starts {self.batch.window.start.isoformat()})"
        ]
        lines += [f"skipped {counted(n, 'job')}: {reason}" for reason, n in self.skipped.items()]
        if self.bad_lines:
            lines.append(f"skipped {counted(self.bad_lines, 'malformed line')} of the trace")
        if self.dropped_follows:
            lines.append(f"dropped {counted(self.dropped_follows, 'follows link')}: the"
                         " preceding job was skipped")
        if self.outside_follows:
            lines.append(f"ignored {counted(self.outside_follows, 'follows link')} to jobs of"
                         " other weeks")
        return lines


def week_batch(
    trace: Trace,
    inventory: Inventory,
    week: int,
    *,
    start: datetime | None = None,
    estimate: Estimate = "requested",
    gib_per_core: float = 2.0,
) -> WeekImport:
    """Batch of the jobs submitted in week `week` (1-based) of the trace, on `inventory`.

    Window start: `start`, else the inventory's window start, else the trace's UnixStartTime
    plus (week-1) weeks, else a fixed Monday plus (week-1) weeks. Window length: the
    inventory's, else 168 h. Each job is skipped for the first of these reasons that applies:
    cancelled before it started, no processor count, no run time estimate, a run time over the
    planner's limit, no node can hold it.
    """
    _check_options(trace, week, estimate, gib_per_core)
    in_week = (trace.jobs[:, SUBMIT] // WEEK_S) == week - 1
    rows = trace.jobs[in_week]
    if not len(rows):
        raise InputError(
            f"{trace.source}: week {week} has no jobs (none submitted between day"
            f" {7 * (week - 1)} and day {7 * week} of the trace)"
        )
    cores, mib, secs = _demands(rows, estimate, gib_per_core)
    keep, skipped = _classify(rows, cores, mib, secs, inventory, estimate)
    if not keep.any():
        none = "its only job cannot" if len(rows) == 1 else f"none of its {len(rows):,} jobs can"
        raise InputError(
            [f"{trace.source}: week {week}: {none} be imported"]
            + [f"skipped {counted(n, 'job')}: {reason}" for reason, n in skipped.items()]
        )
    jobs, dropped, outside = _job_docs(rows, keep, cores, mib, secs, (week - 1) * WEEK_S)
    lines = trace.line[in_week][keep]
    batch = finish_batch(
        {"window": _window(trace, inventory, week, start),
         "nodes": [g.model_dump(mode="json") for g in inventory.nodes], "jobs": jobs},
        f"{trace.source} week {week}",
        [f"{trace.source}:{line} ({job['name']})" for line, job in zip(lines, jobs, strict=True)],
    )
    return WeekImport(batch, week, trace.source, len(rows), skipped, len(trace.bad),
                      dropped, outside)


def import_swf(
    trace_path: Path | str,
    inventory_path: Path | str,
    week: int,
    *,
    start: datetime | None = None,
    estimate: Estimate = "requested",
    gib_per_core: float = 2.0,
    skip_bad: bool = False,
) -> WeekImport:
    """Read the inventory file and the trace, and build the batch of one week (see
    `week_batch`)."""
    inventory = load_inventory(inventory_path)
    trace = read_swf(trace_path, skip_bad=skip_bad)
    result = week_batch(trace, inventory, week, start=start, estimate=estimate,
                        gib_per_core=gib_per_core)
    notes = inventory.notes(str(inventory_path), str(trace_path))
    return replace(result, notes=tuple(notes))


def _check_options(trace: Trace, week: int, estimate: str, gib_per_core: float) -> None:
    if estimate not in ("requested", "actual"):
        raise InputError(f"--estimate {estimate}: choose requested or actual")
    if not math.isfinite(gib_per_core):
        raise InputError(f"--gib-per-core {gib_per_core}: not a number of GiB")
    if gib_per_core <= 0:
        raise InputError(f"--gib-per-core {gib_per_core:g}: must be greater than 0")
    if week < 1:
        raise InputError(f"--week {week}: weeks are numbered from 1")
    if week > trace.n_weeks:
        cover = ("week 1 only" if trace.n_weeks == 1 else f"weeks 1 to {trace.n_weeks}")
        raise InputError(
            f"{trace.source}: week {week} is beyond the trace (its submit times cover {cover})"
        )


def _demands(
    rows: np.ndarray, estimate: Estimate, gib_per_core: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cores, memory (whole MiB) and run seconds per job; <= 0 where unknown.

    Cores: requested processors, else allocated. Memory: the per-processor KB (taken as KiB)
    times cores, rounded up to whole MiB, else `gib_per_core` per core.
    """
    cores = np.where(rows[:, REQ_PROCS] > 0, rows[:, REQ_PROCS], rows[:, ALLOC])
    per_proc_kib = rows[:, REQ_MEM if estimate == "requested" else USED_MEM]
    recorded = np.ceil(np.round(per_proc_kib * cores / 1024, 6))
    default = np.ceil(np.round(gib_per_core * 1024 * cores, 6))
    mib = np.maximum(1, np.where(per_proc_kib > 0, recorded, default))
    if estimate == "requested":
        secs = rows[:, REQ_TIME]
    else:
        # A completed job of 0 s still ran; one second keeps it (its duration rounds to 1 min).
        secs = np.where(rows[:, RUN] >= 0, np.maximum(rows[:, RUN], 1), -1)
    return cores, mib, secs


def _classify(
    rows: np.ndarray, cores: np.ndarray, mib: np.ndarray, secs: np.ndarray,
    inventory: Inventory, estimate: Estimate,
) -> tuple[np.ndarray, dict[str, int]]:
    """Mask of the jobs kept, and the skipped count per reason (first matching reason wins).

    Cancelled before starting: status 5 (cancelled) with run time <= 0, or run time 0 with a
    status other than 1 (completed); a job that was cancelled after it ran is kept.
    """
    run, status = rows[:, RUN], rows[:, STATUS]
    node_cores = np.array([g.cores for g in inventory.nodes])
    node_mib = np.array([round(g.memory_gib * 1024) for g in inventory.nodes])
    fits = ((cores[:, None] <= node_cores) & (mib[:, None] <= node_mib)).any(axis=1)
    cancelled = ((status == 5) & (run <= 0)) | ((run == 0) & (status != 1))
    reasons = [
        ("cancelled before they started", cancelled),
        ("no processor count", cores <= 0),
        ("no requested time" if estimate == "requested" else "no run time", secs <= 0),
        (f"run time over the planner's limit of {MAX_JOB_HOURS:,.0f} h",
         secs > MAX_JOB_HOURS * 3600),
        (f"larger than the largest node ({node_cores.max()} cores, {node_mib.max() / 1024:g}"
         " GiB)", ~fits),
    ]
    keep = np.ones(len(rows), dtype=bool)
    skipped: dict[str, int] = {}
    for reason, hit in reasons:
        hit = hit & keep
        if hit.any():
            skipped[reason] = int(hit.sum())
        keep &= ~hit
    return keep, skipped


def _job_docs(
    rows: np.ndarray, keep: np.ndarray, cores: np.ndarray, mib: np.ndarray, secs: np.ndarray,
    week_start_s: int,
) -> tuple[list[dict], int, int]:
    """Job documents of the kept rows, and the follows links dropped (skipped, other week)."""
    in_week = {int(n) for n in rows[:, JOB]}
    kept = {int(n) for n in rows[keep, JOB]}
    jobs: list[dict] = []
    dropped = outside = 0
    for k in np.flatnonzero(keep):
        row = rows[k]
        doc = {
            "name": f"job-{int(row[JOB])}",
            "cores": int(cores[k]),
            "memory_gib": float(mib[k]) / 1024,
            "hours": float(secs[k]) / 3600,
            "ready_h": (float(row[SUBMIT]) - week_start_s) / 3600,
        }
        before = int(row[PRECEDING])
        if before in kept:
            doc["follows"] = [f"job-{before}"]
        elif before in in_week:
            dropped += 1
        elif before != -1:
            outside += 1
        jobs.append(doc)
    return jobs, dropped, outside


def _window(trace: Trace, inventory: Inventory, week: int, start: datetime | None) -> dict:
    hours = inventory.window.hours if inventory.window else 168.0
    if start is None and inventory.window is not None:
        start = inventory.window.start
    if start is None:
        base = (
            datetime.fromtimestamp(trace.unix_start, UTC)
            if trace.unix_start is not None else FIXED_START
        )
        start = base + timedelta(weeks=week - 1)
    return {"start": start.isoformat(), "hours": hours}
