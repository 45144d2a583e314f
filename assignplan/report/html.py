"""A plan as one self-contained HTML page: summary, charts as inline SVG, node and job tables.

The page needs nothing at view time: styles are inline, charts are inline SVG with `<title>`
hover text, no script, no web font, no link to any other resource, so it can be mailed or
archived as one file. Size budget: about 0.4 KB per job plus 0.3 KB per node, so a
10,000-job plan stays under 5 MB (checked by the tests); the per-job table is complete but
starts folded when it is long. Every job is exactly one `rect[data-job]` in the timeline.
"""

from __future__ import annotations

import math
from html import escape
from pathlib import Path

import pandas as pd

from assignplan import __version__
from assignplan.instance import Instance
from assignplan.plan import PlanResult
from assignplan.report.charts import NODE_ROW_LIMIT, PALETTE, group_colours
from assignplan.report.exports import atomic_write_text
from assignplan.report.stats import bound_source_text, job_frame, node_frame, summary
from assignplan.report.svg import (
    convergence_svg,
    node_utilisation_svg,
    timeline_svg,
    utilisation_svg,
)

OPEN_TABLE_ROWS = 500  # longer job tables start folded, so the charts stay in reach
LEGEND_GROUPS = 24  # job groups named in the timeline's legend, largest first

