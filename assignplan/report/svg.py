"""Inline SVG charts of a plan for the HTML report: timeline, utilisation, per node, convergence.

Every chart is a plain string of SVG with hover text in `<title>` elements, styled by the
classes the page's stylesheet defines; no script, no external resource. The timeline draws
exactly one `rect` with a `data-job` attribute (the job's index) per job of the plan, in both
its views (a row per node up to `charts.NODE_ROW_LIMIT` nodes, bands per node kind above).
"""

from __future__ import annotations

from datetime import timedelta
from html import escape

import numpy as np

from assignplan.instance import Instance
from assignplan.plan import PlanResult
from assignplan.report.charts import (
    NODE_ROW_LIMIT,
    OKABE_ITO,
    RESOURCE_COLOURS,
    binned_curve,
    day_ticks,
    group_colour_index,
    late_jobs,
    timeline_layout,
    utilisation_curve,
)

WIDTH = 1100  # viewBox width; the page scales the chart to its column
LEFT, RIGHT = 104, 18  # room for node labels / axis figures, and for the last day label
PLOT = WIDTH - LEFT - RIGHT
ROW_PX = 16  # a node row in the detailed timeline
GROUPED_ROW_UNIT = 5.0  # px per layout unit in the grouped timeline (about 150 units tall)
LANE_PX = (10.0, 26.0)  # the per-kind utilisation lane above each band: thinner with many kinds


def _f(x: float) -> str:
    """A coordinate with one decimal, without a trailing '.0' (keeps big charts small)."""
    s = f"{x:.1f}"
    return s[:-2] if s.endswith(".0") else s


def _svg(chart_id: str, height: float, label: str, body: list[str], cls: str = "chart") -> str:
    return (
        f'<svg id="{chart_id}" class="{cls}" viewBox="0 0 {WIDTH} {_f(height)}" role="img" '
        f'aria-label="{escape(label)}">'
        + "".join(body) + "</svg>"
    )


def _clock(inst: Instance, minute: int) -> str:
    return (inst.window_start + timedelta(minutes=int(minute))).strftime("%a %d %b %H:%M")


class _TimeScale:
    """Minutes to x pixels over [0, horizon]."""

    def __init__(self, horizon: int):
        self.horizon = max(1, horizon)

    def __call__(self, minute) -> np.ndarray:
        return LEFT + np.asarray(minute, dtype=float) * PLOT / self.horizon


def _time_grid(inst: Instance, x: _TimeScale, top: float, bottom: float,
               labels_at: float) -> list[str]:
    """Midnight gridlines with day labels, the shaded stretch past the window, its end line."""
    out = []
    win = float(x(inst.window_minutes))
    if inst.window_minutes < x.horizon:
        out.append(f'<rect class="past" x="{_f(win)}" y="{_f(top)}" width="{_f(LEFT + PLOT - win)}"'
                   f' height="{_f(bottom - top)}"/>')
    for minute, label in day_ticks(inst, x.horizon):
        px = _f(float(x(minute)))
        out.append(f'<line class="grid" x1="{px}" x2="{px}" y1="{_f(top)}" y2="{_f(bottom)}"/>')
        if float(x(minute)) < WIDTH - 36:  # a label cut by the chart's edge reads worse than none
            out.append(f'<text class="tick" x="{px}" y="{_f(labels_at)}">{label}</text>')
    out.append(f'<line class="winend" x1="{_f(win)}" x2="{_f(win)}" y1="{_f(top)}"'
               f' y2="{_f(bottom)}"><title>window end: {inst.window_minutes / 60:g} h,'
               f' {_clock(inst, inst.window_minutes)}</title></line>')
    return out


def _y_grid(top: float, height: float, ticks: list[float], lo: float, hi: float,
            fmt: str) -> list[str]:
    out = []
    for v in ticks:
        y = _f(top + height * (1 - (v - lo) / (hi - lo)))
        out.append(f'<line class="grid" x1="{LEFT}" x2="{LEFT + PLOT}" y1="{y}" y2="{y}"/>'
                   f'<text class="ylab" x="{LEFT - 6}" y="{y}">{fmt.format(v)}</text>')
    return out


