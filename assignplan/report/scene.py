"""A chart as a scene: a few kinds of primitives in chart pixels, styled by named classes.

Every chart of the report is drawn once into a `Scene` (see `report.charts`); two thin
renderers turn it into inline SVG (`report.svg`) and into a PNG (`report.png`), so the page
and the pictures cannot disagree. Coordinates are pixels of a `WIDTH`-wide chart, y down.
A primitive's look comes from its classes, resolved like CSS: the styles in `STYLES` order,
a later class overriding an earlier one. The page's stylesheet is generated from the same
table (`stylesheet`), so a class means the same in the browser and in the PNG.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from functools import cache

import numpy as np

from assignplan.report.palette import GRID, INK, MUTED, PALETTE, RESOURCE_COLOURS

WIDTH = 1100  # chart width in pixels; the page scales a chart to its column
CHAR_EM = 0.62  # a generous mean glyph width in em, to lay out text without a font at hand


@dataclass(frozen=True)
class Style:
    """How a class draws; None leaves a property to an earlier class (or the default)."""

    fill: str | None = None
    stroke: str | None = None
    width: float | None = None  # stroke width, px
    dash: tuple[float, ...] | None = None  # px on, px off
    opacity: float | None = None
    hatch: str | None = None  # colour of 45° hatch lines over the fill
    size: float | None = None  # font size, px
    weight: str | None = None  # "normal" | "bold"
    anchor: str | None = None  # "start" | "middle" | "end"
    middle: bool | None = None  # text vertically centred on y (else y is the baseline)


BASE = Style(fill="none", stroke="none", width=1.0, dash=(), opacity=1.0, size=11.0,
             weight="normal", anchor="start", middle=False)

STYLES: dict[str, Style] = {
    # text
    "tick": Style(fill=MUTED, size=11.0, anchor="middle"),
    "ylab": Style(fill=MUTED, size=11.0, anchor="end", middle=True),
    "rowlab": Style(fill="#333333", size=10.5, anchor="end", middle=True),
    "rowsub": Style(fill=MUTED, size=10.0, anchor="end", middle=True),
    "nodelab": Style(fill="#333333", size=9.5, anchor="end", middle=True),
    "leg": Style(fill="#333333", size=11.5, middle=True),
    "key": Style(),  # a legend's swatch: drawn as what it stands for, told apart by this class
    "marklab": Style(fill=INK, size=11.0, weight="bold"),
    # axes and marks
    "grid": Style(stroke=GRID, width=1.0),
    "minor": Style(stroke="#F3F2EE", width=1.0),
    "past": Style(fill="#F1EBDD", opacity=0.7),
    "band": Style(fill="#FFFFFF"),
    "stripe": Style(fill="#F6F5F1"),
    "maint": Style(fill="#F2F2F2", hatch="#9A9A9A"),
    "winend": Style(stroke=INK, width=1.3, dash=(5, 3)),
    "mkline": Style(stroke=INK, width=1.5),
    "lane": Style(fill=RESOURCE_COLOURS["cores"], opacity=0.35),
    # job bars: a row per node ("bar") or thin rows in bands ("gbar"); colour from c0..c19
    "bar": Style(stroke="#FFFFFF", width=0.35),
    "gbar": Style(stroke="none", width=0.0),
    **{f"c{k}": Style(fill=colour) for k, colour in enumerate(PALETTE)},
    "late": Style(stroke="#000000", width=1.2),
    "glate": Style(stroke="#000000", width=0.5),
    "latemark": Style(fill="#000000"),
    # curves and per-node figures
    "curve": Style(fill="none", width=1.7),
    **{f"res{r}": Style(stroke=c) for r, c in enumerate(RESOURCE_COLOURS.values())},
    "avail": Style(width=1.1, dash=(4, 3), opacity=0.8),
    "ink": Style(stroke=INK),
    "best": Style(stroke=PALETTE[0]),
    "median": Style(stroke=PALETTE[1], dash=(5, 3)),
    "bound": Style(stroke="#9A9A9A", width=1.2, dash=(3, 3)),
    "keep": Style(stroke=PALETTE[0]),  # runtime risk: the two replay policies
    "dispatch": Style(stroke=PALETTE[5], dash=(6, 3)),
    "nodebar": Style(fill=RESOURCE_COLOURS["cores"]),
    "gpudot": Style(fill=RESOURCE_COLOURS["GPUs"], stroke="#FFFFFF", width=0.8),
}


@cache  # a chart has a few dozen distinct class lists and up to tens of thousands of shapes
def resolve(classes: str) -> Style:
    """The style of a primitive with these space-separated classes (CSS order: STYLES order)."""
    names = set(classes.split())
    out = {f.name: getattr(BASE, f.name) for f in fields(Style)}
    for name, style in STYLES.items():
        if name in names:
            out.update({k: v for k, v in vars(style).items() if v is not None})
    return Style(**out)


def text_width(text: str, style: Style) -> float:
    """Estimated width in px of a text in a text style (a little wide rather than narrow)."""
    bold = 1.1 if style.weight == "bold" else 1.0
    return len(text) * (style.size or BASE.size) * CHAR_EM * bold


@dataclass(frozen=True)
class Rects:
    """Axis-aligned rectangles sharing nothing but their kind: float64[K] each coordinate.

    ``classes`` per rect (or one for all), ``titles`` hover text per rect (or None),
    ``jobs`` int64[K], the job each rect draws (SVG attribute data-job), or None.
    """

    x: np.ndarray
    y: np.ndarray
    w: np.ndarray
    h: np.ndarray
    classes: tuple[str, ...] | str
    titles: tuple[str, ...] | None = None
    jobs: np.ndarray | None = None

    def classes_of(self, k: int) -> str:
        return self.classes if isinstance(self.classes, str) else self.classes[k]


@dataclass(frozen=True)
class Line:
    x1: float
    y1: float
    x2: float
    y2: float
    classes: str
    title: str | None = None


@dataclass(frozen=True)
class Polyline:
    """Points float64[K, 2] joined in order; ``closed`` fills the polygon they bound."""

    points: np.ndarray
    classes: str
    title: str | None = None
    closed: bool = False


@dataclass(frozen=True)
class Dots:
    """Circles: centres x, y float64[K], radius r px."""

    x: np.ndarray
    y: np.ndarray
    r: float
    classes: str


@dataclass(frozen=True)
class Text:
    x: float
    y: float
    text: str
    classes: str
    rotate: float = 0.0  # degrees counter-clockwise about (x, y)


Primitive = Rects | Line | Polyline | Dots | Text


@dataclass(frozen=True)
class Scene:
    """One chart: an id, a size, a label for screen readers, a title for the PNG, primitives."""

    chart_id: str
    height: float
    label: str
    title: str
    items: list[Primitive] = field(default_factory=list)
    grouped: bool = False  # the timeline's bands view (a class on the SVG element)


def _css(s: Style, name: str) -> str:
    props = []
    if s.hatch is not None:
        props.append(f"fill:url(#hatch-{name})")
    elif s.fill is not None:
        props.append(f"fill:{s.fill}")
    if s.stroke is not None:
        props.append(f"stroke:{s.stroke}")
    if s.width is not None:
        props.append(f"stroke-width:{s.width:g}")
    if s.dash is not None:
        props.append(f"stroke-dasharray:{' '.join(f'{d:g}' for d in s.dash) or 'none'}")
    if s.opacity is not None:
        props.append(f"opacity:{s.opacity:g}")
    if s.size is not None:
        props.append(f"font-size:{s.size:g}px")
    if s.weight is not None:
        props.append(f"font-weight:{'600' if s.weight == 'bold' else 'normal'}")
    if s.anchor is not None:
        props.append(f"text-anchor:{s.anchor}")
    if s.middle is not None:
        props.append(f"dominant-baseline:{'middle' if s.middle else 'auto'}")
    return ";".join(props)


def stylesheet() -> str:
    """CSS of every class in STYLES for the page showing the SVG renderings, after a base
    rule of no specificity (`:where`) that gives every chart element BASE, as the PNG has."""
    rules = [f":where(svg.chart *){{{_css(BASE, 'base')}}}"]
    rules += [f".{name}{{{_css(style, name)}}}" for name, style in STYLES.items()]
    return "".join(rules)
