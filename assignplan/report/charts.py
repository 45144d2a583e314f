"""Chart figures of a plan (utilisation curve, timeline layout, palette) and their PNG files.

The HTML page (`report.svg`) and the PNG files drawn here with matplotlib read the same
figures, so the two views of a plan never disagree. Colours are the Okabe–Ito palette
(M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
that are friendly to colorblind people", 2002), chosen to stay distinguishable for the common
forms of colour-vision deficiency.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path

import numpy as np

from assignplan.instance import NO_DUE, Instance
from assignplan.plan import PlanResult
from assignplan.report.exports import atomic_write
from assignplan.report.stats import node_frame

# Okabe–Ito, without its black (kept for marks and text). Order: the most distinct first.
OKABE_ITO = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442")
INK = "#222222"
MUTED = "#767676"
GRID = "#E4E4E4"
RESOURCE_COLOURS = {"cores": "#0072B2", "memory": "#E69F00", "GPUs": "#009E73"}
# More groups than hues: the hues again at lighter, then darker tints, so up to 21 groups get
# distinct colours; beyond that colours repeat (the hover text always names the group).
_TINTS = (0.0, 0.45, -0.35)

# Up to this many nodes the timeline draws one labelled row per node; above it, nodes are
# grouped by kind into bands of thin unlabelled rows so the chart keeps a readable height.
NODE_ROW_LIMIT = 150


def _mix(hex_colour: str, amount: float) -> str:
    """Lighten (amount > 0, towards white) or darken (amount < 0, towards black) a colour."""
    rgb = np.array([int(hex_colour[k : k + 2], 16) for k in (1, 3, 5)], dtype=float)
    target = 255.0 if amount > 0 else 0.0
    rgb = rgb + (target - rgb) * abs(amount)
    return "#" + "".join(f"{int(round(c)):02X}" for c in rgb)


def _palette() -> tuple[str, ...]:
    return tuple(_mix(hue, tint) for tint in _TINTS for hue in OKABE_ITO)


PALETTE = _palette()  # 21 colours: the Okabe–Ito hues, then their lighter and darker tints


def group_colour_index(groups: tuple[str, ...]) -> dict[str, int]:
    """Index into PALETTE per job group, in order of first appearance (repeats past 21)."""
    return {name: k % len(PALETTE) for k, name in enumerate(dict.fromkeys(groups))}


def group_colours(groups: tuple[str, ...]) -> dict[str, str]:
    """A colour per job group, in order of first appearance; a group's jobs share it."""
    return {name: PALETTE[k] for name, k in group_colour_index(groups).items()}


