"""Render a chart's scene as compact inline SVG: classes for style, `<title>` for hover text.

The SVG relies on the page's stylesheet (`scene.stylesheet`) for every look, so each element
carries only its geometry, its classes and its hover text; coordinates have one decimal and
step curves become H/V path commands. No script, no external resource. A `Rects` with jobs
writes one `rect` with a `data-job` attribute (the job's index) per job.
"""

from __future__ import annotations

from html import escape

import numpy as np

from assignplan.report.scene import (
    STYLES,
    WIDTH,
    Dots,
    Line,
    Polyline,
    Rects,
    Scene,
    Text,
)


def _f(x: float) -> str:
    """A coordinate with one decimal, without a trailing '.0' (keeps big charts small)."""
    s = f"{x:.1f}"
    s = s[:-2] if s.endswith(".0") else s
    return "0" if s == "-0" else s


def _title(text: str | None) -> str:
    return "" if text is None else f"<title>{escape(text)}</title>"


def _hatch_defs(scene: Scene) -> str:
    """A 45° hatch pattern per hatched class the scene uses (inline styles: the page's base
    rule must not reach into a pattern)."""
    used = {c for item in scene.items for c in _classes(item)}
    out = []
    for name, style in STYLES.items():
        if style.hatch is not None and name in used:
            out.append(
                f'<pattern id="hatch-{name}" width="6" height="6" patternUnits="userSpaceOnUse"'
                f' patternTransform="rotate(45)"><rect width="6" height="6"'
                f' style="fill:{style.fill};stroke:none"/><line x1="0" y1="0" x2="0" y2="6"'
                f' style="stroke:{style.hatch};stroke-width:2.2"/></pattern>')
    return f"<defs>{''.join(out)}</defs>" if out else ""


def _classes(item) -> set[str]:
    if isinstance(item, Rects):
        names = [item.classes] if isinstance(item.classes, str) else set(item.classes)
        return {c for n in names for c in n.split()}
    return set(item.classes.split())


def _rects(r: Rects) -> str:
    xs, ys, ws, hs = (np.asarray(a, dtype=float) for a in (r.x, r.y, r.w, r.h))
    out = []
    for k in range(len(xs)):
        job = "" if r.jobs is None else f' data-job="{int(r.jobs[k])}"'
        title = "" if r.titles is None else r.titles[k]
        geometry = (f'x="{_f(xs[k])}" y="{_f(ys[k])}" width="{_f(ws[k])}"'
                    f' height="{_f(hs[k])}"')
        if title:
            out.append(f'<rect class="{r.classes_of(k)}"{job} {geometry}>'
                       f"<title>{escape(title)}</title></rect>")
        else:
            out.append(f'<rect class="{r.classes_of(k)}"{job} {geometry}/>')
    return "".join(out)


def _path(points: np.ndarray, closed: bool) -> str:
    """Points as path data: H or V for axis-parallel steps, L otherwise (compact step curves)."""
    cmds = [f"M{_f(points[0, 0])},{_f(points[0, 1])}"]
    last = (_f(points[0, 0]), _f(points[0, 1]))
    for px, py in points[1:]:
        x, y = _f(px), _f(py)
        if (x, y) == last:
            continue
        cmds.append(f"V{y}" if x == last[0] else f"H{x}" if y == last[1] else f"L{x},{y}")
        last = (x, y)
    return "".join(cmds) + ("Z" if closed else "")


def _item(item) -> str:
    if isinstance(item, Rects):
        return _rects(item)
    if isinstance(item, Line):
        body = _title(item.title)
        line = (f'<line class="{item.classes}" x1="{_f(item.x1)}" y1="{_f(item.y1)}"'
                f' x2="{_f(item.x2)}" y2="{_f(item.y2)}"')
        return f"{line}>{body}</line>" if body else f"{line}/>"
    if isinstance(item, Polyline):
        if len(item.points) == 0:
            return ""
        return (f'<path class="{item.classes}" d="{_path(np.asarray(item.points), item.closed)}">'
                f"{_title(item.title)}</path>")
    if isinstance(item, Dots):
        return "".join(f'<circle class="{item.classes}" cx="{_f(x)}" cy="{_f(y)}"'
                       f' r="{_f(item.r)}"/>' for x, y in zip(item.x, item.y, strict=True))
    if isinstance(item, Text):
        turn = (f' transform="rotate({_f(-item.rotate)} {_f(item.x)} {_f(item.y)})"'
                if item.rotate else "")
        return (f'<text class="{item.classes}" x="{_f(item.x)}" y="{_f(item.y)}"{turn}>'
                f"{escape(item.text)}</text>")
    raise TypeError(f"not a scene primitive: {type(item).__name__}")


def render_svg(scene: Scene) -> str:
    """The scene as one `<svg>` element, scaled by the page to its column."""
    cls = "chart grouped" if scene.grouped else "chart"
    return (
        f'<svg id="{scene.chart_id}" class="{cls}" viewBox="0 0 {WIDTH} {_f(scene.height)}"'
        f' role="img" aria-label="{escape(scene.label)}">{_hatch_defs(scene)}'
        + "".join(_item(item) for item in scene.items) + "</svg>"
    )
