"""Published bin-packing and P||Cmax instances read from their files and reduced to batches."""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass
from pathlib import Path

from assignplan.units import MAX_OFFSET_HOURS

# Any Monday will do: the reductions only use minute offsets from the window start.
WINDOW_START = "2026-12-07T00:00:00"
HOUR = 60  # minutes

# P||Cmax jobs take the whole node: these figures only make the batch look like a cluster; the
# reduction holds for any node size as long as each job asks for all of it.
WHOLE_NODE_CORES = 32
WHOLE_NODE_MEMORY_GIB = 128.0


@dataclass(frozen=True)
class BinPacking:
    """A one-dimensional bin-packing instance: item sizes and the bin capacity (integers)."""

    name: str
    capacity: int
    sizes: tuple[int, ...]


@dataclass(frozen=True)
class Pcmax:
    """An identical-parallel-machines instance: `machines` and processing times (hours).

    ``stated_opt`` is the optimal makespan written on the file's `OPT:` line (None if absent).
    """

    name: str
    machines: int
    times: tuple[int, ...]
    stated_opt: int | None = None


# --------------------------------------------------------------------------- parsers


def read_bpp(path: Path | str) -> BinPacking:
    """Read a BPPLIB instance: line 1 n, line 2 capacity C, then n item sizes (CRLF or LF).

    The n sizes must be present and each must fit a bin (s_k <= C); anything after them is
    rejected, so a truncated or mislabelled file fails loudly instead of giving a wrong optimum.
    """
    path = Path(path)
    tokens = path.read_bytes().decode("ascii").split()  # split() eats \r\n and \n alike
    n, capacity = int(tokens[0]), int(tokens[1])
    sizes = tuple(int(t) for t in tokens[2:])
    if len(sizes) != n:
        raise ValueError(f"{path}: header says {n} items, file holds {len(sizes)}")
    if not all(0 < s <= capacity for s in sizes):
        raise ValueError(f"{path}: an item size is outside (0, {capacity}]")
    return BinPacking(path.stem, capacity, sizes)


_PCMAX_HEADER = re.compile(r"^p\s+p_cmax\s+(\d+)\s+(\d+)\s*$")
_PCMAX_OPT = re.compile(r"^OPT:\s*(\d+)\s*;\s*$")


def read_pcmax(path: Path | str) -> Pcmax:
    """Read a P||Cmax file: `p p_cmax n m`, the n times then a terminating 0, then `OPT:v;`."""
    path = Path(path)
    lines = [ln.strip() for ln in path.read_bytes().decode("ascii").splitlines() if ln.strip()]
    header = _PCMAX_HEADER.match(lines[0])
    if header is None:
        raise ValueError(f"{path}: first line is not 'p p_cmax n m'")
    n, m = int(header.group(1)), int(header.group(2))
    opt = None
    numbers: list[int] = []
    for line in lines[1:]:
        found = _PCMAX_OPT.match(line)
        if found:
            opt = int(found.group(1))
        else:
            numbers.extend(int(t) for t in line.split())
    if len(numbers) != n + 1 or numbers[-1] != 0:
        raise ValueError(f"{path}: expected {n} processing times followed by 0")
    return Pcmax(path.stem, m, tuple(numbers[:-1]), opt)


def read_optima(path: Path | str, column: str) -> dict[str, int]:
    """instance -> integer value of `column` from an optima CSV (first row per instance)."""
    with open(path, newline="", encoding="utf-8") as f:
        out: dict[str, int] = {}
        for row in csv.DictReader(f):
            out.setdefault(row["instance"], int(row[column]))
    return out


def read_column(path: Path | str, column: str) -> dict[str, str]:
    """instance -> text of `column` from an optima CSV (e.g. its `verified` note)."""
    with open(path, newline="", encoding="utf-8") as f:
        return {row["instance"]: row[column] for row in csv.DictReader(f)}


# --------------------------------------------------------------------------- reductions