def utilisation_curve(inst: Instance, result: PlanResult, *,
                      nodes: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Cores, memory (MiB) and GPUs busy over time, as a step function from an event sweep.

    Returns ``times``: int64[K] the sorted distinct start/end minutes, and ``busy``:
    float64[K, 3], the demand of the jobs running in ``[times[k], times[k+1])``; the last row
    is zero. Hence ``sum_k busy[k] * (times[k+1] - times[k]) = sum_j demand_j * (end_j -
    start_j)``. ``nodes`` (bool[N]) restricts the sweep to the jobs on those nodes.
    """
    keep = np.ones(inst.n_jobs, bool) if nodes is None else np.asarray(nodes)[result.assign]
    start, end, demand = result.start[keep], result.end[keep], inst.demand[keep]
    times = np.unique(np.concatenate([start, end]).astype(np.int64))
    delta = np.zeros((len(times), 3), dtype=np.int64)
    np.add.at(delta, np.searchsorted(times, start), demand)
    np.add.at(delta, np.searchsorted(times, end), -demand)
    return times, np.cumsum(delta, axis=0).astype(np.float64)


def binned_curve(times: np.ndarray, busy: np.ndarray, lo: int, hi: int,
                 bins: int) -> tuple[np.ndarray, np.ndarray]:
    """The step curve averaged over `bins` equal bins of [lo, hi): (edges[bins+1], mean[bins, 3]).

    Averaging (not sampling) keeps the area under the curve, so a thinned curve for a large
    plan still shows the same work as the exact one.
    """
    edges = np.linspace(lo, hi, bins + 1)
    if len(times) == 0:
        return edges, np.zeros((bins, 3))
    # Cumulative integral F at every event time; F is piecewise linear, so np.interp is exact.
    area = np.vstack([np.zeros(3), np.cumsum(busy[:-1] * np.diff(times)[:, None], axis=0)])
    cum = np.column_stack([np.interp(edges, times, area[:, r]) for r in range(3)])
    return edges, np.diff(cum, axis=0) / np.diff(edges)[:, None]


def stack_offsets(assign: np.ndarray, start: np.ndarray, end: np.ndarray, cores: np.ndarray,
                  capacity: np.ndarray) -> np.ndarray:
    """int64[J]: where each job's bar sits on its node's core axis (first fit, by start).

    Jobs on a node never use more cores together than it has, but their bars can still be
    fragmented; a job that finds no free contiguous stretch is drawn at the top (overlapping).
    """
    offset = np.zeros(len(assign), dtype=np.int64)
    for node_jobs in _jobs_by_node(assign, start, -cores):
        active: list[tuple[int, int, int]] = []  # (end, low, high) of bars still running
        for j in node_jobs:
            active = [a for a in active if a[0] > start[j]]
            cap, need = int(capacity[assign[j]]), int(cores[j])
            offset[j] = cap - need
            for low in sorted({0, *(a[2] for a in active)}):
                if low + need <= cap and all(a[2] <= low or a[1] >= low + need for a in active):
                    offset[j] = low
                    break
            active.append((int(end[j]), int(offset[j]), int(offset[j]) + need))
    return offset


def _jobs_by_node(assign: np.ndarray, *keys: np.ndarray) -> list[np.ndarray]:
    order = np.lexsort((*reversed(keys), assign))
    cuts = np.flatnonzero(np.diff(assign[order])) + 1
    return np.split(order, cuts) if len(order) else []


@dataclass(frozen=True)
class TimelineLayout:
    """Where the timeline draws each node and job, in rows of unit height.

    ``row``: float64[N] top of each node's row; ``row_height``: the height of a node row;
    ``bands``: (kind, first row top, n nodes) per node kind in drawing order; ``grouped``:
    True when nodes are thin unlabelled rows in bands per kind (more than NODE_ROW_LIMIT).
    ``bar_top``/``bar_height``: float64[J] inside the job's node row, as a share of the row.
    """

    row: np.ndarray
    row_height: float
    bands: tuple[tuple[str, float, int], ...]
    grouped: bool
    bar_top: np.ndarray
    bar_height: np.ndarray
    height: float


def timeline_layout(inst: Instance, result: PlanResult, *, band_gap: float = 1.0) -> TimelineLayout:
    """Rows by node kind (order of first appearance), bars stacked by their share of cores."""
    kinds = list(dict.fromkeys(inst.node_groups))
    grouped = inst.n_nodes > NODE_ROW_LIMIT
    # Grouped: the whole chart stays about NODE_ROW_LIMIT rows tall whatever the node count.
    row_height = NODE_ROW_LIMIT / inst.n_nodes if grouped else 1.0
    row = np.zeros(inst.n_nodes)
    bands = []
    y = 0.0
    kind_of = np.array([kinds.index(g) for g in inst.node_groups])
    for k, kind in enumerate(kinds):
        members = np.flatnonzero(kind_of == k)
        y += band_gap if grouped or k else 0.0
        bands.append((kind, y, len(members)))
        row[members] = y + row_height * np.arange(len(members))
        y += row_height * len(members)
    cap = inst.capacity[:, 0]
    offset = stack_offsets(result.assign, result.start, result.end, inst.demand[:, 0], cap)
    share = inst.demand[:, 0] / cap[result.assign]
    top = 1.0 - offset / cap[result.assign] - share  # lowest core at the bottom of the row
    return TimelineLayout(row, row_height, tuple(bands), grouped, top, share, y)


def late_jobs(inst: Instance, result: PlanResult) -> np.ndarray:
    """bool[J]: the job has a due time and ends after it."""
    return (inst.due != NO_DUE) & (result.end > inst.due)


def day_ticks(inst: Instance, horizon: int) -> list[tuple[int, str]]:
    """(minute, label) at each midnight inside [0, horizon]; every other one past ~10 days."""
    first = inst.window_start.replace(hour=0, minute=0, second=0, microsecond=0)
    offset = int((first - inst.window_start).total_seconds() // 60) + 24 * 60
    step = 24 * 60 * (1 + horizon // (24 * 60 * 11))
    return [
        (m, (inst.window_start + timedelta(minutes=m)).strftime("%a %d %b"))
        for m in range(offset, horizon + 1, step)
    ]


# --------------------------------------------------------------------------- PNG files


def write_png_charts(folder: Path | str, inst: Instance, result: PlanResult) -> list[Path]:
    """timeline.png, utilisation.png, node-utilisation.png and, with history, convergence.png."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    figures = {
        "timeline.png": _timeline_figure(inst, result),
        "utilisation.png": _utilisation_figure(inst, result),
        "node-utilisation.png": _node_figure(inst, result),
    }
    if result.history:
        figures["convergence.png"] = _convergence_figure(result)
    written = []
    for name, fig in figures.items():
        atomic_write(folder / name, lambda p, f=fig: f.savefig(p, format="png", dpi=100))
        written.append(folder / name)
    return written


def _figure(width: float, height: float):
    # Figure without pyplot: no global state, no display backend; savefig renders with Agg.
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout="constrained")
    fig.set_facecolor("white")
    return fig, fig.add_subplot()


