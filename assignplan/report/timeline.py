"""The timeline chart as a scene: a bar per job on its node from start to end, and its legend.

A bar's height is the job's share of its node's cores; its colour is its job group's; a late
job is outlined (and marked ▼ at its end where rows have room). Maintenance is hatched, the
stretch past the window shaded, the window end and the makespan drawn as lines. Up to
`figures.NODE_ROW_LIMIT` nodes: one labelled row per node. Above: a band per node kind, each
node a thin row, with the kind's core utilisation drawn as a lane above its band. Either way
exactly one rect per job carries the job's index (`jobs`) and its hover text.
"""

from __future__ import annotations

from collections import Counter

import numpy as np

from assignplan.instance import Instance
from assignplan.plan import PlanResult
from assignplan.report.axes import LEFT, PLOT, Key, TimeScale, legend, time_grid
from assignplan.report.figures import (
    NODE_ROW_LIMIT,
    TimelineLayout,
    binned_curve,
    late_jobs,
    timeline_layout,
    utilisation_curve,
)
from assignplan.report.palette import PALETTE, group_colour_index
from assignplan.report.scene import (
    STYLES,
    WIDTH,
    Line,
    Polyline,
    Primitive,
    Rects,
    Scene,
    Text,
    text_width,
)
from assignplan.units import clock, offset_text

ROW_PX = 16  # a node row in the detailed timeline
GROUPED_ROW_UNIT = 5.0  # px per layout unit in the grouped timeline (about 150 units tall)
LANE_PX = (10.0, 26.0)  # the per-kind utilisation lane above each band: thinner with many kinds
BAR_PAD = 0.08  # share of a detailed row left free above and below its bars
LEGEND_GROUPS = len(PALETTE)  # the largest groups named in the legend: each its own colour


def timeline_scene(inst: Instance, result: PlanResult) -> Scene:
    """The timeline of a plan (see the module docstring)."""
    grouped = inst.n_nodes > NODE_ROW_LIMIT
    unit = GROUPED_ROW_UNIT if grouped else ROW_PX
    lane_px = float(np.clip(600 / len(set(inst.node_groups)), *LANE_PX))
    lay = timeline_layout(inst, result, band_gap=lane_px / unit if grouped else 0.6)
    x = TimeScale(max(result.makespan, inst.window_minutes))
    items, below = legend(_keys(inst, result, grouped), LEFT, 4)
    marks, below = _mark_labels(inst, result, x, below + 6)
    ticks_at = below + 14
    top = ticks_at + 8  # gridlines and marks start here, rows a little lower
    head = top + 6
    bottom = head + lay.height * unit + 8
    items += marks
    if inst.window_minutes < x.horizon:
        win = float(x(inst.window_minutes))
        items.append(Rects(np.array([win]), np.array([top]), np.array([LEFT + PLOT - win]),
                           np.array([bottom - top]), "past"))
    items += time_grid(inst.window_start, x, top, bottom, ticks_at)
    items += _rows(inst, result, lay, x, head, unit, lane_px)
    items += _maintenance(inst, lay, x, head, unit)
    items += _bars(inst, result, lay, x, head, unit)
    items += _lines(inst, result, x, top, bottom)
    view = "bands per node kind" if lay.grouped else "one row per node"
    return Scene("timeline", bottom + 4, f"Timeline of {inst.n_jobs} jobs on {inst.n_nodes}"
                 f" nodes, {view}", "Timeline: a bar per job, its height the share of the"
                 " node's cores", items, grouped=lay.grouped)