_CSS = """
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
.keys{display:flex;flex-wrap:wrap;gap:4px 14px;margin:0 0 8px;padding:0;list-style:none;
font-size:12px;color:#444}
.sw{display:inline-block;width:12px;height:12px;border-radius:2px;margin-right:5px;
vertical-align:-1px}
.sw.maint{background:repeating-linear-gradient(45deg,#9a9a9a 0 2px,#f2f2f2 2px 5px)}
.sw.late{background:#fff;border:1.5px solid #000}
.sw.past{background:#f1ebdd}
.sw.line{height:0;width:16px;border-top:2px solid #222;border-radius:0;vertical-align:3px}
.sw.dash{height:0;width:16px;border-top:2px dashed #222;border-radius:0;vertical-align:3px}
svg text{font-family:inherit}
.tick{font-size:11px;fill:var(--muted);text-anchor:middle}
.ylab{font-size:11px;fill:var(--muted);text-anchor:end;dominant-baseline:middle}
.rowlab{font-size:10.5px;fill:#333;text-anchor:end;dominant-baseline:middle}
.rowsub{font-size:10px;fill:var(--muted);text-anchor:end;dominant-baseline:middle}
.nodelab{font-size:9.5px;fill:#333;text-anchor:end;dominant-baseline:middle}
.leg{font-size:11.5px;fill:#333}
.marklab{font-size:11px;font-weight:600;fill:#222}
.grid{stroke:#ebe9e4;stroke-width:1}
.past{fill:#f1ebdd;opacity:.7}
.band{fill:#fff}.stripe{fill:#f6f5f1}
.maint{fill:url(#maint)}
.winend{stroke:#222;stroke-width:1.3;stroke-dasharray:5 3}
.mkline{stroke:#222;stroke-width:1.5}
.bars rect{stroke:#fff;stroke-width:.35}
.bars rect.late{stroke:#000;stroke-width:1.2}
.latemark{fill:#000}
.lane{fill:#0072B2;fill-opacity:.35}
.grouped .bars rect{stroke:none}.grouped .bars rect.late{stroke:#000;stroke-width:.5}
.curve{fill:none;stroke-width:1.7;stroke-linejoin:round}
.bound{stroke:#9a9a9a;stroke-width:1.2;stroke-dasharray:3 3}
.nodebar{fill:#0072B2}
.gpudot{fill:#009E73;stroke:#fff;stroke-width:.8}
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


def _num(value, digits: int = 1, suffix: str = "") -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return f"{value:,.{digits}f}{suffix}"


def _card(label: str, value: str, sub: str, tone: str = "") -> str:
    cls = f"card {tone}".strip()
    return f'<div class="{cls}"><small>{label}</small><b>{value}</b><span>{sub}</span></div>'


def summary_cards(s: dict) -> str:
    """The headline figures of `stats.summary` as a grid of cards."""
    inside = s["makespan_h"] <= s["window_h"]
    seed = "" if s["seed"] is None else f", seed {s['seed']}"
    cards = [
        _card("makespan", f"{_num(s['makespan_h'], 1)} h",
              f"ends {escape(s['makespan_at'])}, {'inside' if inside else 'PAST'} the"
              f" {s['window_h']:g} h window", "ok" if inside else "warn"),
        _card("lower bound", f"{_num(s['lower_bound_h'], 1)} h",
              f"gap {_num(s['gap_pct'], 2)} % above the bound"
              + (f"; set by {escape(why)}" if (why := bound_source_text(
                  s.get("lower_bound_set_by"))) else "")),
        *(
            _card(f"{name} utilisation", _num(s[f"{key}_utilisation_pct"], 1, " %"),
                  f"over the makespan; {_num(s[f'{key}_utilisation_window_pct'], 1, ' %')}"
                  " over the window")
            for name, key in (("core", "core"), ("memory", "memory"), ("GPU", "gpu"))
        ),
        _card("past the window", f"{s['jobs_past_window']:,}", "jobs ending after it",
              "warn" if s["jobs_past_window"] else "ok"),
        _card("late jobs", f"{s['late_jobs']:,}",
              f"weighted tardiness {_num(s['weighted_tardiness_h'], 2)} h",
              "warn" if s["late_jobs"] else "ok"),
        _card("method", escape(f"{s['method']}"),
              f"{escape(s['status'])}, solved in {s['seconds']:.2f} s{seed}"),
    ]
    return '<div class="cards">' + "".join(cards) + "</div>"


def _group_keys(inst: Instance, result: PlanResult) -> tuple[str, str]:
    """The palette classes (for the stylesheet) and the legend: the largest groups by jobs."""
    css = "".join(f".c{k}{{fill:{c}}}" for k, c in enumerate(PALETTE))
    colours = group_colours(inst.job_groups)
    counts = pd.Series(inst.job_groups).value_counts(sort=False)
    shown = counts.sort_values(ascending=False, kind="stable").head(LEGEND_GROUPS)
    keys = "".join(
        f'<li><i class="sw" style="background:{colours[g]}"></i>{escape(g)} ({n:,})</li>'
        for g, n in shown.items()
    )
    if len(counts) > len(shown):
        rest = int(counts.sum() - shown.sum())
        keys += (f"<li>and {len(counts) - len(shown):,} smaller groups ({rest:,} jobs);"
                 " colours repeat, the hover text names each job</li>")
    past = '<li><i class="sw past"></i>past the window</li>' if (
        result.makespan > inst.window_minutes) else ""
    marks = (
        '<li><i class="sw maint"></i>maintenance</li><li><i class="sw late"></i>late job'
        f' (▼ at its end)</li>{past}<li><i class="sw dash"></i>window end</li>'
        '<li><i class="sw line"></i>makespan</li>'
    )
    return css, f'<ul class="keys">{keys}</ul><ul class="keys">{marks}</ul>'


def _timeline_note(inst: Instance) -> str:
    if inst.n_nodes <= NODE_ROW_LIMIT:
        return ("One row per node; each bar is a job from start to end, its height the share of"
                " the node's cores it uses. Hover a bar for the job's figures.")
    kinds = len(set(inst.node_groups))
    return (f"{inst.n_nodes:,} nodes, more than {NODE_ROW_LIMIT} can show as labelled rows: they"
            f" are grouped in {kinds} bands by kind, each node a thin row, and the shaded lane"
            " above each band is that kind's core utilisation. Every job is still one bar"
            " (hover for its figures).")


def node_table_html(nodes: pd.DataFrame) -> str:
    """The per-node table, the same figures as the terminal's node table."""
    head = ("<tr><th>node<th>kind<th>jobs<th>core-h<th>core util<th>peak cores"
            "<th>peak memory GiB<th>GPU util<th>busy until</tr>")
    rows = [
        f"<tr><td>{escape(r.node)}<td>{escape(r.kind)}<td>{r.jobs:,}<td>{_num(r.core_hours, 1)}"
        f"<td>{_num(r.core_utilisation_pct, 1, ' %')}<td>{r.peak_cores}/{r.cores}"
        f"<td>{r.peak_memory_gib:g}/{r.memory_gib:g}<td>{_num(r.gpu_utilisation_pct, 1, ' %')}"
        f"<td>{escape(r.busy_until) or 'idle'}"
        for r in nodes.itertuples(index=False)
    ]
    return f'<table id="nodes"><thead>{head}</thead><tbody>{"".join(rows)}</tbody></table>'


