"""A plan's runtime risk shown: terminal tables, CSV files, the report's section and its chart.

Every figure comes from `risk.figures`; this module only lays them out. The runtime model is
named wherever figures appear: they hold only as far as the model the admin chose does.
"""

from __future__ import annotations

from html import escape
from pathlib import Path

import numpy as np
import pandas as pd
from rich.console import Console
from rich.table import Table

from assignplan.files import atomic_write, ensure_folder
from assignplan.instance import Instance
from assignplan.report.axes import LEFT, PLOT, Key, legend, y_grid
from assignplan.report.scene import Line, Polyline, Scene, Text
from assignplan.risk.figures import (
    LAST_NODES,
    RISKIEST,
    Risk,
    job_frame,
    makespan_samples,
    node_frame,
    summary,
)
from assignplan.units import clock, counted, number

POLICY_TEXT = {"keep": "keep the plan", "dispatch": "dispatch"}
CAUTION = ("These figures hold only as far as the runtime model does: it is an assumption you"
           " chose, not a forecast.")
PLOT_HEIGHT = 180.0


def headline(s: dict) -> str:
    return (f"{counted(s['samples'], 'sampled future')} of run times: {s['model_text']};"
            f" seed {s['seed']}")


def _pct(p: float | None) -> str:
    return "–" if p is None or p != p else f"{100 * p:.1f} %"


def risk_table(s: dict) -> Table:
    """Makespan quantiles, the chance of finishing inside the window, lateness, per policy."""
    t = Table(title=f"Runtime risk ({headline(s)})", title_justify="left")
    t.add_column("figure", style="bold")
    for p in s["policies"]:
        t.add_column(POLICY_TEXT[p], justify="right")
    pol = list(s["policies"].values())
    rows = [("planned makespan", [f"{number(s['planned_makespan_h'], 2)} h"] + [""] * (
        len(pol) - 1))]
    rows.append(("makespan mean", [f"{number(p['makespan_h']['mean'], 2)} h" for p in pol]))
    for q in ("p10", "p50", "p90", "p99"):
        rows.append((f"makespan {q.upper()}", [
            f"{number(p['makespan_h'][q], 2)} h ({p['makespan_at'][q]})" for p in pol]))
    rows += [
        (f"all jobs inside the {s['window_h']:g} h window", [_pct(p["inside_window"])
                                                             for p in pol]),
        ("late jobs (mean)", [number(p["mean_late_jobs"], 2) for p in pol]),
        ("weighted tardiness (mean)", [f"{number(p['mean_weighted_tardiness_h'], 2)} h"
                                       for p in pol]),
        ("core utilisation (expected)", [number(p["core_utilisation_pct"], 1, " %")
                                         for p in pol]),
    ]
    for name, values in rows:
        t.add_row(name, *values)
    return t


def jobs_table(inst: Instance, risk: Risk) -> Table | None:
    """The riskiest jobs under "keep the plan", with the dispatch figures beside them."""
    keep = job_frame(inst, risk, "keep")
    other = job_frame(inst, risk, "dispatch").set_index("job")
    risky = keep[(keep["p_late"].fillna(0) > 0) | (keep["p_past_window"] > 0)].head(RISKIEST)
    if risky.empty:
        return None
    t = Table(title=f"Jobs likeliest to be late ({counted(len(risky), 'job')}, keeping the"
              " plan; figures: keep the plan / dispatch)", title_justify="left")
    for col in ("job", "node", "due", "P(late)", "P(past window)", "P90 end, keep"):
        t.add_column(col, justify="left" if col in ("job", "node", "due") else "right",
                     no_wrap=col in ("job", "P(late)", "P(past window)"))
    ws = inst.window_start
    for r in risky.itertuples(index=False):
        d = other.loc[r.job]
        t.add_row(r.job, r.node, "" if np.isnan(r.due_h) else clock(ws, round(r.due_h * 60)),
                  f"{_pct(r.p_late)} / {_pct(d.p_late)}",
                  f"{_pct(r.p_past_window)} / {_pct(d.p_past_window)}", r.p90_end)
    return t