def _keys(inst: Instance, result: PlanResult, grouped: bool) -> list[Key]:
    """The largest job groups (with their colours), then the marks the chart uses."""
    colour = group_colour_index(inst.job_groups)  # largest groups first
    sizes = Counter(inst.job_groups)
    shown = list(colour)[:LEGEND_GROUPS]
    keys = [Key(f"{g} ({sizes[g]:,})", f"c{colour[g]}") for g in shown]
    if len(sizes) > len(shown):
        rest = sum(sizes.values()) - sum(sizes[g] for g in shown)
        keys.append(Key(f"and {len(sizes) - len(shown):,} smaller groups ({rest:,} jobs):"
                        " colours repeat, the hover text names each job", "", "text"))
    keys += [Key("maintenance", "maint"),
             Key("late job (outlined)" if grouped else "late job (▼ at its end)", "late")]
    if result.makespan > inst.window_minutes:
        keys.append(Key("past the window", "past"))
    keys += [Key("window end", "winend", "line"), Key("makespan", "mkline", "line")]
    if grouped:
        keys.append(Key("core utilisation of the kind", "lane"))
    return keys


def _mark_labels(inst: Instance, result: PlanResult, x: TimeScale,
                 y: float) -> tuple[list[Primitive], float]:
    """Labels of the makespan and window-end lines on one row, or two when they would touch;
    returns them and the y below them."""
    style = STYLES["marklab"]
    marks = []
    for minute, name in ((result.makespan, "makespan"), (inst.window_minutes, "window end")):
        text = f"{name} {clock(inst.window_start, minute)} ({offset_text(minute)})"
        at, width = float(x(minute)), text_width(text, style)
        left = at + 5 if at + 5 + width <= WIDTH - 2 else at - 5 - width
        marks.append((left, width, text))
    (l0, w0, _), (l1, w1, _) = marks
    stacked = l0 < l1 + w1 + 12 and l1 < l0 + w0 + 12
    row = 15.0
    out = [Text(left, y + row * (k if stacked else 0) + 10, text, "marklab")
           for k, (left, _, text) in enumerate(marks)]
    return out, y + row * (2 if stacked else 1)


def _rows(inst: Instance, result: PlanResult, lay: TimelineLayout, x: TimeScale, head: float,
          unit: float, lane_px: float) -> list[Primitive]:
    """Row backgrounds and node labels, or per kind a band, its label and its lane."""
    out: list[Primitive] = []
    h = lay.row_height * unit
    if lay.grouped:
        for kind, top, n in lay.bands:
            y = head + top * unit
            out.append(_kind_lane(inst, result, kind, x, y - lane_px, lane_px - 2))
            out.append(Rects(np.array([LEFT]), np.array([y]), np.array([PLOT]),
                             np.array([n * h]), "band"))
            mid = y + (n * h - lane_px) / 2  # the middle of the whole block, lane and band
            if n * h + lane_px >= 34:
                out += [Text(LEFT - 6, mid - 6, kind, "rowlab"),
                        Text(LEFT - 6, mid + 7, f"{n:,} nodes", "rowsub")]
            else:
                out.append(Text(LEFT - 6, mid, f"{kind} ({n:,})", "rowlab"))
        return out
    ys = head + lay.row * unit
    out.append(Rects(np.full(inst.n_nodes, float(LEFT)), ys, np.full(inst.n_nodes, float(PLOT)),
                     np.full(inst.n_nodes, h),
                     tuple("stripe" if i % 2 else "band" for i in range(inst.n_nodes))))
    out += [Text(LEFT - 6, float(ys[i] + h / 2), inst.node_names[i], "rowlab")
            for i in range(inst.n_nodes)]
    return out


def _maintenance(inst: Instance, lay: TimelineLayout, x: TimeScale, head: float,
                 unit: float) -> list[Primitive]:
    node = np.repeat(np.arange(inst.n_nodes), np.diff(inst.maint_ptr))
    if len(node) == 0:
        return []
    x0 = x(np.clip(inst.maint_start, 0, x.horizon))
    x1 = x(np.clip(inst.maint_end, 0, x.horizon))
    titles = tuple(
        f"maintenance on {inst.node_names[i]}: {clock(inst.window_start, s)}"
        f" → {clock(inst.window_start, e)}"
        for i, s, e in zip(node, inst.maint_start, inst.maint_end, strict=True))
    return [Rects(x0, head + lay.row[node] * unit, x1 - x0,
                  np.full(len(node), lay.row_height * unit), "maint", titles)]