def job_table_html(jobs: pd.DataFrame) -> str:
    """Every job in start order; end tags left out (valid HTML) to keep long tables lean."""
    head = ("<tr><th>job<th>node<th>start<th>end<th>hours<th>cores<th>memory GiB"
            "<th>flag</tr>")
    rows = []
    for r in jobs.itertuples(index=False):
        flag = ", ".join(f for f, on in (("late", r.late), ("past window", r.past_window)) if on)
        cls = ' class="l"' if r.late else ""
        rows.append(f"<tr{cls}><td>{escape(r.job)}<td>{escape(r.node)}<td>{r.start}<td>{r.end}"
                    f"<td>{r.hours:g}<td>{r.cores}<td>{r.memory_gib:g}<td>{flag}")
    table = f'<table id="jobs"><thead>{head}</thead><tbody>{"".join(rows)}</tbody></table>'
    state = " open" if len(jobs) <= OPEN_TABLE_ROWS else ""
    return (f"<details{state}><summary>{len(jobs):,} jobs, in start order</summary>"
            f"{table}</details>")


def render_html_report(inst: Instance, result: PlanResult, *, title: str | None = None) -> str:
    """The whole report page as one string (see the module docstring for what it holds)."""
    s = summary(inst, result)
    nodes = node_frame(inst, result)
    title = title or f"Plan of {inst.n_jobs:,} jobs on {inst.n_nodes:,} nodes"
    group_css, keys = _group_keys(inst, result)
    start = inst.window_start.strftime("%a %Y-%m-%d %H:%M")
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width,initial-scale=1">',
        f"<title>{escape(title)}</title><style>{_CSS}{group_css}</style></head><body><main>",
        f"<h1>{escape(title)}</h1>",
        f'<p class="lede">{inst.n_jobs:,} jobs on {inst.n_nodes:,} nodes · window from {start},'
        f" {inst.window_minutes / 60:g} h · method {escape(result.method)}</p>",
        summary_cards(s),
        "<section><h2>Timeline</h2>",
        f'<p class="note">{_timeline_note(inst)}</p>{keys}{timeline_svg(inst, result)}</section>',
        "<section><h2>Cluster utilisation over time</h2>",
        '<p class="note">Cores, memory and GPUs busy, as a share of the whole cluster\'s installed'
        " capacity (nodes in maintenance included).</p>"
        f"{utilisation_svg(inst, result)}</section>",
        "<section><h2>Utilisation per node</h2>",
        '<p class="note">Core utilisation over the makespan, against each node\'s time outside'
        " maintenance (as in the node table); a dot marks a GPU node's GPU utilisation.</p>"
        f"{node_utilisation_svg(inst, nodes)}</section>",
    ]
    if result.history:
        parts += ["<section><h2>Convergence</h2>",
                  '<p class="note">Best and median makespan of the population per'
                  f" generation.</p>{convergence_svg(result)}</section>"]
    parts += [
        f"<section><h2>Nodes</h2>{node_table_html(nodes)}</section>",
        f"<section><h2>Jobs</h2>{job_table_html(job_frame(inst, result))}</section>",
        f"<footer>assignplan {escape(__version__)} · an advisory plan: the cluster's own"
        " scheduler and site policy decide what runs. Colours: Okabe–Ito palette, readable"
        " with common colour-vision deficiencies.</footer>",
        "</main></body></html>\n",
    ]
    return "".join(parts)


def write_html_report(path: Path | str, inst: Instance, result: PlanResult, *,
                      title: str | None = None) -> int:
    """Write the report page atomically; returns the bytes written."""
    text = render_html_report(inst, result, title=title)
    atomic_write_text(path, text)
    return len(text.encode("utf-8"))


def page_budget(n_jobs: int, n_nodes: int) -> int:
    """Bytes a report page may take at most (the budget of the module docstring)."""
    return 60_000 + 400 * n_jobs + 300 * n_nodes
