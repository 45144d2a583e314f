"""What the charts share: the plot area, the time axis and its ticks, value grids, legends.

Time ticks follow the span a chart shows: a gridline every hour under 3 days, every 6 hours up
to 10 days, every day beyond; labels on every gridline that leaves them room, at midnight the
date and elsewhere the time of day, both cut from `units.clock` (the report's one way of
writing a time).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

import numpy as np

from assignplan.report.scene import (
    STYLES,
    WIDTH,
    Line,
    Primitive,
    Rects,
    Text,
    text_width,
)
from assignplan.units import clock

LEFT, RIGHT = 104, 18  # room for node labels / axis figures, and for the last time label
PLOT = WIDTH - LEFT - RIGHT
HOUR, DAY = 60, 24 * 60
LABEL_GAP = 10.0  # px of air between two time labels
# Label spacings a time axis may take (minutes): the ones up to a day divide the day.
LABEL_STEPS = (HOUR, 2 * HOUR, 3 * HOUR, 4 * HOUR, 6 * HOUR, 12 * HOUR, DAY, 2 * DAY, 7 * DAY,
               14 * DAY, 28 * DAY)


class TimeScale:
    """Minutes to x pixels over [0, horizon]."""

    def __init__(self, horizon: int):
        self.horizon = max(1, int(horizon))
        self.px_per_minute = PLOT / self.horizon

    def __call__(self, minute) -> np.ndarray:
        return LEFT + np.asarray(minute, dtype=float) * self.px_per_minute


def grid_step(horizon: int) -> int:
    """Minutes between time gridlines: an hour under 3 days, 6 hours up to 10, else a day."""
    if horizon < 3 * DAY:
        return HOUR
    return 6 * HOUR if horizon <= 10 * DAY else DAY


@dataclass(frozen=True)
class TimeTicks:
    """Gridline minutes (int, in [0, horizon]) and the labelled ones with their text."""

    step: int
    grid: list[int]
    labels: list[tuple[int, str]]


def _label(start: datetime, minute: int, *, full: bool) -> str:
    """The date at midnight, else the time of day, as `units.clock` writes them."""
    text = clock(start, minute)
    date, _, time = text.rpartition(" ")
    if full or not date:
        return text
    return date if time == "00:00" else time


def time_ticks(start: datetime, horizon: int) -> TimeTicks:
    """Gridlines at whole clock hours (or days) and the densest labelling whose labels keep
    LABEL_GAP px apart on a TimeScale of `horizon` (labels the chart's edge would cut are left
    out)."""
    x = TimeScale(horizon)
    step = grid_step(horizon)
    since_midnight = start.hour * 60 + start.minute
    first = -since_midnight % step
    grid = list(range(first, x.horizon + 1, step))
    for every in (s for s in LABEL_STEPS if s % step == 0):
        labels = [(m, text) for m, text in _labelled(start, grid, every, since_midnight)
                  if float(x(m)) + _width(text) / 2 <= WIDTH]
        if _apart(labels, x):
            return TimeTicks(step, grid, labels)
    return TimeTicks(step, grid, [])


def _labelled(start: datetime, grid: list[int], every: int,
              since_midnight: int) -> list[tuple[int, str]]:
    if every <= DAY:
        chosen = [m for m in grid if (m + since_midnight) % every == 0]
    else:
        midnights = [m for m in grid if (m + since_midnight) % DAY == 0]
        chosen = midnights[:: every // DAY]
    # Without a midnight among the labels, the first one carries the date as well.
    has_date = any((m + since_midnight) % DAY == 0 for m in chosen)
    return [(m, _label(start, m, full=not has_date and k == 0)) for k, m in enumerate(chosen)]


def _width(text: str) -> float:
    return text_width(text, STYLES["tick"])


def _apart(labels: list[tuple[int, str]], x: TimeScale) -> bool:
    widths = [_width(text) for _, text in labels]
    centres = [float(x(m)) for m, _ in labels]
    return all(centres[k + 1] - centres[k] >= (widths[k] + widths[k + 1]) / 2 + LABEL_GAP
               for k in range(len(labels) - 1))


def time_grid(start: datetime, x: TimeScale, top: float, bottom: float,
              labels_at: float) -> list[Primitive]:
    """Gridlines (labelled ones darker) over [top, bottom], their labels at y = labels_at."""
    ticks = time_ticks(start, x.horizon)
    labelled = {m for m, _ in ticks.labels}
    out: list[Primitive] = [
        Line(float(x(m)), top, float(x(m)), bottom, "grid" if m in labelled else "minor")
        for m in ticks.grid
    ]
    out += [Text(float(x(m)), labels_at, text, "tick") for m, text in ticks.labels]
    return out


def y_grid(top: float, height: float, ticks: list[float], lo: float, hi: float,
           fmt: str) -> list[Primitive]:
    """Horizontal gridlines at `ticks` (values in [lo, hi]) with their labels on the left."""
    out: list[Primitive] = []
    for v in ticks:
        y = top + height * (1 - (v - lo) / (hi - lo))
        out += [Line(LEFT, y, LEFT + PLOT, y, "grid"), Text(LEFT - 6, y, fmt.format(v), "ylab")]
    return out


@dataclass(frozen=True)
class Key:
    """A legend entry: a swatch drawn with `classes` (a "rect", a "line" or no swatch:
    "text"), and its text."""

    text: str
    classes: str
    shape: str = "rect"


SWATCH, KEY_GAP, ROW_PX = 12.0, 16.0, 18.0


def legend(keys: list[Key], x0: float, y0: float, right: float = WIDTH - RIGHT
           ) -> tuple[list[Primitive], float]:
    """Legend entries in rows from (x0, y0), wrapping at `right`; returns them and the y
    below the last row."""
    out: list[Primitive] = []
    x, y = x0, y0 + ROW_PX / 2
    style = STYLES["leg"]
    for key in keys:
        width = SWATCH + 9 + text_width(key.text, style)
        if x > x0 and x + width > right:
            x, y = x0, y + ROW_PX
        if key.shape == "line":
            out.append(Line(x, y, x + SWATCH + 4, y, f"{key.classes} key"))
            text_x = x + SWATCH + 9
        elif key.shape == "text":
            text_x = x
        else:
            out.append(Rects(np.array([x]), np.array([y - SWATCH / 2]), np.array([SWATCH]),
                             np.array([SWATCH]), f"{key.classes} key"))
            text_x = x + SWATCH + 5
        out.append(Text(text_x, y, key.text, "leg"))
        x = text_x + text_width(key.text, style) + KEY_GAP
    return out, y + ROW_PX / 2