def _kind_lane(inst: Instance, result: PlanResult, kind: str, x: TimeScale, top: float,
               height: float) -> Polyline:
    """A kind's core utilisation over time (share of its installed cores) as a filled step
    area, averaged per 2 px."""
    members = np.array([g == kind for g in inst.node_groups])
    times, busy = utilisation_curve(inst, result, nodes=members)
    cap = float(inst.capacity[members, 0].sum())
    edges, mean = binned_curve(times, busy, 0, x.horizon, PLOT // 2)
    ys = top + height * (1 - mean[:, 0] / cap)
    xs = x(edges)
    steps = np.column_stack([np.repeat(xs, 2)[1:-1], np.repeat(ys, 2)])
    points = np.vstack([[xs[0], top + height], steps, [xs[-1], top + height]])
    n_jobs = int(np.sum(members[result.assign]))
    return Polyline(points, "lane", f"{kind}: cores busy over time, share of its"
                    f" {cap:,.0f} installed cores ({n_jobs:,} jobs on {int(members.sum()):,}"
                    " nodes)", closed=True)


def _job_title(inst: Instance, result: PlanResult, j: int, late: bool) -> str:
    cores, mem, gpus = (int(v) for v in inst.demand[j])
    start = inst.window_start
    text = (
        f"{inst.job_names[j]} on {inst.node_names[result.assign[j]]} · {cores} cores,"
        f" {mem / 1024:g} GiB" + (f", {gpus} GPUs" if gpus else "")
        + f" · {(result.end[j] - result.start[j]) / 60:g} h · {clock(start, result.start[j])}"
        f" → {clock(start, result.end[j])}"
    )
    if late:
        text += f" · LATE, due {clock(start, inst.due[j])}"
    return text


def _bars(inst: Instance, result: PlanResult, lay: TimelineLayout, x: TimeScale, head: float,
          unit: float) -> list[Primitive]:
    """One rect per job, coloured by its group, outlined when late; ▼ marks on detailed rows."""
    colour = group_colour_index(inst.job_groups)
    late = late_jobs(inst, result)
    h_row = lay.row_height * unit
    pad = 0.0 if lay.grouped else BAR_PAD * h_row
    inner = h_row - 2 * pad
    xs, xe = x(result.start), x(result.end)
    ys = head + lay.row[result.assign] * unit + pad + lay.bar_top * inner
    base, late_cls = ("gbar", "glate") if lay.grouped else ("bar", "late")
    classes = tuple(f"{base} c{colour[inst.job_groups[j]]}" + (f" {late_cls}" if late[j] else "")
                    for j in range(inst.n_jobs))
    titles = tuple(_job_title(inst, result, j, bool(late[j])) for j in range(inst.n_jobs))
    out: list[Primitive] = [Rects(xs, ys, np.maximum(xe - xs, 0.6),
                                  np.maximum(lay.bar_height * inner, 0.6), classes, titles,
                                  np.arange(inst.n_jobs))]
    # Rows of a few pixels have no room for a mark: there the outline alone shows lateness.
    for j in ([] if lay.grouped else np.flatnonzero(late)):
        tip, top = float(xe[j]), float(head + lay.row[result.assign[j]] * unit)
        out.append(Polyline(np.array([[tip - 4, top - 1], [tip + 4, top - 1], [tip, top + 5]]),
                            "latemark", closed=True))
    return out


def _lines(inst: Instance, result: PlanResult, x: TimeScale, top: float,
           bottom: float) -> list[Primitive]:
    win, mk = float(x(inst.window_minutes)), float(x(result.makespan))
    start = inst.window_start
    return [
        Line(win, top, win, bottom, "winend",
             f"window end: {clock(start, inst.window_minutes)}"
             f" ({offset_text(inst.window_minutes)})"),
        Line(mk, top, mk, bottom, "mkline",
             f"makespan: the last job ends {clock(start, result.makespan)}"
             f" ({offset_text(result.makespan)})"),
    ]
