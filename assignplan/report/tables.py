"""Rich tables of a plan: the summary, one row per node and one row per job."""

from __future__ import annotations

import pandas as pd
from rich.console import Console
from rich.table import Table

from assignplan.metrics import (
    LISTED,
    bound_source_text,
    completion_text,
    tardiness_text,
    turnaround_text,
)
from assignplan.units import counted, number


def summary_table(s: dict) -> Table:
    """Headline figures: makespan against the bound and the window, utilisation, lateness."""
    t = Table(title=f"Plan summary ({s['method']})", show_header=False, title_justify="left")
    t.add_column("figure", style="bold")
    t.add_column("value")
    window_h = s["window_h"]
    fits = "inside" if s["makespan_h"] <= window_h else "PAST"
    rows = [
        ("method", f"{s['method']} ({s['status']})"
                   + (f", minimising {s['minimised']}" if s.get("minimised") else "")),
        ("jobs / nodes", f"{counted(s['jobs'], 'job')} on {counted(s['nodes'], 'node')}"),
        ("makespan", f"{number(s['makespan_h'], 2)} h, ends {s['makespan_at']} "
                     f"({fits} the {window_h:g} h window)"),
        ("lower bound", f"{number(s['lower_bound_h'], 2)} h (gap {number(s['gap_pct'], 2)} %)"
                        + (f", set by {why}" if (why := bound_source_text(
                            s.get('lower_bound_set_by'))) else "")
                        + ("" if s.get("weighted_tardiness_bound_h") is None else
                           f"; weighted tardiness bound "
                           f"{number(s['weighted_tardiness_bound_h'], 2)} h")),
        ("utilisation over makespan",
         f"cores {number(s['core_utilisation_pct'], 1, ' %')}, memory "
         f"{number(s['memory_utilisation_pct'], 1, ' %')}, "
         f"GPUs {number(s['gpu_utilisation_pct'], 1, ' %')}"),
        ("utilisation over window",
         f"cores {number(s['core_utilisation_window_pct'], 1, ' %')}, memory "
         f"{number(s['memory_utilisation_window_pct'], 1, ' %')}, GPUs "
         f"{number(s['gpu_utilisation_window_pct'], 1, ' %')}"),
        ("jobs ending past window", f"{s['jobs_past_window']:,}"
         + _listed(s["past_window"], s["jobs_past_window"], "past_h", "past it")),
        ("late jobs", f"{s['late_jobs']:,} (weighted tardiness {tardiness_text(s)})"
         + _listed(s["late"], s["late_jobs"], "late_h", "late")),
        ("weighted completion", completion_text(s)),
        ("turnaround", turnaround_text(s)),
        ("time", _time_text(s)),
    ]
    for k, v in rows:
        t.add_row(k, v)
    return t


def _listed(rows: list[dict], total: int, key: str, what: str) -> str:
    """': a (5.0 h late), b (1.5 h late) and 3 more', worst first; '' when there is none."""
    if not rows:
        return ""
    named = ", ".join(f"{r['job']} ({r[key]:,.1f} h {what})" for r in rows[:LISTED])
    more = total - min(len(rows), LISTED)
    return f": {named}" + (f" and {more:,} more" if more > 0 else "")


def _time_text(s: dict) -> str:
    """Wall time of the whole command and the method's own share of it, and the seed."""
    wall = s.get("wall_seconds")
    text = (f"{wall:.2f} s in all (method {s['seconds']:.2f} s)" if wall is not None
            else f"method {s['seconds']:.2f} s")
    return text + (f", seed {s['seed']}" if s["seed"] is not None else "")


NODE_ROWS = 60  # a site's thousands of nodes are the CSV's to list (and --all's)


def node_table(nodes: pd.DataFrame, limit: int | None = NODE_ROWS) -> Table:
    """Per-node load: how much each node does and how full it gets; the first `limit` nodes
    in inventory order unless limit is None."""
    shown = nodes if limit is None else nodes.head(limit)
    title = "Nodes (utilisation over the makespan)" + (
        "" if len(shown) == len(nodes) else
        f"; first {len(shown)} of {len(nodes):,} in inventory order, --all shows every node")
    t = Table(title=title, title_justify="left")
    for col, justify in [("node", "left"), ("jobs", "right"), ("core-h", "right"),
                         ("core util", "right"), ("peak cores", "right"),
                         ("peak GiB", "right"), ("GPU util", "right"), ("busy until", "left")]:
        t.add_column(col, justify=justify)
    for r in shown.itertuples(index=False):
        t.add_row(
            r.node, f"{r.jobs:,}", number(r.core_hours, 1), number(r.core_utilisation_pct, 1, " %"),
            f"{r.peak_cores}/{r.cores}", f"{r.peak_memory_gib:g}/{r.memory_gib:g}",
            number(r.gpu_utilisation_pct, 1, " %"), r.busy_until or "idle",
        )
    return t


