"""Units of the model: whole minutes and MiB inside, hours and calendar times outside.

The one rounding rule every method, the checker and the bounds share lives here, with the
limits that keep every time the planner handles inside int64 minutes (and every duration
inside int32), and the one way a person is shown a time: a calendar time from the window
start (``Tue 08 Dec 13:00``), or an offset that says it is one (``+5.0 h``).
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import numpy as np

# A float in hours times 60 rarely lands exactly on an integer (0.1 h * 60 = 6.000000000000001):
# round away the float noise before taking ceil/floor so every component gets the same minute.
_MINUTE_DIGITS = 6

# Limits of the time-like inputs. With them a duration is at most
# MAX_JOB_HOURS * 60 / MIN_SPEED = 6e7 minutes (int32 holds 2.1e9), and a horizon made of a
# million such jobs one after another, 6e13 minutes, stays far inside int64 (9.2e18).
MAX_JOB_HOURS = 10_000.0  # one job's run time on a reference node: over a year
# And at least 0.36 s (a run takes at least a minute anyway): the priority order adds hours
# along chains of `follows` in floats and needs each job's hours to show in the sum (1e-4 h is
# above the float spacing of any chain below 1e11 h; 1e-226 h vanished and broke the order).
MIN_JOB_HOURS = 0.0001
MAX_OFFSET_HOURS = 100_000.0  # ready, due, maintenance, window length: about 11 years
MIN_SPEED, MAX_SPEED = 0.01, 1_000.0

# Limits of the resources, far above any real node (the largest shared-memory machines have a
# few thousand cores, tens of TiB and tens of GPUs): with them one job's resource-minutes are at
# most 2^30 MiB * 6e7 min < 2^56, so the product of a demand and a duration never overflows.
# A sum over many jobs could still: the batch-level rule MAX_RESOURCE_MINUTES bounds it.
MAX_CORES = 1_000_000
MAX_GPUS = 100_000
MAX_MEMORY_GIB = 1_048_576.0  # 1 PiB = 2^30 MiB
MAX_WEIGHT = 1_000_000.0  # weighted sums of minutes stay finite floats
# The sum over all jobs of demand * duration on the batch's slowest node, per resource. Every
# resource-minute sum the planner forms (work per node, per class, in the bounds) is a part of
# it, and so is the horizon (each job takes at least one core, so the sum of the durations is
# at most the core-minutes): 2^60 keeps both below the int64 sentinels (int64 max // 4) the
# builder and the bounds use. A million 1 TiB jobs of 100 h, with a node of speed 0.1 in the
# inventory, use 1/18 of it.
MAX_RESOURCE_MINUTES = 2**60
# hours_of keeps 4 decimals of an hour, so a written offset is at most 0.00005 h = 0.003 min
# off its minute; anything within this many minutes of a whole minute reads back as that minute.
MINUTE_TOLERANCE = 0.005


def ceil_minutes(minutes: float | np.ndarray) -> Any:
    """Smallest whole minute >= `minutes`, immune to float noise below 1e-6 min.

    numpy's rounding is used for scalars too, so the scalar and the vectorised forms of the
    rule agree bit for bit.
    """
    out = np.ceil(np.round(minutes, _MINUTE_DIGITS))
    return int(out) if np.ndim(out) == 0 else out.astype(np.int64)


def floor_minutes(minutes: float | np.ndarray) -> Any:
    """Largest whole minute <= `minutes`, immune to float noise below 1e-6 min."""
    out = np.floor(np.round(minutes, _MINUTE_DIGITS))
    return int(out) if np.ndim(out) == 0 else out.astype(np.int64)


def duration_minutes(hours: float | np.ndarray, speed: float | np.ndarray) -> Any:
    """Duration of a job of `hours` reference hours on a node of relative `speed`.

    The model's one rounding rule: ``ceil(hours * 60 / speed)`` whole minutes, at least 1.
    Accepts scalars or broadcastable arrays.
    """
    out = np.maximum(1, ceil_minutes(np.multiply(hours, 60.0) / speed))
    return int(out) if np.ndim(out) == 0 else out


def memory_mib(gib: float) -> int:
    """Memory in whole MiB: the unit every capacity comparison uses (exact integer sums)."""
    return int(round(gib * 1024.0))


def hours_of(minutes: int | float) -> float:
    """Minutes as hours for files and JSON: on the minute grid, without float tails
    (5281 min -> 88.0167 h, not 88.01666666666667; round(88.0167 * 60) gives 5281 back)."""
    return round(float(minutes) / 60.0, 4)


def offset_text(minutes: int | float) -> str:
    """An offset from the window start, labelled as one: '+5.0 h', '-0.5 h'."""
    return f"{'-' if minutes < 0 else '+'}{abs(float(minutes)) / 60:,.1f} h"


def calendar(start: datetime, minute: int | float) -> datetime | None:
    """The calendar time `minute` minutes after `start`, or None past the calendar's end."""
    try:
        return start + timedelta(minutes=int(minute))
    except OverflowError:
        return None


def clock(start: datetime, minute: int | float) -> str:
    """A minute offset as a person reads it: 'Tue 08 Dec 13:00' (the year only when it is
    not the window start's: 'Tue 05 Jan 2027 13:00'); an offset ('+1,000,000.0 h') beyond
    the calendar's range."""
    when = calendar(start, minute)
    if when is None:
        return offset_text(minute)
    fmt = "%a %d %b %H:%M" if when.year == start.year else "%a %d %b %Y %H:%M"
    return when.strftime(fmt)


def iso(start: datetime, minute: int | float) -> str | None:
    """ISO 8601 text of the calendar time `minute` minutes after `start` (None if beyond the
    calendar), to the minute: '2026-12-08T13:00:00'."""
    when = calendar(start, minute)
    return None if when is None else when.isoformat()


def number(value: float | None, digits: int | None = 1, suffix: str = "") -> str:
    """A figure as a person reads it: thousands separated, `digits` decimals ('–' for a
    missing or NaN value); `digits=None`: as short as exact (10,000 and 0.01, not 10000.0
    and 1e-02), for limits and user values."""
    if value is None or value != value:  # NaN is the one value unequal to itself
        return "–"
    if digits is None:
        x = float(value)
        text = f"{int(x):,}" if x.is_integer() and abs(x) < 1e12 else f"{x:g}"
        return text + suffix
    return f"{value:,.{digits}f}{suffix}"


def counted(n: int, noun: str, plural: str | None = None) -> str:
    """'1 job', '2 jobs', '1,204 jobs': a count with its noun in the right number."""
    return f"{n:,} {noun if n == 1 else (plural or noun + 's')}"