def bin_packing_batch(bpp: BinPacking, nodes: int) -> dict:
    """The batch of a bin-packing instance on `nodes` nodes, and what its makespan proves.

    Construction: `nodes` identical nodes of C cores (C = bin capacity) and memory that never
    binds; one job per item k needing s_k cores for exactly 1 h (60 min) on every node.

    Claim: OPT_makespan(z nodes) = 60 min iff the items pack into z bins, and otherwise
    OPT_makespan >= 120 min. Precisely, with z* the optimal bin count:
      - z >= z*: makespan 60 min (start every job at minute 0, node i running bin i).
      - 1 <= z < z*: every plan has makespan >= 120 min. Start minutes are whole minutes, so
        a makespan T < 120 means T <= 119 and every job, ending by T, starts at
        s <= T - 60 <= 59; its run [s, s + 60) then contains minute 59 (s <= 59 < s + 60).
        All jobs therefore run at minute 59, and each node's jobs fit its C cores together:
        a packing into z < z* bins, a contradiction. So "no plan under 2 h" is what a lower
        bound above 60 min proves (the bound rounds up to the 60-minute time grid, see
        `bounds.time_grid`).
      - z = z* - 1 (z* >= 2): the optimum is exactly 120 min: run bins 1 .. z*-1 of an
        optimal packing from minute 0 and bin z* from minute 60 on the first node.
    A plan under 60 min is impossible (every job lasts 60); a 60-min plan on z < z* nodes, or
    a plan under 120 min there, would disprove the published optimum: treat it as a bug.
    """
    if nodes < 1:
        raise ValueError("bin_packing_batch: needs at least one node")
    n = len(bpp.sizes)
    width = len(str(n))
    return {
        "window": {"start": WINDOW_START, "hours": 168.0},
        # n GiB per node and 1 GiB per job: every item could share one node memory-wise.
        "nodes": [{"name": "bin", "count": nodes, "cores": bpp.capacity,
                   "memory_gib": float(n)}],
        "jobs": [{"name": f"item{k:0{width}d}", "cores": s, "memory_gib": 1.0, "hours": 1.0}
                 for k, s in enumerate(bpp.sizes)],
    }


def pcmax_batch(times: tuple[int, ...] | list[int], machines: int) -> dict:
    """The batch of a P||Cmax instance: the optimum makespan in hours equals C*.

    Construction: `machines` identical nodes (speed 1); one job per processing time p_k,
    running p_k hours and asking for every core and all the memory of a node, so no two jobs
    ever overlap on one node. A node's jobs then run one after another and any order without
    idle time is a plan, so plans with makespan T correspond to machine schedules with
    Cmax = T / 60 (minutes to hours; durations are whole hours, 60 p_k minutes exactly).
    The window spans sum_k p_k hours, the one-node serial plan, so no job ever lies past it
    (up to the model's longest window, MAX_OFFSET_HOURS; past it a job is only reported as
    such: the makespan does not depend on the window).
    """
    if machines < 1:
        raise ValueError("pcmax_batch: needs at least one machine")
    width = len(str(len(times)))
    return {
        "window": {"start": WINDOW_START,
                   "hours": float(min(max(1, sum(times)), MAX_OFFSET_HOURS))},
        "nodes": [{"name": "machine", "count": machines, "cores": WHOLE_NODE_CORES,
                   "memory_gib": WHOLE_NODE_MEMORY_GIB}],
        "jobs": [{"name": f"task{k:0{width}d}", "cores": WHOLE_NODE_CORES,
                  "memory_gib": WHOLE_NODE_MEMORY_GIB, "hours": float(p)}
                 for k, p in enumerate(times)],
    }


def graham_lpt_family(m: int) -> tuple[int, ...]:
    """Graham's LPT tight family on m machines: 2m-1, 2m-1, 2m-2, 2m-2, ..., m+1, m+1, m, m, m.

    2m + 1 jobs with LPT makespan 4m - 1 and optimum 3m (R. L. Graham, "Bounds on
    multiprocessing timing anomalies", SIAM J. Appl. Math. 17(2), 1969; the family is quoted
    from memory, the m = 4 values were checked by exhaustive search, see SOURCES.md).
    """
    if m < 2:
        raise ValueError("graham_lpt_family: m >= 2")
    return tuple(t for t in range(2 * m - 1, m, -1) for _ in range(2)) + (m, m, m)