def job_table(jobs: pd.DataFrame, limit: int | None = 30) -> Table:
    """Per-job placement in start order; truncated to `limit` rows unless limit is None."""
    shown = jobs if limit is None else jobs.head(limit)
    title = "Jobs" if len(shown) == len(jobs) else (
        f"Jobs (first {len(shown)} of {len(jobs):,} by start; --all shows every job)")
    t = Table(title=title, title_justify="left")
    for col, justify in [("job", "left"), ("node", "left"), ("start", "left"), ("end", "left"),
                         ("hours", "right"), ("cores", "right"), ("GiB", "right"),
                         ("late?", "left")]:
        t.add_column(col, justify=justify)
    for r in shown.itertuples(index=False):
        flag = "late" if r.late else ""
        if r.past_window:
            flag = (flag + ", " if flag else "") + "past window"
        t.add_row(r.job, r.node, r.start, r.end, number(r.hours, 2), str(r.cores),
                  f"{r.memory_gib:g}", flag, style="red" if r.late else None)
    return t


def make_console() -> Console:
    """A stdout console; piped output gets a width that fits our tables instead of rich's 80."""
    console = Console()
    if not console.is_terminal:
        console.width = max(console.width, 110)
    return console


def print_plan(console: Console, s: dict, nodes: pd.DataFrame, jobs: pd.DataFrame,
               *, show_all: bool) -> None:
    """The summary, per-node and per-job tables."""
    console.print(summary_table(s))
    console.print(node_table(nodes, None if show_all else NODE_ROWS))
    console.print(job_table(jobs, None if show_all else 30))


def compare_table(records: list[dict]) -> Table:
    """One row per method: makespan and its gaps (to the bound, to the best found), lateness,
    the gaps of weighted tardiness and weighted completion to their bounds, mean wait, cost.
    (The gap to a proven optimum is the gap to the best then; `compare --json` has both.)"""
    t = Table(title="Methods compared", title_justify="left")
    batches = any("batch" in r for r in records)  # several batches: a column naming each
    for col in ("batch", "method", "makespan h", "gap bound", "gap best", "cores", "late",
                "tard. gap", "compl. gap", "wait h", "s", "status")[0 if batches else 1:]:
        t.add_column(col, justify="left" if col in ("batch", "method", "status") else "right")
    for r in records:
        t.add_row(*([r["batch"]] if batches else []),
                  r["method"], number(r["makespan_h"], 2), number(r["gap_pct"], 2, " %"),
                  number(r["gap_best_pct"], 2, " %"),
                  number(r["core_utilisation_pct"], 1, " %"),
                  "–" if r["late_jobs"] is None else str(r["late_jobs"]),
                  _tardiness_gap_cell(r), number(r["completion_gap_pct"], 2, " %"),
                  number(r["mean_wait_h"], 2), number(r["seconds"], 2), r["status"])
    return t


def _tardiness_gap_cell(r: dict) -> str:
    """The tardiness gap in percent, or the excess in hours over a zero bound ('+3.5 h')."""
    if r["tardiness_gap_pct"] is not None or r["tardiness_excess_h"] is None:
        return number(r["tardiness_gap_pct"], 2, " %")
    return f"+{number(r['tardiness_excess_h'], 2)} h"


def compare_notes(records: list[dict]) -> list[str]:
    """Lines under the comparison table: each skipped or failed method's reason, and where
    the bound came from when exact proved more than the bound `solve` reports alone."""
    lines = [f"{r['batch'] + ': ' if 'batch' in r else ''}{r['method']}: {r['status']}: "
             f"{r['note']}" for r in records if r["note"]]
    firsts = [r for k, r in enumerate(records)
              if k == 0 or r.get("batch") != records[k - 1].get("batch")]
    for first in firsts:
        if first["lower_bound_h"] > first["provable_bound_h"]:
            lines.append(
                f"{first['batch'] + ': ' if 'batch' in first else ''}gap to bound: against "
                f"{first['lower_bound_h']:,.2f} h, which the exact solver proved; solve alone "
                f"reports its gap against the lower bound of {first['provable_bound_h']:,.2f}"
                " h, so its figures are higher here")
    return lines