# --------------------------------------------------------------------------- timeline


def _job_title(inst: Instance, result: PlanResult, j: int, late: bool) -> str:
    cores, mem, gpus = (int(v) for v in inst.demand[j])
    text = (
        f"{inst.job_names[j]} on {inst.node_names[result.assign[j]]} · {cores} cores,"
        f" {mem / 1024:g} GiB" + (f", {gpus} GPUs" if gpus else "")
        + f" · {(result.end[j] - result.start[j]) / 60:g} h · {_clock(inst, result.start[j])}"
        f" → {_clock(inst, result.end[j])}"
    )
    if late:
        text += f" · LATE, due {_clock(inst, inst.due[j])}"
    return escape(text)


def timeline_svg(inst: Instance, result: PlanResult) -> str:
    """The timeline: a bar per job from start to end on its node, height = share of cores.

    Up to NODE_ROW_LIMIT nodes: one labelled row per node. Above: a band per node kind, each
    node a thin row, with the kind's core utilisation drawn as a lane above its band.
    """
    grouped = inst.n_nodes > NODE_ROW_LIMIT
    unit = GROUPED_ROW_UNIT if grouped else ROW_PX
    n_kinds = len(set(inst.node_groups))
    lane_px = float(np.clip(600 / n_kinds, *LANE_PX))
    lay = timeline_layout(inst, result, band_gap=lane_px / unit if grouped else 0.6)
    head = 62.0  # room for the day labels and, above them, the makespan and window-end labels
    bottom = head + lay.height * unit + 8
    x = _TimeScale(max(result.makespan, inst.window_minutes))
    body = [_timeline_defs()]
    body += _time_grid(inst, x, head - 6, bottom, head - 14)
    body += _timeline_rows(inst, result, lay, x, head, unit, lane_px)
    body.append(_bars(inst, result, lay, x, head, unit))
    body += _makespan_mark(inst, result, x, head - 6, bottom)
    view = "bands per node kind" if lay.grouped else "one row per node"
    label = f"Timeline of {inst.n_jobs} jobs on {inst.n_nodes} nodes, {view}"
    return _svg("timeline", bottom + 4, label, body, "chart grouped" if lay.grouped else "chart")


def _timeline_defs() -> str:
    return (
        '<defs><pattern id="maint" width="6" height="6" patternUnits="userSpaceOnUse"'
        ' patternTransform="rotate(45)"><rect width="6" height="6" fill="#F2F2F2"/>'
        '<line x1="0" y1="0" x2="0" y2="6" stroke="#9A9A9A" stroke-width="2.2"/></pattern></defs>'
    )


def _timeline_rows(inst: Instance, result: PlanResult, lay, x: _TimeScale, head: float,
                   unit: float, lane_px: float) -> list[str]:
    """Row backgrounds and labels (or band labels and lanes), and maintenance windows."""
    out = []
    h = lay.row_height * unit
    if lay.grouped:
        for kind, top, n in lay.bands:
            y = head + top * unit
            out += _kind_lane(inst, result, kind, x, y - lane_px, lane_px - 2)
            out.append(f'<rect class="band" x="{LEFT}" y="{_f(y)}" width="{PLOT}"'
                       f' height="{_f(n * h)}"/>')
            # Label the whole block (lane + band): two lines when it is tall enough.
            mid = y + (n * h - lane_px) / 2
            if n * h + lane_px >= 34:
                out.append(f'<text class="rowlab" x="{LEFT - 6}" y="{_f(mid - 6)}">'
                           f'{escape(kind)}</text><text class="rowsub" x="{LEFT - 6}"'
                           f' y="{_f(mid + 7)}">{n:,} nodes</text>')
            else:
                out.append(f'<text class="rowlab" x="{LEFT - 6}" y="{_f(mid)}">'
                           f'{escape(kind)} ({n:,})</text>')
    else:
        for i in range(inst.n_nodes):
            y = head + lay.row[i] * unit
            stripe = ' class="stripe"' if i % 2 else ' class="band"'
            out.append(f'<rect{stripe} x="{LEFT}" y="{_f(y)}" width="{PLOT}" height="{_f(h)}"/>'
                       f'<text class="rowlab" x="{LEFT - 6}" y="{_f(y + h / 2)}">'
                       f'{escape(inst.node_names[i])}</text>')
    for i in range(inst.n_nodes):
        lo, hi = inst.maint_ptr[i], inst.maint_ptr[i + 1]
        y = head + lay.row[i] * unit
        for s, e in zip(inst.maint_start[lo:hi], inst.maint_end[lo:hi], strict=True):
            x0, x1 = float(x(min(s, x.horizon))), float(x(min(e, x.horizon)))
            out.append(f'<rect class="maint" x="{_f(x0)}" y="{_f(y)}" width="{_f(x1 - x0)}"'
                       f' height="{_f(h)}"><title>maintenance on {escape(inst.node_names[i])}:'
                       f' {_clock(inst, s)} → {_clock(inst, e)}</title></rect>')
    return out


