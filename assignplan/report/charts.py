"""Every chart of a plan, drawn once as a scene: timeline, utilisation, per node, convergence.

`plan_scenes` is the one list of charts: the HTML page renders each scene as inline SVG
(`report.svg`), `--png` renders the same scenes as PNG files (`report.png`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from assignplan.instance import Instance
from assignplan.metrics import node_frame
from assignplan.plan import PlanResult
from assignplan.report.axes import (
    LEFT,
    PLOT,
    Key,
    TimeScale,
    legend,
    time_grid,
    y_grid,
)
from assignplan.report.figures import binned_curve, utilisation_curves
from assignplan.report.palette import RESOURCE_COLOURS
from assignplan.report.scene import Dots, Line, Polyline, Rects, Scene, Text
from assignplan.report.timeline import timeline_scene
from assignplan.units import clock, offset_text

PLOT_HEIGHT = 180.0  # the value charts' plot area


def plan_scenes(inst: Instance, result: PlanResult,
                nodes: pd.DataFrame | None = None) -> dict[str, Scene]:
    """The charts of a plan by file stem; convergence only when the method has a history.
    ``nodes`` is `stats.node_frame` when the caller has it already."""
    nodes = node_frame(inst, result) if nodes is None else nodes
    scenes = {
        "timeline": timeline_scene(inst, result),
        "utilisation": utilisation_scene(inst, result),
        "node-utilisation": node_utilisation_scene(nodes),
    }
    if result.history:
        scenes["convergence"] = convergence_scene(result)
    return scenes


# --------------------------------------------------------------------------- utilisation


def _capacity_text(name: str, amount: float) -> str:
    return f"{amount / 1024:,.0f} GiB" if name == "memory" else f"{amount:,.1f} {name}"


def _staircase(times: np.ndarray, values: np.ndarray, horizon: int) -> tuple[np.ndarray,
                                                                              np.ndarray]:
    """A step function on [0, horizon] as the corners of its staircase, averaged per pixel
    once it has more steps than the plot has pixels (averaging keeps the area)."""
    keep = times < horizon
    times = np.r_[times[keep], horizon]
    values = np.vstack([values[keep], values[keep][-1:]])
    if len(times) > PLOT:
        times, mean = binned_curve(times, values, 0, horizon, PLOT)
        values = np.vstack([mean, mean[-1:]])
    xs = np.repeat(times, 2)[1:-1]
    return xs, np.repeat(values[:-1], 2, axis=0)


def utilisation_scene(inst: Instance, result: PlanResult) -> Scene:
    """Cores, memory and GPUs busy, and available, over time, in % of the mean available
    capacity over the makespan: the denominator of the summary cards (`figures`)."""
    curves = utilisation_curves(inst, result)
    x = TimeScale(max(result.makespan, inst.window_minutes))
    names = list(RESOURCE_COLOURS)
    shown = [r for r in range(3) if curves.reference[r] > 0]
    # Available capacity rises above its mean while no node is in maintenance: room for it.
    hi = 1.04 * max([100.0, *(curves.available_pct[:, r].max() for r in shown)])
    keys = [Key(f"{names[r]} busy", f"curve res{r}", "line") for r in shown]
    keys.append(Key("available (nodes in maintenance taken out)", "curve avail ink", "line"))
    items, below = legend(keys, LEFT, 4)
    top = below + 10
    bottom = top + PLOT_HEIGHT
    items += y_grid(top, PLOT_HEIGHT, list(np.arange(0, hi, 25)), 0, hi, "{:g} %")
    items += time_grid(inst.window_start, x, top, bottom, bottom + 18)
    for r in shown:
        ref = _capacity_text(names[r], curves.reference[r])
        for pct, cls, title in (
            (curves.available_pct, f"curve avail res{r}",
             f"{names[r]} available, % of {ref} (the mean available over the makespan)"),
            (curves.busy_pct, f"curve res{r}",
             f"{names[r]} busy, % of {ref}: the mean available over the makespan, so the"
             " curve's mean over the makespan is the card's utilisation"),
        ):
            xs, ys = _staircase(curves.times, pct[:, [r]], x.horizon)
            points = np.column_stack([x(xs), bottom - PLOT_HEIGHT * ys[:, 0] / hi])
            items.append(Polyline(points, cls, title))
    win = float(x(inst.window_minutes))
    items.append(Line(win, top, win, bottom, "winend",
                      f"window end: {clock(inst.window_start, inst.window_minutes)}"
                      f" ({offset_text(inst.window_minutes)})"))
    return Scene("utilisation", bottom + 30, "Cluster utilisation over time",
                 "Utilisation over time, % of the mean available capacity over the makespan",
                 items)


# --------------------------------------------------------------------------- per node


def node_utilisation_scene(nodes: pd.DataFrame) -> Scene:
    """Core utilisation per node (bars, busiest first), GPU utilisation as a dot on GPU nodes.

    ``nodes`` is `stats.node_frame`: the figures are the same as in the node table.
    """
    util = nodes["core_utilisation_pct"].to_numpy(dtype=float)
    gpu = nodes["gpu_utilisation_pct"].to_numpy(dtype=float)
    order = np.argsort(-util, kind="stable")
    n = len(order)
    slot = PLOT / max(n, 1)
    labelled = n <= 80
    keys = [Key("cores", "nodebar")] + ([Key("GPUs", "gpudot")] if np.isfinite(gpu).any() else [])
    items, below = legend(keys, LEFT, 4)
    top = below + 10
    bottom = top + PLOT_HEIGHT
    items += y_grid(top, PLOT_HEIGHT, [0, 25, 50, 75, 100], 0, 100, "{:g} %")
    left = LEFT + np.arange(n) * slot
    heights = PLOT_HEIGHT * np.minimum(util[order], 100) / 100
    names = nodes["node"].astype(str).to_numpy()[order]
    kinds = nodes["kind"].astype(str).to_numpy()[order]
    jobs = nodes["jobs"].to_numpy()[order]
    titles = tuple(
        f"{names[k]} ({kinds[k]}): cores {util[i]:.1f} %"
        + (f", GPUs {gpu[i]:.1f} %" if np.isfinite(gpu[i]) else "") + f", {int(jobs[k])} jobs"
        for k, i in enumerate(order))
    items.append(Rects(left + slot * 0.1, bottom - heights, np.full(n, max(slot * 0.8, 0.5)),
                       heights, "nodebar", titles))
    has_gpu = np.isfinite(gpu[order])
    items.append(Dots(left[has_gpu] + slot / 2,
                      bottom - PLOT_HEIGHT * np.minimum(gpu[order][has_gpu], 100) / 100,
                      min(3.5, max(slot / 3, 1.2)), "gpudot"))
    if labelled:
        items += [Text(float(left[k] + slot / 2 + 3), bottom + 6, names[k], "nodelab", 90.0)
                  for k in range(n)]
    else:
        items.append(Text(LEFT + PLOT / 2, bottom + 16, f"{n:,} nodes, busiest first", "tick"))
    return Scene("node-utilisation", bottom + (70 if labelled else 22), "Core utilisation per"
                 " node", "Core utilisation per node over the makespan (available time)", items)


# --------------------------------------------------------------------------- convergence


def convergence_scene(result: PlanResult) -> Scene:
    """Best and median makespan per generation (hours), with the lower bound for scale."""
    gen = np.array([h.generation for h in result.history], dtype=float)
    best = np.array([h.best_makespan_h for h in result.history])
    median = np.array([h.median_makespan_h for h in result.history])
    bound = result.lower_bound / 60
    lo, hi = min(bound, best.min()), max(median.max(), best.max())
    lo, hi = (lo - 1, hi + 1) if hi - lo < 1e-9 else (lo - 0.05 * (hi - lo), hi + 0.05 * (hi - lo))
    g0, g1 = gen.min(), max(gen.max(), gen.min() + 1)
    items, below = legend([Key("best", "curve best", "line"),
                           Key("median", "curve median", "line"),
                           Key("lower bound", "bound", "line")], LEFT, 4)
    top = below + 10
    bottom = top + PLOT_HEIGHT

    def points(values: np.ndarray) -> np.ndarray:
        return np.column_stack([LEFT + (gen - g0) / (g1 - g0) * PLOT,
                                bottom - PLOT_HEIGHT * (values - lo) / (hi - lo)])

    by = bottom - PLOT_HEIGHT * (bound - lo) / (hi - lo)
    items += y_grid(top, PLOT_HEIGHT, list(np.linspace(lo, hi, 5)), lo, hi, "{:.1f} h")
    items += [
        Line(LEFT, by, LEFT + PLOT, by, "bound", f"lower bound {bound:g} h"),
        Polyline(points(median), "curve median", "median makespan per generation"),
        Polyline(points(best), "curve best", "best makespan per generation"),
        Text(LEFT, bottom + 18, f"generation {g0:g}", "tick"),
        Text(LEFT + PLOT - 40, bottom + 18, f"{g1:g}", "tick"),
    ]
    return Scene("convergence", bottom + 28, "Convergence of the genetic algorithm",
                 "Convergence: makespan per generation", items)

