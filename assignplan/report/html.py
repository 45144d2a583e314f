"""A plan as one self-contained HTML page: check result, summary, charts, node and job tables.

The page opens with what the independent checker says of the plan (a prominent warning when
it fails). It needs nothing at view time: styles are inline, charts are the scenes of
`report.charts` rendered as inline SVG with `<title>` hover text; no script, no web font, no
link to any other resource, so it can be mailed or archived as one file. Size budget: about
0.4 KB per job plus 0.3 KB per node, so a 10,000-job plan stays under 5 MB (checked by the
tests); the per-job table is complete but starts folded when it is long. Every job is exactly
one `rect[data-job]` in the timeline.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from html import escape
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from assignplan import __version__
from assignplan.check import Violation
from assignplan.files import atomic_write_text
from assignplan.instance import Instance
from assignplan.metrics import (
    bound_source_text,
    completion_text,
    job_frame,
    node_frame,
    summary,
    tardiness_text,
)
from assignplan.plan import PlanResult
from assignplan.report.charts import plan_scenes
from assignplan.report.figures import NODE_ROW_LIMIT
from assignplan.report.scene import stylesheet
from assignplan.report.svg import render_svg
from assignplan.units import clock, counted, number

if TYPE_CHECKING:
    from assignplan.risk.figures import Risk

OPEN_TABLE_ROWS = 500  # longer job tables start folded, so the charts stay in reach
FIRST_VIOLATIONS = 5  # violations quoted in the banner of a plan that fails the check

PAGE_CSS = """
:root{--ink:#222;--muted:#666;--line:#e3e1dc;--paper:#faf9f6}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);
font:14px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif}
main{max-width:1200px;margin:0 auto;padding:22px 28px 40px}
h1{font-size:22px;font-weight:650;margin:0 0 2px}
h2{font-size:16px;font-weight:650;margin:30px 0 6px}
.lede,.note{color:var(--muted);margin:0 0 12px}
.cards{display:grid;grid-template-columns:repeat(auto-fill,minmax(205px,1fr));gap:10px}
.card{background:#fff;border:1px solid var(--line);border-top:3px solid #0072B2;
border-radius:6px;padding:8px 12px}
.card.warn{border-top-color:#D55E00}.card.ok{border-top-color:#009E73}
.card small{display:block;color:var(--muted);font-size:11.5px;text-transform:uppercase;
letter-spacing:.04em}
.card b{display:block;font-size:22px;font-weight:650;font-variant-numeric:tabular-nums}
.card span{color:var(--muted);font-size:12px}
.chart{display:block;width:100%;height:auto;background:#fff;border:1px solid var(--line);
border-radius:6px}
svg text{font-family:inherit}
.banner{border-radius:6px;padding:10px 14px;margin:4px 0 14px;border:1px solid}
.banner.fail{background:#FBEAE0;border-color:#D55E00;border-left-width:6px;color:#5a2000}
.banner.fail b{font-size:16px}.banner ul{margin:6px 0 0;padding-left:20px}
.banner.ok{background:#E6F4EF;border-color:#009E73;color:#0b3b2c}
table{border-collapse:collapse;width:100%;background:#fff;font-size:12.5px;
font-variant-numeric:tabular-nums;border:1px solid var(--line)}
th{position:sticky;top:0;background:#efede7;text-align:left;font-weight:600}
th,td{padding:3px 8px;border-bottom:1px solid #efede8;white-space:nowrap}
#nodes td:nth-child(n+3):not(:last-child),#jobs td:nth-child(n+5):nth-child(-n+7){
text-align:right}
#jobs tr.l td{color:#a33a00;font-weight:600}
details summary{cursor:pointer;color:#0062a0;margin:4px 0 8px}
footer{margin-top:30px;color:var(--muted);font-size:12px}
"""


def _card(label: str, value: str, sub: str, tone: str = "") -> str:
    cls = f"card {tone}".strip()
    return f'<div class="{cls}"><small>{label}</small><b>{value}</b><span>{sub}</span></div>'


def summary_cards(inst: Instance, s: dict) -> str:
    """The headline figures of `stats.summary` as a grid of cards."""
    inside = s["makespan_h"] <= s["window_h"]
    seed = "" if s["seed"] is None else f", seed {s['seed']}"
    mk, ends = round(s["makespan_h"] * 60), clock(inst.window_start, inst.window_minutes)
    cards = [
        _card("makespan", f"{number(s['makespan_h'], 1)} h",
              f"ends {clock(inst.window_start, mk)}, {'inside' if inside else 'PAST'} the"
              f" window (to {ends})", "ok" if inside else "warn"),
        _card("lower bound", f"{number(s['lower_bound_h'], 1)} h",
              f"gap {number(s['gap_pct'], 2)} % above the bound"
              + (f"; set by {escape(why)}" if (why := bound_source_text(
                  s.get("lower_bound_set_by"))) else "")),
        *(
            _card(f"{name} utilisation", number(s[f"{key}_utilisation_pct"], 1, " %"),
                  f"over the makespan; {number(s[f'{key}_utilisation_window_pct'], 1, ' %')}"
                  " over the window (of the capacity outside maintenance)")
            for name, key in (("core", "core"), ("memory", "memory"), ("GPU", "gpu"))
        ),
        _card("past the window", f"{s['jobs_past_window']:,}", "jobs ending after it",
              "warn" if s["jobs_past_window"] else "ok"),
        _card("late jobs", f"{s['late_jobs']:,}",
              f"weighted tardiness {escape(tardiness_text(s))}",
              "warn" if s["late_jobs"] else "ok"),
        _card("weighted completion", f"{number(s['weighted_completion_h'], 0)} h",
              escape(completion_text(s).split(", ", 1)[1]) if s.get(
                  "weighted_completion_bound_h") is not None else "sum of weight x end"),
        _card("mean wait", f"{number(s['mean_wait_h'], 2)} h",
              f"from ready to start; P90 {number(s['p90_wait_h'], 2)} h; mean bounded"
              f" slowdown {number(s['mean_bounded_slowdown'], 2)} (runs under"
              f" {s['bounded_slowdown_threshold_min']} min count as"
              f" {s['bounded_slowdown_threshold_min']} min)"),
        _card("method", escape(f"{s['method']}"),
              f"{escape(s['status'])}, solved in {s['seconds']:.2f} s{seed}"
              + (f"; minimising {escape(s['minimised'])}" if s.get("minimised") else "")),
    ]
    return '<div class="cards">' + "".join(cards) + "</div>"


def check_banner(violations: Sequence[Violation]) -> str:
    """What the independent checker (`check.check_plan`) says of the plan, in plain words:
    a prominent warning with the count by kind and the first messages, or that it passed."""
    if not violations:
        return ('<div class="banner ok" id="check"><b>The plan passes the independent check:'
                "</b> every job runs once, on a node that can hold it, within the node's"
                " capacity, outside maintenance, after its ready time and after the jobs it"
                " follows.</div>")
    counts = Counter(v.kind for v in violations)
    by_kind = ", ".join(f"{kind.replace('_', ' ')} {n:,}" for kind, n in
                        sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])))
    quoted = "".join(f"<li>{escape(v.message)}</li>" for v in violations[:FIRST_VIOLATIONS])
    rest = len(violations) - FIRST_VIOLATIONS
    more = (f"<li>… and {counted(rest, 'more violation')}; <code>assignplan check</code> lists"
            " them all</li>" if rest > 0 else "")
    return (f'<div class="banner fail" id="check" role="alert"><b>This plan FAILS the'
            f" independent check: {counted(len(violations), 'violation')}</b> ({by_kind})."
            " Do not submit it as it is; the figures below describe the plan as written."
            f"<ul>{quoted}{more}</ul></div>")


def _timeline_note(inst: Instance) -> str:
    if inst.n_nodes <= NODE_ROW_LIMIT:
        return ("One row per node; each bar is a job from start to end, its height the share of"
                " the node's cores it uses. Hover a bar for the job's figures.")
    kinds = len(set(inst.node_groups))
    return (f"{inst.n_nodes:,} nodes, more than {NODE_ROW_LIMIT} can show as labelled rows: they"
            f" are grouped in {kinds} bands by kind, each node a thin row, and the shaded lane"
            " above each band is that kind's core utilisation. Every job is still one bar"
            " (hover for its figures).")


_NOTES = {
    "timeline": ("Timeline", None),
    "utilisation": (
        "Cluster utilisation over time",
        "Cores, memory and GPUs busy (solid) and available (dashed: nodes in maintenance taken"
        " out), as a share of the capacity available on average over the makespan. That is"
        " the utilisation cards' denominator, so each solid curve's mean over the makespan is"
        " its card's figure; the dashed line sits above 100 % while no node is in maintenance"
        " and dips while some are."),
    "node-utilisation": (
        "Utilisation per node",
        "Core utilisation over the makespan, against each node's time outside maintenance (as"
        " in the node table); a dot marks a GPU node's GPU utilisation."),
    "convergence": ("Convergence",
                    "Best and median makespan of the population per generation."),
}


def _when(inst: Instance, hours: float) -> str:
    return clock(inst.window_start, round(hours * 60))


def node_table_html(inst: Instance, nodes: pd.DataFrame) -> str:
    """The per-node table, the same figures as the terminal's node table."""
    head = ("<tr><th>node<th>kind<th>jobs<th>core-h<th>core util<th>peak cores"
            "<th>peak memory GiB<th>GPU util<th>busy until</tr>")
    rows = [
        f"<tr><td>{escape(r.node)}<td>{escape(r.kind)}<td>{r.jobs:,}<td>{number(r.core_hours, 1)}"
        f"<td>{number(r.core_utilisation_pct, 1, ' %')}<td>{r.peak_cores}/{r.cores}"
        f"<td>{r.peak_memory_gib:g}/{r.memory_gib:g}<td>{number(r.gpu_utilisation_pct, 1, ' %')}"
        f"<td>{_when(inst, r.busy_until_h) if r.jobs else 'idle'}"
        for r in nodes.itertuples(index=False)
    ]
    return f'<table id="nodes"><thead>{head}</thead><tbody>{"".join(rows)}</tbody></table>'


def job_table_html(inst: Instance, jobs: pd.DataFrame) -> str:
    """Every job in start order; end tags left out (valid HTML) to keep long tables lean."""
    head = ("<tr><th>job<th>node<th>start<th>end<th>hours<th>cores<th>memory GiB"
            "<th>flag</tr>")
    rows = []
    for r in jobs.itertuples(index=False):
        flag = ", ".join(f for f, on in (("late", r.late), ("past window", r.past_window)) if on)
        cls = ' class="l"' if r.late else ""
        rows.append(f"<tr{cls}><td>{escape(r.job)}<td>{escape(r.node)}"
                    f"<td>{_when(inst, r.start_h)}<td>{_when(inst, r.end_h)}"
                    f"<td>{r.hours:g}<td>{r.cores}<td>{r.memory_gib:g}<td>{flag}")
    table = f'<table id="jobs"><thead>{head}</thead><tbody>{"".join(rows)}</tbody></table>'
    state = " open" if len(jobs) <= OPEN_TABLE_ROWS else ""
    return (f"<details{state}><summary>{len(jobs):,} jobs, in start order</summary>"
            f"{table}</details>")


def render_html_report(inst: Instance, result: PlanResult, violations: Sequence[Violation], *,
                       title: str | None = None, risk: Risk | None = None) -> str:
    """The whole report page as one string (see the module docstring for what it holds).

    ``violations``: what `check.check_plan` found in the plan (empty when it passed); the
    page opens with it. ``risk``: the plan's replays under sampled run times
    (`risk.figures.assess`), shown in a section of their own after the charts.
    """
    s = summary(inst, result)
    nodes = node_frame(inst, result)
    title = title or f"Plan of {inst.n_jobs:,} jobs on {inst.n_nodes:,} nodes"
    ws = inst.window_start
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width,initial-scale=1">',
        f"<title>{escape(title)}</title><style>{PAGE_CSS}{stylesheet()}</style></head><body><main>",
        f"<h1>{escape(title)}</h1>",
        f'<p class="lede">{inst.n_jobs:,} jobs on {inst.n_nodes:,} nodes · window'
        f" {clock(ws, 0)} to {clock(ws, inst.window_minutes)} {ws.year}"
        f" ({inst.window_minutes / 60:g} h) · method {escape(result.method)}</p>",
        check_banner(violations),
        summary_cards(inst, s),
    ]
    for name, scene in plan_scenes(inst, result, nodes).items():
        heading, note = _NOTES[name]
        note = _timeline_note(inst) if name == "timeline" else note
        parts.append(f'<section><h2>{heading}</h2><p class="note">{note}</p>'
                     f"{render_svg(scene)}</section>")
    if risk is not None:
        from assignplan.report.risk import risk_scene, risk_section_html

        parts.append(risk_section_html(inst, risk, render_svg(risk_scene(inst, risk))))
    parts += [
        f"<section><h2>Nodes</h2>{node_table_html(inst, nodes)}</section>",
        f"<section><h2>Jobs</h2>{job_table_html(inst, job_frame(inst, result))}</section>",
        f"<footer>assignplan {escape(__version__)} · an advisory plan: the cluster's own"
        " scheduler and site policy decide what runs. Colours: the Okabe–Ito palette and"
        " lightness steps of it (20 job-group colours), readable with common colour-vision"
        " deficiencies.</footer>",
        "</main></body></html>\n",
    ]
    return "".join(parts)


def write_html_report(path: Path | str, inst: Instance, result: PlanResult,
                      violations: Sequence[Violation], *, title: str | None = None,
                      risk: Risk | None = None) -> int:
    """Write the report page atomically; returns the bytes written."""
    text = render_html_report(inst, result, violations, title=title, risk=risk)
    atomic_write_text(path, text)
    return len(text.encode("utf-8"))


def page_budget(n_jobs: int, n_nodes: int) -> int:
    """Bytes a report page may take at most (the budget of the module docstring)."""
    return 60_000 + 400 * n_jobs + 300 * n_nodes
