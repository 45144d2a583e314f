"""Report page size for a 10,000-job plan: the charts' scenes as compact SVG or as matplotlib's SVG.

    .venv/bin/python benchmarks/bench_report.py [--no-write]

The report draws each chart once, as a scene (`assignplan.report.charts`). This measures the
ways the page could show a scene, on the greedy plan of the generator's
large batch (10,000 jobs, 1,000 nodes, seed 3, as in tests/test_report_html.py):
  1. our SVG renderer (`report.svg`): classes, one `rect` per job with a `<title>`;
  2. matplotlib's SVG of the same scenes (`report.png.scene_figure`, `savefig(format="svg")`),
     as the page would embed it: bars as one collection, no hover text;
  3. matplotlib's SVG with one patch per job carrying a gid, and a `<title>` spliced into each
     (what hover text per job costs there).
Prints a markdown table and writes it as the section "## Report page size" of RESULTS.md.
"""

from __future__ import annotations

import argparse
import io
import re
import sys
import time
from html import escape
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from bench_builder import write_section

from assignplan import solve as planner
from assignplan.documents import Batch
from assignplan.expand import expand_batch
from assignplan.generate import batch_doc, generate
from assignplan.instance import build_instance
from assignplan.report import png
from assignplan.report.charts import plan_scenes
from assignplan.report.html import page_budget, render_html_report
from assignplan.report.scene import Rects, Scene, resolve
from assignplan.report.svg import render_svg

SECTION = "## Report page size"
COMMAND = ".venv/bin/python benchmarks/bench_report.py"


def _mpl_svg(scene: Scene, *, hover: bool) -> str:
    """matplotlib's SVG of a scene; with `hover`, job bars as patches with a title each."""
    from matplotlib.patches import Rectangle

    bars = [r for r in scene.items if isinstance(r, Rects) and r.jobs is not None]
    if hover and bars:
        scene = Scene(scene.chart_id, scene.height, scene.label, scene.title,
                      [i for i in scene.items if not any(i is b for b in bars)])
    fig = png.scene_figure(scene)
    titles = {}
    if hover:
        ax = fig.axes[0]
        for r in bars:
            for k, j in enumerate(r.jobs):
                style = resolve(r.classes_of(k))
                ax.add_patch(Rectangle((r.x[k], r.y[k]), r.w[k], r.h[k], facecolor=style.fill,
                                       edgecolor="none", gid=f"job-{j}"))
                titles[f"job-{j}"] = r.titles[k]
    buf = io.StringIO()
    fig.savefig(buf, format="svg")
    text = buf.getvalue()
    text = text[text.index("<svg"):]  # the page embeds the element, not the XML prologue
    if titles:
        text = re.sub(r'<g id="(job-\d+)">',
                      lambda m: f'{m.group(0)}<title>{escape(titles[m.group(1)])}</title>',
                      text)
    return text


def measure() -> list[str]:
    inst = build_instance(expand_batch(Batch.model_validate(batch_doc(generate("large", 3)),
                                                            strict=False)))
    result = planner.solve(inst, "greedy")
    page = render_html_report(inst, result, [])
    ours = {name: render_svg(s) for name, s in plan_scenes(inst, result).items()}
    charts = sum(len(s.encode()) for s in ours.values())
    rest = len(page.encode()) - charts  # everything on the page but the charts
    rows = []
    for what, render in (
        ("scene -> our SVG (classes, `<title>` per job)", lambda s: render_svg(s)),
        ("scene -> matplotlib SVG (one collection)", lambda s: _mpl_svg(s, hover=False)),
        ("scene -> matplotlib SVG, a patch + `<title>` per job",
         lambda s: _mpl_svg(s, hover=True)),
    ):
        t0 = time.perf_counter()
        svgs = {name: render(s) for name, s in plan_scenes(inst, result).items()}
        seconds = time.perf_counter() - t0
        size = rest + sum(len(s.encode()) for s in svgs.values())
        timeline = svgs["timeline"]
        titled = len(re.findall(r"data-job=\"\d+\"[^>]*><title>|<g id=\"job-\d+\"><title>",
                                timeline))
        rows.append(f"| {what} | {size / 1e6:.2f} MB | {len(timeline.encode()) / 1e6:.2f} MB |"
                    f" {titled:,} of {inst.n_jobs:,} | {seconds:.1f} s |")
    budget = page_budget(inst.n_jobs, inst.n_nodes)
    return rows + [f"\nPage budget (`report/html.py` `page_budget`) for this plan:"
                   f" {budget / 1e6:.2f} MB."]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--no-write", action="store_true")
    args = ap.parse_args(argv)
    rows = measure()
    text = "\n".join([
        SECTION, "",
        "The greedy plan of `python -m assignplan.generate --scale large --seed 3` (10,000 jobs,"
        " 1,000 nodes): the whole HTML page, its charts (timeline, utilisation, per node) drawn"
        " from the same scenes by each renderer (tables and cards are the same in every row). The"
        " report uses the first. Render times on the shared 2-CPU machine of the other sections.",
        "",
        "| charts rendered as | page | timeline chart | jobs with hover text | render time |",
        "|---|---:|---:|---:|---:|",
        *rows, "",
        f"Reproduce: `{COMMAND}` (from the repository root).", "",
    ])
    print(text)
    if not args.no_write:
        write_section(text, HERE / "RESULTS.md", SECTION)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
