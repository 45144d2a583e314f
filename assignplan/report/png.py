"""Render a chart's scene as a PNG through matplotlib: the same primitives, the same styles.

A figure exactly `WIDTH` chart pixels wide at 100 dpi, one axes filling it in chart pixels
(y down), so a primitive lands where the SVG puts it; sizes in px become points (x 0.72).
Rectangles become one collection per primitive (10,000 bars draw in well under a second),
hatched ones patches with a hatch; the scene's title heads the picture (the page has its own
headings). The hover text of the SVG has no place in a picture and is left out.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from assignplan.files import atomic_write
from assignplan.instance import Instance
from assignplan.plan import PlanResult
from assignplan.report.charts import plan_scenes
from assignplan.report.palette import INK
from assignplan.report.scene import WIDTH, Dots, Line, Polyline, Rects, Scene, Style, Text, resolve

DPI = 100  # figure inches are chart pixels / DPI
SCALE = 1.5  # PNG pixels per chart pixel: sharp on high-density screens and in print
PT = 72 / DPI  # points per chart pixel
TITLE_PX = 30.0
_ANCHOR = {"start": "left", "middle": "center", "end": "right"}


def _rgba(colour: str | None, opacity: float) -> tuple[float, float, float, float]:
    from matplotlib.colors import to_rgba

    return (0.0, 0.0, 0.0, 0.0) if colour in (None, "none") else to_rgba(colour, opacity)


def _linestyle(style: Style):
    if not style.dash:
        return "solid"
    width_pt = max(style.width * PT, 1e-6)  # matplotlib scales dashes by the line width
    return (0, tuple(d * PT / width_pt for d in style.dash))


def _rects(ax, item: Rects) -> None:
    from matplotlib.collections import PolyCollection
    from matplotlib.patches import Rectangle

    x0, y0 = np.asarray(item.x, float), np.asarray(item.y, float)
    x1, y1 = x0 + np.asarray(item.w, float), y0 + np.asarray(item.h, float)
    styles = [resolve(item.classes_of(k)) for k in range(len(x0))]
    plain = [k for k, s in enumerate(styles) if s.hatch is None]
    if plain:
        boxes = np.stack([np.c_[x0, y0], np.c_[x1, y0], np.c_[x1, y1], np.c_[x0, y1]], axis=1)
        ax.add_collection(PolyCollection(
            boxes[plain], facecolors=[_rgba(styles[k].fill, styles[k].opacity) for k in plain],
            edgecolors=[_rgba(styles[k].stroke, styles[k].opacity) for k in plain],
            linewidths=[styles[k].width * PT for k in plain]))
    for k, s in enumerate(styles):
        if s.hatch is not None:
            ax.add_patch(Rectangle((x0[k], y0[k]), x1[k] - x0[k], y1[k] - y0[k],
                                   facecolor=_rgba(s.fill, s.opacity), edgecolor=s.hatch,
                                   hatch="////", linewidth=0))


def _draw(ax, item) -> None:
    from matplotlib.patches import Circle, Polygon

    if isinstance(item, Rects):
        _rects(ax, item)
        return
    s = resolve(item.classes)
    if isinstance(item, Line | Polyline):
        points = (np.array([[item.x1, item.y1], [item.x2, item.y2]]) if isinstance(item, Line)
                  else np.asarray(item.points, float))
        if isinstance(item, Polyline) and item.closed:
            ax.add_patch(Polygon(points, closed=True, facecolor=_rgba(s.fill, s.opacity),
                                 edgecolor=_rgba(s.stroke, s.opacity), linewidth=s.width * PT))
        elif len(points):
            ax.plot(points[:, 0], points[:, 1], color=_rgba(s.stroke, s.opacity),
                    linewidth=s.width * PT, linestyle=_linestyle(s), solid_joinstyle="round")
    elif isinstance(item, Dots):
        for cx, cy in zip(item.x, item.y, strict=True):
            ax.add_patch(Circle((cx, cy), item.r, facecolor=_rgba(s.fill, s.opacity),
                                edgecolor=_rgba(s.stroke, s.opacity), linewidth=s.width * PT))
    elif isinstance(item, Text):
        ax.text(item.x, item.y, item.text, color=_rgba(s.fill, s.opacity), fontsize=s.size * PT,
                fontweight=s.weight, ha=_ANCHOR[s.anchor],
                va="center_baseline" if s.middle else "baseline", rotation=item.rotate,
                rotation_mode="anchor", clip_on=False)
    else:
        raise TypeError(f"not a scene primitive: {type(item).__name__}")


def scene_figure(scene: Scene):
    """A matplotlib Figure of the scene (no pyplot: no global state, no display backend)."""
    from matplotlib.figure import Figure

    height = scene.height + TITLE_PX
    fig = Figure(figsize=(WIDTH / DPI, height / DPI), dpi=DPI)
    fig.set_facecolor("white")
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(0, WIDTH)
    ax.set_ylim(scene.height, -TITLE_PX)
    ax.set_axis_off()
    ax.text(12, -TITLE_PX / 2, scene.title, fontsize=13 * PT, fontweight="bold", color=INK,
            va="center")
    for item in scene.items:
        _draw(ax, item)
    return fig


def write_png(path: Path | str, scene: Scene) -> None:
    """The scene as a PNG file, written atomically."""
    fig = scene_figure(scene)
    atomic_write(path, lambda p: fig.savefig(p, format="png", dpi=DPI * SCALE))


def write_png_charts(folder: Path | str, inst: Instance, result: PlanResult,
                     risk=None) -> list[Path]:
    """timeline.png, utilisation.png, node-utilisation.png and, with history, convergence.png
    (and risk-makespan.png with the plan's runtime `risk`): the scenes the HTML page shows."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    scenes = plan_scenes(inst, result)
    if risk is not None:
        from assignplan.report.risk import risk_scene

        scenes["risk-makespan"] = risk_scene(inst, risk)
    for name, scene in scenes.items():
        write_png(folder / f"{name}.png", scene)
        written.append(folder / f"{name}.png")
    return written