def nodes_table(inst: Instance, risk: Risk) -> Table:
    """The nodes that end last most often, per policy."""
    t = Table(title="Nodes ending last most often", title_justify="left")
    for p in risk.tallies:
        t.add_column(f"{POLICY_TEXT[p]}: node", justify="left")
        t.add_column("share", justify="right")
    frames = [node_frame(inst, risk, p).head(LAST_NODES) for p in risk.tallies]
    for k in range(LAST_NODES):
        cells = []
        for f in frames:
            hit = k < len(f) and f["share_ending_last"].iat[k] > 0
            cells += [f["node"].iat[k], _pct(f["share_ending_last"].iat[k])] if hit else ["", ""]
        if any(cells):
            t.add_row(*cells)
    return t


def print_risk(console: Console, inst: Instance, risk: Risk) -> None:
    s = summary(inst, risk)
    console.print(risk_table(s))
    jobs = jobs_table(inst, risk)
    if jobs is None:
        console.print("No job ended after its due time or the window in any sampled future.")
    else:
        console.print(jobs)
    console.print(nodes_table(inst, risk))
    console.print(CAUTION)


def write_risk_csv(folder: Path | str, inst: Instance, risk: Risk) -> list[Path]:
    """risk-jobs.csv and risk-nodes.csv (one row per job or node and policy) and
    risk-summary.csv (one row per policy), each written atomically."""
    folder = ensure_folder(folder)
    s = summary(inst, risk)
    jobs = pd.concat([job_frame(inst, risk, p).assign(policy=p) for p in risk.tallies])
    jobs = jobs.assign(p90_end=jobs["p90_end_iso"]).drop(columns=["p90_end_iso"])
    nodes = pd.concat([node_frame(inst, risk, p).assign(policy=p) for p in risk.tallies])
    rows = [{"policy": p, "model": s["model_text"], "samples": s["samples"], "seed": s["seed"],
             "planned_makespan_h": s["planned_makespan_h"],
             **{f"makespan_{k}_h": v for k, v in fig["makespan_h"].items()},
             "inside_window": fig["inside_window"], "mean_late_jobs": fig["mean_late_jobs"],
             "mean_weighted_tardiness_h": fig["mean_weighted_tardiness_h"],
             "core_utilisation_pct": fig["core_utilisation_pct"]}
            for p, fig in s["policies"].items()]
    frames = {"risk-jobs.csv": jobs, "risk-nodes.csv": nodes,
              "risk-summary.csv": pd.DataFrame(rows)}
    written = []
    for name, frame in frames.items():
        atomic_write(folder / name, lambda p, f=frame: f.to_csv(p, index=False))
        written.append(folder / name)
    return written


# --------------------------------------------------------------------------- the report