def _kind_lane(inst: Instance, result: PlanResult, kind: str, x: _TimeScale, top: float,
               height: float) -> list[str]:
    """A kind's core utilisation over time as a filled step area, averaged per 2 px."""
    members = np.array([g == kind for g in inst.node_groups])
    times, busy = utilisation_curve(inst, result, nodes=members)
    cap = float(inst.capacity[members, 0].sum())
    edges, mean = binned_curve(times, busy, 0, x.horizon, PLOT // 2)
    ys = top + height * (1 - mean[:, 0] / cap)
    xs = x(edges)
    path = [f"M{_f(xs[0])},{_f(top + height)}"]
    for k in range(len(ys)):
        path.append(f"V{_f(ys[k])}H{_f(xs[k + 1])}")
    path.append(f"V{_f(top + height)}Z")
    members_jobs = int(np.sum(members[result.assign]))
    return [f'<path class="lane" d="{"".join(path)}"><title>{escape(kind)}: cores busy over time'
            f' ({members_jobs:,} jobs on {int(members.sum()):,} nodes)</title></path>']


def _bars(inst: Instance, result: PlanResult, lay, x: _TimeScale, head: float,
          unit: float) -> str:
    """One rect per job; colour class = its job group's palette entry, outlined when late."""
    colour = group_colour_index(inst.job_groups)
    late = late_jobs(inst, result)
    h_row = lay.row_height * unit
    pad = 0.08 * h_row if not lay.grouped else 0.0
    inner = h_row - 2 * pad
    xs, xe = x(result.start), x(result.end)
    ys = head + lay.row[result.assign] * unit + pad + lay.bar_top * inner
    hs = np.maximum(lay.bar_height * inner, 0.6)
    out = ['<g class="bars">']
    for j in range(inst.n_jobs):
        cls = f"c{colour[inst.job_groups[j]]}" + (" late" if late[j] else "")
        out.append(
            f'<rect class="{cls}" data-job="{j}" x="{_f(xs[j])}" y="{_f(ys[j])}"'
            f' width="{_f(max(xe[j] - xs[j], 0.6))}" height="{_f(hs[j])}">'
            f"<title>{_job_title(inst, result, j, bool(late[j]))}</title></rect>"
        )
    # Rows of a few pixels have no room for a mark: there the outline alone shows lateness.
    for j in np.flatnonzero(late) if not lay.grouped else []:
        tip, top = float(xe[j]), float(head + lay.row[result.assign[j]] * unit)
        out.append(f'<path class="latemark" d="M{_f(tip - 4)},{_f(top - 1)}h8l-4,6z"/>')
    out.append("</g>")
    return "".join(out)


def _makespan_mark(inst: Instance, result: PlanResult, x: _TimeScale, top: float,
                   bottom: float) -> list[str]:
    """The makespan line and the labels of it and of the window end, never on top of each other."""
    mk, win = float(x(result.makespan)), float(x(inst.window_minutes))
    mk_y = top - 24
    win_y = mk_y - 15 if abs(mk - win) < 130 else mk_y  # stacked when the lines nearly meet

    def label(at: float, y: float, text: str, cls: str) -> str:
        anchor, dx = ("start", 5) if at < LEFT + 110 else ("end", -5)
        return (f'<text class="{cls}" text-anchor="{anchor}" x="{_f(at + dx)}" y="{_f(y)}">'
                f"{text}</text>")

    return [
        f'<line class="mkline" x1="{_f(mk)}" x2="{_f(mk)}" y1="{_f(top)}" y2="{_f(bottom)}"/>',
        label(mk, mk_y, f"makespan {result.makespan / 60:.1f} h", "marklab"),
        label(win, win_y, f"window end {inst.window_minutes / 60:g} h", "marklab"),
    ]


# --------------------------------------------------------------------------- utilisation


def utilisation_svg(inst: Instance, result: PlanResult) -> str:
    """Cores, memory and GPUs busy as % of the cluster's installed capacity, step curves."""
    top, height = 34.0, 190.0
    x = _TimeScale(max(result.makespan, inst.window_minutes))
    times, busy = utilisation_curve(inst, result)
    total = inst.capacity.sum(axis=0).astype(float)
    body = _y_grid(top, height, [0, 25, 50, 75, 100], 0, 100, "{:g} %")
    body += _time_grid(inst, x, top, top + height, top + height + 18)
    for r, (name, colour) in enumerate(RESOURCE_COLOURS.items()):
        if total[r] <= 0:
            continue
        d = _step_path(times, 100 * busy[:, r] / total[r], x, top, height)
        body.append(f'<path class="curve" stroke="{colour}" d="{d}"><title>{name} busy, % of'
                    f" {_capacity_text(name, total[r])}</title></path>")
    body += _legend([(n, c) for r, (n, c) in enumerate(RESOURCE_COLOURS.items()) if total[r] > 0],
                    LEFT, 14)
    return _svg("utilisation", top + height + 30, "Cluster utilisation over time", body)


def _capacity_text(name: str, total: float) -> str:
    return f"{total / 1024:,.0f} GiB" if name == "memory" else f"{total:,.0f} {name.lower()}"


def _step_path(times: np.ndarray, pct: np.ndarray, x: _TimeScale, top: float,
               height: float) -> str:
    """A step curve as an SVG path; averaged per pixel once it has more steps than pixels."""
    if len(times) > PLOT:
        edges, mean = binned_curve(times, pct[:, None].repeat(3, axis=1), 0, x.horizon, PLOT)
        times, pct = edges, np.r_[mean[:, 0], 0.0]
    xs, ys = x(times), top + height * (1 - np.asarray(pct) / 100)
    if len(xs) == 0:
        return f"M{LEFT},{_f(top + height)}H{LEFT + PLOT}"
    parts = [f"M{LEFT},{_f(top + height)}H{_f(xs[0])}"]
    for k in range(len(xs)):
        parts.append(f"V{_f(ys[k])}" + (f"H{_f(xs[k + 1])}" if k + 1 < len(xs) else ""))
    parts.append(f"H{LEFT + PLOT}")
    return "".join(parts)


def _legend(items: list[tuple[str, str]], x0: float, y: float) -> list[str]:
    out = []
    for name, colour in items:
        out.append(f'<rect x="{_f(x0)}" y="{_f(y - 9)}" width="14" height="10" rx="2"'
                   f' fill="{colour}"/>'
                   f'<text class="leg" x="{_f(x0 + 19)}" y="{_f(y)}">{name}</text>')
        x0 += 30 + 8 * len(name)
    return out


# --------------------------------------------------------------------------- per node


def node_utilisation_svg(inst: Instance, nodes) -> str:
    """Core utilisation per node (bars, busiest first), GPU utilisation as a dot on GPU nodes.

    ``nodes`` is `stats.node_frame`: the figures are the same as in the node table.
    """
    top, height = 30.0, 170.0
    util = nodes["core_utilisation_pct"].to_numpy(dtype=float)
    gpu = nodes["gpu_utilisation_pct"].to_numpy(dtype=float)
    order = np.argsort(-util, kind="stable")
    n = len(order)
    slot = PLOT / max(n, 1)
    labelled = n <= 80
    body = _y_grid(top, height, [0, 25, 50, 75, 100], 0, 100, "{:g} %")
    body += _legend([("cores", OKABE_ITO[0])] + ([("GPUs", OKABE_ITO[2])]
                                                  if np.isfinite(gpu).any() else []), LEFT, 14)
    for rank, i in enumerate(order):
        bx = LEFT + rank * slot
        bh = height * min(util[i], 100) / 100
        name = escape(str(nodes["node"].iat[i]))
        tip = (f"{name} ({escape(str(nodes['kind'].iat[i]))}): cores {util[i]:.1f} %"
               + (f", GPUs {gpu[i]:.1f} %" if np.isfinite(gpu[i]) else "")
               + f", {int(nodes['jobs'].iat[i])} jobs")
        body.append(f'<rect class="nodebar" x="{_f(bx + slot * 0.1)}" y="{_f(top + height - bh)}"'
                    f' width="{_f(max(slot * 0.8, 0.5))}" height="{_f(bh)}"><title>{tip}</title>'
                    "</rect>")
        if np.isfinite(gpu[i]):
            gy = top + height * (1 - min(gpu[i], 100) / 100)
            body.append(f'<circle class="gpudot" cx="{_f(bx + slot / 2)}" cy="{_f(gy)}"'
                        f' r="{_f(min(3.5, max(slot / 3, 1.2)))}"/>')
        if labelled:
            lx, ly = _f(bx + slot / 2 + 3), _f(top + height + 6)
            body.append(f'<text class="nodelab" transform="rotate(-90 {lx} {ly})" x="{lx}"'
                        f' y="{ly}">{name}</text>')
    bottom = top + height + (70 if labelled else 22)
    if not labelled:
        body.append(f'<text class="tick" x="{LEFT + PLOT / 2}" y="{_f(top + height + 16)}">'
                    f"{n:,} nodes, busiest first</text>")
    return _svg("node-utilisation", bottom, "Core utilisation per node", body)


# --------------------------------------------------------------------------- convergence


def convergence_svg(result: PlanResult) -> str:
    """Best and median makespan per generation (hours), with the lower bound for scale."""
    top, height = 30.0, 170.0
    gen = np.array([h.generation for h in result.history], dtype=float)
    best = np.array([h.best_makespan_h for h in result.history])
    median = np.array([h.median_makespan_h for h in result.history])
    bound = result.lower_bound / 60
    lo, hi = min(bound, best.min()), max(median.max(), best.max())
    lo, hi = (lo - 1, hi + 1) if hi - lo < 1e-9 else (lo - 0.05 * (hi - lo), hi + 0.05 * (hi - lo))
    g0, g1 = gen.min(), max(gen.max(), gen.min() + 1)

    def pts(vals: np.ndarray) -> str:
        xs = LEFT + (gen - g0) / (g1 - g0) * PLOT
        ys = top + height * (1 - (vals - lo) / (hi - lo))
        return " ".join(f"{_f(a)},{_f(b)}" for a, b in zip(xs, ys, strict=True))

    ticks = list(np.linspace(lo, hi, 5))
    by = _f(top + height * (1 - (bound - lo) / (hi - lo)))
    body = _y_grid(top, height, ticks, lo, hi, "{:.1f} h")
    body += [
        f'<line class="bound" x1="{LEFT}" x2="{LEFT + PLOT}" y1="{by}" y2="{by}">'
        f"<title>lower bound {bound:g} h</title></line>",
        f'<polyline class="curve" stroke="{OKABE_ITO[1]}" stroke-dasharray="5 3"'
        f' points="{pts(median)}"><title>median makespan per generation</title></polyline>',
        f'<polyline class="curve" stroke="{OKABE_ITO[0]}" points="{pts(best)}">'
        "<title>best makespan per generation</title></polyline>",
        f'<text class="tick" x="{LEFT}" y="{_f(top + height + 18)}">generation {g0:g}</text>',
        f'<text class="tick" x="{LEFT + PLOT - 40}" y="{_f(top + height + 18)}">{g1:g}</text>',
    ]
    body += _legend([("best", OKABE_ITO[0]), ("median", OKABE_ITO[1]),
                     ("lower bound", "#9A9A9A")], LEFT, 14)
    return _svg("convergence", top + height + 28, "Convergence of the genetic algorithm", body)
