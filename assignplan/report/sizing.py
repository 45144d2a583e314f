"""The sizing page (`size --report`): makespan against node count, and every probe's verdict.

One chart: per probe, its lower bound and its best plan's makespan (greedy's or the ga's,
whichever is shorter) against the total node count, with the deadline as a line; a table of
the probes beside it. Self-contained like the plan report (inline SVG, no scripts).
"""

from __future__ import annotations

from html import escape
from pathlib import Path

import numpy as np

from assignplan import __version__
from assignplan.files import atomic_write_text
from assignplan.report.axes import LEFT, PLOT, Key, legend, y_grid
from assignplan.report.html import PAGE_CSS
from assignplan.report.scene import Dots, Line, Scene, Text, stylesheet
from assignplan.report.svg import render_svg
from assignplan.units import number

PLOT_HEIGHT = 200.0


def sizing_scene(record: dict) -> Scene:
    """The chart of a `sizing.size_record`: hours against total nodes."""
    probes = record["probes"]
    nodes = np.array([p["nodes"] for p in probes], dtype=float)
    bound = np.array([np.nan if p["lower_bound_h"] is None else p["lower_bound_h"]
                      for p in probes])
    plans = [[v for v in (p["greedy_h"], p["ga_h"]) if v is not None] for p in probes]
    best = np.array([min(v) if v else np.nan for v in plans])
    deadline = record["deadline_h"]
    shown = np.concatenate([bound[~np.isnan(bound)], best[~np.isnan(best)], [deadline]])
    lo, hi = 0.0, float(shown.max()) * 1.08 if len(shown) else 1.0
    n0 = float(nodes.min()) if len(nodes) else 0.0
    n1 = max(float(nodes.max()) if len(nodes) else 1.0, n0 + 1)
    items, below = legend([Key("lower bound (counts above the deadline: ruled out)",
                               "gpudot", "rect"),
                           Key("best plan found (greedy or ga)", "nodebar", "rect"),
                           Key("deadline", "winend", "line")], LEFT, 4)
    top = below + 10
    bottom = top + PLOT_HEIGHT

    def x(values: np.ndarray) -> np.ndarray:
        return LEFT + 6 + (values - n0) / (n1 - n0) * (PLOT - 12)

    def y(values: np.ndarray) -> np.ndarray:
        return bottom - PLOT_HEIGHT * (np.minimum(values, hi) - lo) / (hi - lo)

    items += y_grid(top, PLOT_HEIGHT, list(np.linspace(lo, hi, 5)), lo, hi, "{:.0f} h")
    dy = float(y(np.array([deadline]))[0])
    items.append(Line(LEFT, dy, LEFT + PLOT, dy, "winend", f"deadline {deadline:g} h"))
    has_bound, has_plan = ~np.isnan(bound), ~np.isnan(best)
    items.append(Dots(x(nodes[has_bound]), y(bound[has_bound]), 4.0, "gpudot"))
    items.append(Dots(x(nodes[has_plan]), y(best[has_plan]), 3.0, "nodebar"))
    items += [Text(LEFT + 6, bottom + 18, f"{n0:g} nodes", "tick"),
              Text(LEFT + PLOT - 30, bottom + 18, f"{n1:g}", "tick")]
    return Scene("sizing", bottom + 28, "Makespan against node count",
                 "Makespan against node count", items)


def write_sizing_report(path: Path | str, record: dict, title: str) -> int:
    """The sizing page, written atomically; returns the bytes written."""
    rows = "".join(
        "<tr><td>" + escape(", ".join(f"{g} {c}" for g, c in p["counts"].items()))
        + f"</td><td>{p['nodes']}</td><td>{number(p['lower_bound_h'], 2)}</td>"
        f"<td>{number(p['greedy_h'], 2)}</td><td>{number(p['ga_h'], 2)}</td>"
        f"<td>{escape(p['verdict'])}</td></tr>" for p in record["probes"])
    found = record["found"]
    lede = ("no count tried was confirmed by a plan" if found is None else
            "found " + escape(", ".join(f"{g} {c}" for g, c in found.items()))
            + f" ({escape(record['found_verdict'])})")
    text = "".join([
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{escape(title)}</title><style>{PAGE_CSS}{stylesheet()}</style></head><body><main>",
        f"<h1>{escape(title)}</h1>",
        f'<p class="lede">deadline {escape(str(record["deadline"]))}'
        f" ({number(record['deadline_h'], 2)} h from the window start) · {lede}</p>",
        f"<section><h2>Makespan against node count</h2>{render_svg(sizing_scene(record))}"
        "</section>",
        "<section><h2>Probes</h2><table><thead><tr><th>counts</th><th>nodes</th>"
        "<th>lower bound h</th><th>greedy h</th><th>ga h</th><th>verdict</th></tr></thead>"
        f"<tbody>{rows}</tbody></table></section>",
        f"<footer>assignplan {escape(__version__)} · a count \"confirmed by a plan\" has a"
        " plan that ends in time; one \"ruled out by the bound\" has none; the others are"
        " undecided.</footer>",
        "</main></body></html>\n",
    ])
    atomic_write_text(path, text)
    return len(text.encode("utf-8"))