def risk_scene(inst: Instance, risk: Risk) -> Scene:
    """The share of sampled futures ending by each makespan (an empirical CDF per policy),
    with the planned makespan and the window end."""
    curves = {p: np.sort(makespan_samples(risk, p)) / 60 for p in risk.tallies}
    window, planned = inst.window_minutes / 60, risk.plan.makespan / 60
    lo = min(min(c[0] for c in curves.values()), planned)
    hi = max(max(c[-1] for c in curves.values()), planned)
    if window <= 1.25 * hi:
        hi = max(hi, window)
    pad = 0.03 * (hi - lo) if hi > lo else 1.0
    lo, hi = lo - pad, hi + pad
    keys = [Key(POLICY_TEXT[p], f"curve {p}", "line") for p in curves]
    keys += [Key("planned makespan", "mkline", "line"), Key("window end", "winend", "line")]
    items, below = legend(keys, LEFT, 4)
    top = below + 10
    bottom = top + PLOT_HEIGHT

    def x(h):
        return LEFT + (np.asarray(h, float) - lo) / (hi - lo) * PLOT

    items += y_grid(top, PLOT_HEIGHT, [0, 25, 50, 75, 100], 0, 100, "{:g} %")
    for h in _round_ticks(lo, hi):
        items += [Line(float(x(h)), top, float(x(h)), bottom, "grid"),
                  Text(float(x(h)), bottom + 18, f"{h:,g} h", "tick")]
    at = np.linspace(lo, hi, PLOT + 1)  # one point per pixel: exact as far as the eye goes
    for p, values in curves.items():
        share = np.searchsorted(values, at, side="right") / len(values)
        points = np.column_stack([x(at), bottom - PLOT_HEIGHT * share])
        items.append(Polyline(points, f"curve {p}",
                              f"{POLICY_TEXT[p]}: share of futures ending by a makespan"))
    for h, cls, text in ((planned, "mkline", f"planned makespan {planned:,.1f} h"),
                         (window, "winend", f"window end {window:g} h")):
        if lo <= h <= hi:
            items.append(Line(float(x(h)), top, float(x(h)), bottom, cls, text))
    return Scene("risk-makespan", bottom + 30, "Makespan under sampled run times",
                 "Makespan under sampled run times: share of futures ending by each makespan",
                 items)


def _round_ticks(lo: float, hi: float, about: int = 6) -> list[float]:
    """Round values (1, 2 or 5 times a power of ten apart) inside [lo, hi], about `about`."""
    raw = (hi - lo) / about
    power = 10 ** np.floor(np.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    return [float(v) for v in np.arange(np.ceil(lo / step) * step, hi, step)]


def risk_section_html(inst: Instance, risk: Risk, svg: str) -> str:
    """The report's runtime-risk section: what was sampled, the figures, the chart (`svg`,
    the rendered `risk_scene`), the riskiest jobs."""
    s = summary(inst, risk)
    rows = "".join(
        f"<tr><td>{POLICY_TEXT[p]}<td>{number(f['makespan_h']['mean'], 1)} h"
        + "".join(f"<td>{number(f['makespan_h'][q], 1)} h" for q in ("p10", "p50", "p90",
                                                                     "p99"))
        + f"<td>{_pct(f['inside_window'])}<td>{number(f['mean_late_jobs'], 2)}</tr>"
        for p, f in s["policies"].items())
    table = ('<table id="risk"><thead><tr><th>policy<th>mean<th>P10<th>P50<th>P90<th>P99'
             f"<th>inside window<th>late jobs (mean)</tr></thead><tbody>{rows}</tbody></table>")
    keep = job_frame(inst, risk, "keep")
    risky = keep[(keep["p_late"].fillna(0) > 0) | (keep["p_past_window"] > 0)].head(RISKIEST)
    jobs = "".join(
        f"<tr><td>{escape(r.job)}<td>{escape(r.node)}<td>{_pct(r.p_late)}"
        f"<td>{_pct(r.p_past_window)}<td>{escape(r.p90_end)}</tr>"
        for r in risky.itertuples(index=False))
    jobs_html = (f'<table id="risk-jobs"><thead><tr><th>job<th>node<th>P(late)'
                 f"<th>P(past window)<th>P90 end</tr></thead><tbody>{jobs}</tbody></table>"
                 if jobs else "<p class=\"note\">No job ended after its due time or the"
                 " window in any sampled future.</p>")
    return (f'<section id="runtime-risk"><h2>Runtime risk</h2><p class="note">'
            f"{escape(headline(s))}. Keep the plan: every job on its planned node, in the"
            " node's planned order, started as soon as there is room; dispatch: jobs in"
            " planned start order to the node where they can start first. Planned makespan"
            f" {number(s['planned_makespan_h'], 1)} h. {escape(CAUTION)}</p>{table}{svg}"
            f"<h2>Riskiest jobs, keeping the plan</h2>{jobs_html}</section>")