def _time_axis(ax, inst: Instance, horizon: int) -> None:
    ticks = day_ticks(inst, horizon)
    ax.set_xticks([m / 60 for m, _ in ticks], [label for _, label in ticks])
    ax.set_xlim(0, horizon / 60)
    ax.grid(axis="x", color=GRID)
    ax.set_axisbelow(True)
    ax.axvline(inst.window_minutes / 60, color=INK, linestyle="--", linewidth=1)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _horizon(inst: Instance, result: PlanResult) -> int:
    return max(result.makespan, inst.window_minutes)


def _timeline_figure(inst: Instance, result: PlanResult):
    from matplotlib.collections import PolyCollection

    lay = timeline_layout(inst, result)
    fig, ax = _figure(12, min(14.0, 2.0 + lay.height * 0.09))
    colours = group_colours(inst.job_groups)
    pad = 0.1 * lay.row_height if not lay.grouped else 0.0
    y0 = lay.row[result.assign] + pad + lay.bar_top * (lay.row_height - 2 * pad)
    y1 = y0 + lay.bar_height * (lay.row_height - 2 * pad)
    x0, x1 = result.start / 60, result.end / 60
    # One collection, not one artist per bar: 10,000 bars draw in well under a second.
    boxes = np.stack([np.c_[x0, y0], np.c_[x1, y0], np.c_[x1, y1], np.c_[x0, y1]], axis=1)
    late = late_jobs(inst, result)
    ax.add_collection(PolyCollection(
        boxes, facecolors=[colours[g] for g in inst.job_groups],
        edgecolors=np.where(late, INK, "none"), linewidths=0.8))
    for i in range(inst.n_nodes):
        lo, hi = inst.maint_ptr[i], inst.maint_ptr[i + 1]
        for s, e in zip(inst.maint_start[lo:hi], inst.maint_end[lo:hi], strict=True):
            ax.add_patch(_hatch(s / 60, lay.row[i], (e - s) / 60, lay.row_height))
    if lay.grouped:
        step = max(1, len(lay.bands) // 30)
        ax.set_yticks([b[1] + b[2] * lay.row_height / 2 for b in lay.bands][::step],
                      [f"{b[0]} ({b[2]})" for b in lay.bands][::step], fontsize=7)
    else:
        step = max(1, inst.n_nodes // 60)
        ax.set_yticks(lay.row[::step] + 0.5, list(inst.node_names)[::step], fontsize=7)
    ax.set_ylim(lay.height, 0)
    _time_axis(ax, inst, _horizon(inst, result))
    ax.axvline(result.makespan / 60, color=INK, linewidth=1.2)
    ax.set_title("Timeline: a bar per job, its height the share of the node's cores",
                 loc="left", fontsize=11)
    return fig


def _hatch(x: float, y: float, w: float, h: float):
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), w, h, facecolor="none", edgecolor=MUTED, hatch="////",
                     linewidth=0)


def _utilisation_figure(inst: Instance, result: PlanResult):
    fig, ax = _figure(12, 3.6)
    times, busy = utilisation_curve(inst, result)
    total = inst.capacity.sum(axis=0).astype(float)
    for r, (name, colour) in enumerate(RESOURCE_COLOURS.items()):
        if total[r] > 0:
            ax.step(times / 60, 100 * busy[:, r] / total[r], where="post", color=colour,
                    label=name, linewidth=1.4)
    ax.set_ylim(0, 105)
    ax.set_ylabel("% of cluster capacity")
    ax.legend(loc="upper right", frameon=False, ncols=3)
    _time_axis(ax, inst, _horizon(inst, result))
    ax.set_title("Cluster utilisation over time", loc="left", fontsize=11)
    return fig


def _node_figure(inst: Instance, result: PlanResult):
    fig, ax = _figure(12, 3.6)
    util = node_frame(inst, result)["core_utilisation_pct"].to_numpy()
    order = np.argsort(-util, kind="stable")
    ax.bar(np.arange(inst.n_nodes), util[order], width=0.85, color=OKABE_ITO[0])
    ax.set_xlim(-0.6, inst.n_nodes - 0.4)
    ax.set_ylim(0, 105)
    ax.set_ylabel("core utilisation %")
    if inst.n_nodes <= 80:
        ax.set_xticks(np.arange(inst.n_nodes), [inst.node_names[i] for i in order],
                      rotation=90, fontsize=7)
    else:
        ax.set_xlabel(f"{inst.n_nodes:,} nodes, busiest first")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.set_title("Core utilisation per node over the makespan (available time)",
                 loc="left", fontsize=11)
    return fig


def _convergence_figure(result: PlanResult):
    fig, ax = _figure(8, 3.4)
    gen = [h.generation for h in result.history]
    ax.plot(gen, [h.best_makespan_h for h in result.history], color=OKABE_ITO[0], label="best")
    ax.plot(gen, [h.median_makespan_h for h in result.history], color=OKABE_ITO[1],
            label="median", linestyle="--")
    ax.axhline(result.lower_bound / 60, color=MUTED, linewidth=1, label="lower bound")
    ax.set_xlabel("generation")
    ax.set_ylabel("makespan (h)")
    ax.legend(frameon=False)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.set_title("Convergence", loc="left", fontsize=11)
    return fig
