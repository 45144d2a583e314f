"""The HTML report and its charts: figures checked against the plan, self-contained page, PNGs."""

from __future__ import annotations

import functools
import json
import re
import xml.etree.ElementTree as ET
from collections import Counter
from dataclasses import replace
from datetime import datetime, timedelta
from html import escape
from itertools import combinations
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
from typer.testing import CliRunner

from assignplan import solve as planner
from assignplan.check import Violation, check_plan
from assignplan.cli import app
from assignplan.documents import Batch, HistoryRow, PlanDoc
from assignplan.expand import expand_batch, load_batch
from assignplan.instance import Instance, build_instance
from assignplan.metrics import summary
from assignplan.plan import PlanResult, make_result, result_from_doc, to_plan_doc
from assignplan.reading import load_plan
from assignplan.report.axes import LEFT, PLOT, grid_step, time_ticks
from assignplan.report.charts import convergence_scene, plan_scenes, utilisation_scene
from assignplan.report.figures import (
    NODE_ROW_LIMIT,
    binned_curve,
    stack_offsets,
    utilisation_curve,
    utilisation_curves,
)
from assignplan.report.html import page_budget, render_html_report, write_html_report
from assignplan.report.palette import OKABE_ITO, PALETTE, group_colours
from assignplan.report.png import scene_figure, write_png_charts
from assignplan.report.scene import Rects, Scene, Text
from assignplan.report.svg import render_svg
from assignplan.report.timeline import BAR_PAD, ROW_PX, timeline_scene
from assignplan.units import clock

ROOT = Path(__file__).resolve().parents[1]
WEEK = ROOT / "examples" / "institute-week.json"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG spec (W3C / ISO/IEC 15948), section 5.2
BUDGET_10K = 5_000_000  # bytes: the page budget for a 10,000-job plan (html.py docstring)
PASSED: list[Violation] = []  # what the checker says of a plan that passes it


def timeline_svg(inst: Instance, result: PlanResult) -> str:
    return render_svg(timeline_scene(inst, result))


# --------------------------------------------------------------------------- plans


def _instance(doc: dict) -> Instance:
    return build_instance(expand_batch(Batch.model_validate(doc, strict=False)))


def sequential_plan(inst: Instance) -> PlanResult:
    """A plan built without any method: each job on its first eligible node, one after another
    in `inst.order` (which respects follows), so no two jobs on a node overlap."""
    free = np.zeros(inst.n_nodes, dtype=np.int64)
    end = np.zeros(inst.n_jobs, dtype=np.int64)
    assign = np.argmax(inst.eligible, axis=1)
    start = np.zeros(inst.n_jobs, dtype=np.int64)
    for j in inst.order:
        i = assign[j]
        preds = inst.predecessors(j)
        s = max(free[i], inst.ready[j], end[preds].max() if len(preds) else 0)
        start[j], end[j] = s, s + inst.duration[j, i]
        free[i] = end[j]
    return make_result(inst, "sequential", assign, start, lower_bound=0)


@functools.cache
def week() -> tuple[Instance, PlanResult]:
    inst = build_instance(load_batch(WEEK))
    return inst, planner.solve(inst, "greedy")


@functools.cache
def large_plan() -> tuple[Instance, PlanResult]:
    """A real greedy plan of the benchmark generator's 10,000-job, 1,000-node batch."""
    from assignplan.generate import batch_doc, generate

    inst = _instance(batch_doc(generate("large", 3)))
    assert inst.n_jobs == 10_000
    return inst, planner.solve(inst, "greedy")


def _tiny() -> tuple[Instance, PlanResult]:
    """Two nodes, three jobs at fixed minutes, so the curve can be worked out by hand."""
    inst = _instance({
        "window": {"start": "2026-12-07T08:00:00", "hours": 4},
        "nodes": [{"name": "n", "count": 2, "cores": 8, "memory_gib": 16, "gpus": 1}],
        "jobs": [
            {"name": "a", "cores": 2, "memory_gib": 1, "hours": 1},
            {"name": "b", "cores": 3, "memory_gib": 2, "hours": 1, "gpus": 1},
            {"name": "c", "cores": 1, "memory_gib": 4, "hours": 1},
        ],
    })
    return inst, make_result(inst, "by-hand", [0, 0, 1], [0, 30, 60], lower_bound=60)


def _random_plan(inst: Instance, seed: int) -> PlanResult:
    """Any assignment and starts (feasibility is irrelevant to the curve's bookkeeping)."""
    rng = np.random.default_rng(seed)
    assign = np.array([rng.choice(np.flatnonzero(row)) for row in inst.eligible])
    start = rng.integers(0, inst.window_minutes, inst.n_jobs)
    return make_result(inst, "random", assign, start, lower_bound=0)


# --------------------------------------------------------------------------- the curve


def test_curve_by_hand():
    inst, result = _tiny()
    times, busy = utilisation_curve(inst, result)
    # a: 2 cores [0, 60) n0; b: 3 cores + 1 GPU [30, 90) n0; c: 1 core [60, 120) n1
    assert times.tolist() == [0, 30, 60, 90, 120]
    assert busy[:, 0].tolist() == [2, 5, 4, 1, 0]
    assert busy[:, 1].tolist() == [1024, 3072, 6144, 4096, 0]
    assert busy[:, 2].tolist() == [0, 1, 1, 0, 0]
    assert times.dtype == np.int64 and busy.dtype == np.float64


def _integral(times: np.ndarray, busy: np.ndarray) -> np.ndarray:
    return (busy[:-1] * np.diff(times)[:, None]).sum(axis=0)


@pytest.mark.parametrize("which", ["week", "sequential", "random-0", "random-1"])
def test_curve_integral_is_the_plans_resource_minutes(which):
    inst, result = week()
    if which == "sequential":
        result = sequential_plan(inst)
    elif which.startswith("random"):
        result = _random_plan(inst, int(which[-1]))
    times, busy = utilisation_curve(inst, result)
    work = (inst.demand * (result.end - result.start)[:, None]).sum(axis=0)
    # Exact to the minute: every term is a whole number well inside float64's exact range.
    assert _integral(times, busy).tolist() == work.astype(float).tolist()
    assert busy[-1].tolist() == [0, 0, 0]
    assert (busy >= 0).all()


def test_curve_agrees_with_a_minute_by_minute_count():
    inst, result = week()
    times, busy = utilisation_curve(inst, result)
    for t in range(0, result.makespan, 37):  # every 37th minute: steps fall anywhere
        running = (result.start <= t) & (t < result.end)
        k = np.searchsorted(times, t, side="right") - 1
        assert busy[k].tolist() == inst.demand[running].sum(axis=0).astype(float).tolist()


def test_curve_of_some_nodes_adds_up_to_the_whole():
    inst, result = week()
    kinds = np.array(inst.node_groups)
    parts = sum(_integral(*utilisation_curve(inst, result, nodes=kinds == k))
                for k in set(inst.node_groups))
    assert parts.tolist() == _integral(*utilisation_curve(inst, result)).tolist()


def test_binned_curve_keeps_the_area():
    inst, result = week()
    times, busy = utilisation_curve(inst, result)
    edges, mean = binned_curve(times, busy, 0, result.makespan, 500)
    area = (mean * np.diff(edges)[:, None]).sum(axis=0)
    np.testing.assert_allclose(area, _integral(times, busy), rtol=1e-9)
    assert mean[:, 0].max() <= busy[:, 0].max() + 1e-9


def test_core_utilisation_from_the_curve_matches_the_summary():
    inst, result = week()
    times, busy = utilisation_curve(inst, result)
    available_minutes = Instance.available_minutes

    capacity = inst.capacity[:, 0] @ available_minutes(inst, result.makespan)
    pct = 100 * _integral(times, busy)[0] / capacity
    assert round(pct, 2) == summary(inst, result)["core_utilisation_pct"]


# --------------------------------------------------------------------------- timeline


def _bars(chart: str) -> list[ET.Element]:
    return [e for e in ET.fromstring(chart).iter("rect") if "data-job" in e.attrib]


@pytest.mark.parametrize("plan", ["week", "sequential"])
def test_timeline_has_one_bar_per_job(plan):
    inst, result = week()
    if plan == "sequential":
        result = sequential_plan(inst)
    bars = _bars(timeline_svg(inst, result))
    assert sorted(int(b.get("data-job")) for b in bars) == list(range(inst.n_jobs))


def test_bars_span_start_to_end_with_hover_text():
    inst, result = week()
    scale = PLOT / max(result.makespan, inst.window_minutes)
    for bar in _bars(timeline_svg(inst, result)):
        j = int(bar.get("data-job"))
        x, w = float(bar.get("x")), float(bar.get("width"))
        assert x == pytest.approx(LEFT + result.start[j] * scale, abs=0.06)
        assert x + w == pytest.approx(LEFT + result.end[j] * scale, abs=0.12)
        title = bar.find("title").text
        assert title.startswith(f"{inst.job_names[j]} on {inst.node_names[result.assign[j]]} ")
        assert f"{inst.demand[j, 0]} cores" in title


def test_bar_height_is_the_share_of_the_nodes_cores():
    inst, result = week()
    unit_inner = ROW_PX * (1 - 2 * BAR_PAD)
    for bar in _bars(timeline_svg(inst, result)):
        j = int(bar.get("data-job"))
        share = inst.demand[j, 0] / inst.capacity[result.assign[j], 0]
        assert float(bar.get("height")) == pytest.approx(max(share * unit_inner, 0.6), abs=0.06)


def test_stacked_bars_do_not_overlap_when_they_fit():
    # node of 8 cores: a 4-core job [0, 10), a 4-core job [0, 20), then a 4-core job [10, 30)
    offset = stack_offsets(np.zeros(3, np.int64), np.array([0, 0, 10]), np.array([10, 20, 30]),
                           np.array([4, 4, 4]), np.array([8]))
    assert sorted(offset[:2].tolist()) == [0, 4]
    assert offset[2] == offset[0]  # takes the stretch the first job left


def test_late_jobs_are_marked():
    inst, result = week()
    late = {int(b.get("data-job")) for b in _bars(timeline_svg(inst, result))
            if "late" in b.get("class").split()}
    expected = np.flatnonzero(result.end > inst.due)
    assert late == set(expected.tolist())
    assert len(late) == summary(inst, result)["late_jobs"]


def test_job_groups_share_a_colour_and_the_palette_is_okabe_ito():
    # Okabe & Ito, "Color Universal Design" (2002): the published hex values of the 7 hues.
    published = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    assert set(OKABE_ITO) == published
    assert PALETTE[:7] == OKABE_ITO
    assert len(set(PALETTE)) == len(PALETTE) == 20
    inst, result = week()
    colour_of_group: dict[str, set[str]] = {}
    for bar in _bars(timeline_svg(inst, result)):
        group = inst.job_groups[int(bar.get("data-job"))]
        colour_of_group.setdefault(group, set()).update(
            c for c in bar.get("class").split() if re.fullmatch(r"c\d+", c))
    assert all(len(c) == 1 for c in colour_of_group.values())
    assert len(set(group_colours(inst.job_groups).values())) == len(set(inst.job_groups))


def test_maintenance_and_window_end_are_drawn():
    inst, result = week()
    root = ET.fromstring(timeline_svg(inst, result))
    maint = [e for e in root.iter("rect") if e.get("class") == "maint"]
    assert len(maint) == len(inst.maint_start) > 0
    assert [e for e in root.iter("line") if e.get("class") == "winend"]


# --------------------------------------------------------------------------- the page


def test_page_is_self_contained():
    inst, result = week()
    page = render_html_report(inst, result, PASSED)
    assert not re.search(r"https?://", page)
    assert not re.search(r"<(script|link|img|iframe|object)\b", page, re.I)
    assert "@import" not in page and "@font-face" not in page
    assert set(re.findall(r"url\((.)", page)) <= {"#"}  # only in-page references


def test_page_shows_the_summary_figures():
    inst, result = week()
    s = summary(inst, result)
    page = render_html_report(inst, result, PASSED, title="Week 50 <draft>")
    assert "<title>Week 50 &lt;draft&gt;</title>" in page
    assert f"{s['makespan_h']:,.1f} h" in page and f"gap {s['gap_pct']:,.2f} %" in page
    assert f"{s['core_utilisation_pct']:,.1f} %" in page
    for chart in ("timeline", "utilisation", "node-utilisation"):
        assert f'<svg id="{chart}"' in page
    assert 'id="convergence"' not in page  # greedy has no history
    assert "set by pairwise-conflicting jobs" in page  # the week's bound: its clique part
    assert s["lower_bound_set_by"] == "clique"


def test_bound_parts_survive_the_plan_file():
    """`report` reads PLAN.json back: the bound's parts, and so the card's "set by", with it."""
    inst, result = week()
    back = result_from_doc(inst, PlanDoc.model_validate_json(
        to_plan_doc(inst, result).model_dump_json()))
    assert back.bound_parts == result.bound_parts and back.lower_bound == result.lower_bound


def test_every_job_is_in_the_job_table():
    inst, result = week()
    page = render_html_report(inst, result, PASSED)
    table = page[page.index('<table id="jobs">'):]
    table = table[: table.index("</table>")]
    rows = re.findall(r"<tr(?: class=\"l\")?><td>([^<]+)<td>([^<]+)<td>", table)
    assert sorted(r[0] for r in rows) == sorted(inst.job_names)
    node_of = {inst.job_names[j]: inst.node_names[i] for j, i in enumerate(result.assign)}
    assert all(node_of[job] == node for job, node in rows)


def test_convergence_is_drawn_when_there_is_history(tmp_path):
    inst, result = week()
    rows = [HistoryRow(generation=g, evaluations=40 * g, best_makespan_h=70 - g,
                       median_makespan_h=75 - g / 2) for g in range(6)]
    with_history = replace(result, history=rows)
    chart = render_svg(convergence_scene(with_history))
    curves = [e for e in ET.fromstring(chart).iter("path") if "curve" in e.get("class")]
    assert [len(re.findall(r"[MLHV]", e.get("d"))) for e in curves] == [6, 6]
    assert 'id="convergence"' in render_html_report(inst, with_history, PASSED)
    files = write_png_charts(tmp_path, inst, with_history)
    assert (tmp_path / "convergence.png") in files


def test_write_is_atomic_and_returns_the_bytes(tmp_path):
    inst, result = week()
    target = tmp_path / "report.html"
    target.write_text("old")
    n = write_html_report(target, inst, result, PASSED)
    assert n == target.stat().st_size and 10_000 < n <= page_budget(inst.n_jobs, inst.n_nodes)
    assert target.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]  # no temp file left


def test_failed_write_leaves_the_old_file(tmp_path, monkeypatch):
    inst, result = week()
    target = tmp_path / "report.html"
    target.write_text("old")

    def broken(*_args, **_kwargs):
        raise RuntimeError("disk full")

    monkeypatch.setattr("assignplan.report.html.render_html_report", broken)
    with pytest.raises(RuntimeError):
        write_html_report(target, inst, result, PASSED)
    assert target.read_text() == "old"


# --------------------------------------------------------------------------- PNG files


def _check_png(path: Path) -> np.ndarray:
    assert path.read_bytes()[:8] == PNG_SIGNATURE
    image = mpimg.imread(path)
    assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 400
    return image


def test_png_charts_are_valid_non_blank_pictures(tmp_path):
    inst, result = week()
    files = write_png_charts(tmp_path / "charts", inst, result)
    assert [p.name for p in files] == ["timeline.png", "utilisation.png", "node-utilisation.png"]
    for path in files:
        image = _check_png(path)[..., :3]
        colours = np.unique(image.reshape(-1, 3), axis=0)
        assert len(colours) > 8, path.name
        assert (image.min(axis=2) < 0.9).mean() > 0.01, path.name  # some ink on the page


# --------------------------------------------------------------------------- 10,000 jobs


@pytest.mark.slow
def test_ten_thousand_jobs_stay_readable_and_under_budget(tmp_path):
    inst, result = large_plan()
    assert inst.n_nodes > NODE_ROW_LIMIT  # the grouped view is the one under test
    n = write_html_report(tmp_path / "large.html", inst, result, PASSED)
    assert n <= min(BUDGET_10K, page_budget(inst.n_jobs, inst.n_nodes))
    page = (tmp_path / "large.html").read_text(encoding="utf-8")
    chart = page[page.index('<svg id="timeline"'):]
    chart = chart[: chart.index("</svg>") + 6]
    assert 'class="chart grouped"' in chart
    bars = _bars(chart)
    assert sorted(int(b.get("data-job")) for b in bars) == list(range(inst.n_jobs))
    assert float(ET.fromstring(chart).get("viewBox").split()[3]) < 2500  # height stays bounded


# --------------------------------------------------------------------------- time ticks


@pytest.mark.parametrize(("days", "step"), [(0.2, 60), (2.9, 60), (3.0, 360), (10.0, 360),
                                            (10.5, 1440), (40.0, 1440)])
def test_gridlines_follow_the_span(days, step):
    assert grid_step(round(days * 24 * 60)) == step


@pytest.mark.parametrize("hours", [4, 30, 71, 80, 168, 240, 400])
def test_time_ticks_sit_on_clock_hours_and_read_as_units_clock(hours):
    start = datetime(2026, 12, 7, 8, 30)
    ticks = time_ticks(start, hours * 60)
    assert ticks.grid and all(0 <= m <= hours * 60 for m in ticks.grid)
    assert set(np.diff(ticks.grid).tolist()) <= {ticks.step}
    assert all((start + timedelta(minutes=m)).minute == 0 for m in ticks.grid)
    assert ticks.labels and {m for m, _ in ticks.labels} <= set(ticks.grid)
    for minute, text in ticks.labels:
        full = clock(start, minute)
        date, time = full.rsplit(" ", 1)
        assert text in (full, date, time)
        assert (text == date) == (time == "00:00")  # the date at midnight, the time elsewhere


def _texts(chart: str, cls: str) -> list[str]:
    return [e.text for e in ET.fromstring(chart).iter("text") if e.get("class") == cls]


def test_a_plan_of_hours_gets_hour_ticks_on_the_page_and_in_the_pngs():
    inst, result = _tiny()  # a 4 h window from Mon 07 Dec 08:00: no midnight to label
    hours = ["09:00", "10:00", "11:00"]
    for scene in (timeline_scene(inst, result), utilisation_scene(inst, result)):
        page_ticks = _texts(render_svg(scene), "tick")
        assert page_ticks[0] == "Mon 07 Dec 08:00" and set(hours) <= set(page_ticks)
        png_texts = {t.get_text() for t in scene_figure(scene).axes[0].texts}
        assert set(page_ticks) <= png_texts


# --------------------------------------------------------------------------- one drawing


def _scene_texts(scene: Scene) -> Counter:
    return Counter(item.text for item in scene.items if isinstance(item, Text))


def test_png_and_svg_are_renderings_of_the_same_scene():
    from matplotlib.collections import PolyCollection
    from matplotlib.patches import Rectangle

    inst, result = week()
    for name, scene in plan_scenes(inst, result).items():
        rects = [r for r in scene.items if isinstance(r, Rects)]
        hatched = sum(len(r.x) for r in rects if "maint" in str(r.classes).split())
        ax = scene_figure(scene).axes[0]
        drawn = Counter(t.get_text() for t in ax.texts)
        drawn[scene.title] -= 1  # the PNG's heading; the page has its own
        assert +drawn == _scene_texts(scene), name
        polygons = sum(len(c.get_paths()) for c in ax.collections
                       if isinstance(c, PolyCollection))
        assert polygons == sum(len(r.x) for r in rects) - hatched, name
        assert sum(isinstance(p, Rectangle) and bool(p.get_hatch()) for p in ax.patches) == hatched
        svg_root = ET.fromstring(render_svg(scene))
        assert len([e for e in svg_root.iter("rect") if e.get("class")]) == polygons + hatched
        assert Counter(e.text for e in svg_root.iter("text")) == _scene_texts(scene), name


# --------------------------------------------------------------------------- PNG legend


def test_png_timeline_has_a_legend_of_groups_and_marks(tmp_path):
    inst, result = week()
    scene = timeline_scene(inst, result)
    drawn = {t.get_text() for t in scene_figure(scene).axes[0].texts}
    sizes = Counter(inst.job_groups)
    assert len(sizes) <= len(PALETTE)  # every group is named
    assert {f"{g} ({n:,})" for g, n in sizes.items()} <= drawn
    assert {"maintenance", "late job (▼ at its end)", "window end", "makespan"} <= drawn
    # and the swatches are in the picture: each group's colour inside the legend's band
    (path,) = [p for p in write_png_charts(tmp_path, inst, result) if p.name == "timeline.png"]
    image = (mpimg.imread(path)[..., :3] * 255).round()
    from assignplan.report.png import SCALE, TITLE_PX

    keys = [r for r in scene.items if isinstance(r, Rects) and "key" in str(r.classes).split()]
    band_bottom = max(float(r.y[0] + r.h[0]) for r in keys)
    band = image[: int((TITLE_PX + band_bottom) * SCALE)].reshape(-1, 3)
    for colour in group_colours(inst.job_groups).values():
        rgb = np.array([int(colour[k : k + 2], 16) for k in (1, 3, 5)])
        assert (np.abs(band - rgb).max(axis=1) <= 1).sum() >= 50, colour  # a swatch, not a speck


def test_legend_names_the_largest_groups_each_in_its_own_colour():
    # 25 groups, the small ones listed first: the 20 largest get the 20 colours.
    jobs = [{"name": f"small{k}", "cores": 1, "memory_gib": 1, "hours": 1} for k in range(5)]
    jobs += [{"name": f"big{k}", "count": k + 2, "cores": 1, "memory_gib": 1, "hours": 1}
             for k in range(20)]
    inst = _instance({"window": {"start": "2026-12-07T08:00:00", "hours": 24},
                      "nodes": [{"name": "n", "count": 4, "cores": 64, "memory_gib": 256}],
                      "jobs": jobs})
    scene = timeline_scene(inst, sequential_plan(inst))
    keys = [r.classes.split() for r in scene.items
            if isinstance(r, Rects) and "key" in str(r.classes).split()]
    colours = [c for k in keys for c in k if re.fullmatch(r"c\d+", c)]
    assert len(colours) == len(set(colours)) == 20
    texts = _scene_texts(scene)
    assert all(f"big{k} ({k + 2})" in texts for k in range(20))
    assert not any(t.startswith("small") for t in texts)
    assert any(t.startswith("and 5 smaller groups (5 jobs)") for t in texts)


# --------------------------------------------------------------------------- colours
# The colour difference is computed here from the published formulas, independently of the
# palette module: sRGB to CIE XYZ (IEC 61966-2-1, D65), XYZ to CIELAB (CIE 15:2004), and
# CIEDE2000 (G. Sharma, W. Wu, E. N. Dalal, "The CIEDE2000 color-difference formula:
# implementation notes, supplementary test data, and mathematical observations", Color
# Research & Application 30(1), 2005).

SRGB_TO_XYZ = np.array([[0.4124564, 0.3575761, 0.1804375],
                        [0.2126729, 0.7151522, 0.0721750],
                        [0.0193339, 0.1191920, 0.9503041]])
# Machado, Oliveira & Fernandes, "A physiologically-based model for simulation of color vision
# deficiency", IEEE TVCG 15(6), 2009: severity 1.0, applied to linear RGB. Values from memory,
# checked against public copies of the table; the grey test below guards the transcription.
MACHADO_2009 = {
    "normal": np.eye(3),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
}
# Sharma, Wu & Dalal (2005), Table 1: (L*a*b* 1, L*a*b* 2, ΔE00). Values from memory, checked
# against a public copy of the table.
SHARMA_PAIRS = [
    ((50, 2.6772, -79.7751), (50, 0, -82.7485), 2.0425),
    ((50, 3.1571, -77.2803), (50, 0, -82.7485), 2.8615),
    ((50, -1.3802, -84.2814), (50, 0, -82.7485), 1.0000),
    ((50, 0, 0), (50, -1, 2), 2.3669),
    ((50, 2.49, -0.001), (50, -2.49, 0.0009), 7.1792),
    ((50, 2.49, -0.001), (50, -2.49, 0.0011), 7.2195),
    ((50, -0.001, 2.49), (50, 0.0009, -2.49), 4.8045),
    ((50, 2.5, 0), (73, 25, -18), 27.1492),
    ((50, 2.5, 0), (56, -27, -3), 31.9030),
    ((60.2574, -34.0099, 36.2677), (60.4626, -34.1751, 39.4387), 1.2644),
    ((22.7233, 20.0904, -46.694), (23.0331, 14.973, -42.5619), 2.0373),
    ((2.0776, 0.0795, -1.135), (0.9033, -0.0636, -0.5514), 0.9082),
]
# Our floor for "distinct": ΔE00 of about 1 is just noticeable side by side; 7.5 is several
# times that (a rule of thumb of ours, the most twenty lightness steps of seven hues reach).
MIN_DE00 = 7.5


def _linear(rgb: np.ndarray) -> np.ndarray:
    return np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)


def _lab_of_linear(linear: np.ndarray) -> np.ndarray:
    xyz = SRGB_TO_XYZ @ linear / SRGB_TO_XYZ.sum(axis=1)  # relative to the D65 white
    eps = (6 / 29) ** 3
    f = np.where(xyz > eps, np.cbrt(xyz), xyz / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def _seen_lab(hex_colour: str, vision: str) -> np.ndarray:
    rgb = np.array([int(hex_colour[k : k + 2], 16) for k in (1, 3, 5)]) / 255
    return _lab_of_linear(np.clip(MACHADO_2009[vision] @ _linear(rgb), 0, 1))


def _ciede2000(lab1, lab2) -> float:
    (l1, a1, b1), (l2, a2, b2) = lab1, lab2
    c_mean = (np.hypot(a1, b1) + np.hypot(a2, b2)) / 2
    g = 0.5 * (1 - np.sqrt(c_mean**7 / (c_mean**7 + 25.0**7)))
    a1p, a2p = (1 + g) * a1, (1 + g) * a2
    c1p, c2p = np.hypot(a1p, b1), np.hypot(a2p, b2)
    h1p = np.degrees(np.arctan2(b1, a1p)) % 360 if c1p else 0.0
    h2p = np.degrees(np.arctan2(b2, a2p)) % 360 if c2p else 0.0
    dh = 0.0 if c1p * c2p == 0 else (h2p - h1p + 180) % 360 - 180
    d_hue = 2 * np.sqrt(c1p * c2p) * np.sin(np.radians(dh / 2))
    l_mean, cp_mean = (l1 + l2) / 2, (c1p + c2p) / 2
    if c1p * c2p == 0:
        h_mean = h1p + h2p
    elif abs(h1p - h2p) <= 180:
        h_mean = (h1p + h2p) / 2
    else:
        h_mean = (h1p + h2p + 360) / 2 if h1p + h2p < 360 else (h1p + h2p - 360) / 2
    t = (1 - 0.17 * np.cos(np.radians(h_mean - 30)) + 0.24 * np.cos(np.radians(2 * h_mean))
         + 0.32 * np.cos(np.radians(3 * h_mean + 6)) - 0.20 * np.cos(np.radians(4 * h_mean - 63)))
    s_l = 1 + 0.015 * (l_mean - 50) ** 2 / np.sqrt(20 + (l_mean - 50) ** 2)
    s_c, s_h = 1 + 0.045 * cp_mean, 1 + 0.015 * cp_mean * t
    r_t = (-np.sin(np.radians(60 * np.exp(-(((h_mean - 275) / 25) ** 2))))
           * 2 * np.sqrt(cp_mean**7 / (cp_mean**7 + 25.0**7)))
    dl, dc, dhh = (l2 - l1) / s_l, (c2p - c1p) / s_c, d_hue / s_h
    return float(np.sqrt(dl**2 + dc**2 + dhh**2 + r_t * dc * dhh))


@pytest.mark.parametrize(("lab1", "lab2", "expected"), SHARMA_PAIRS)
def test_ciede2000_reproduces_the_published_pairs(lab1, lab2, expected):
    assert _ciede2000(lab1, lab2) == pytest.approx(expected, abs=1e-4)
    assert _ciede2000(lab2, lab1) == pytest.approx(expected, abs=1e-4)


def test_colour_conversions_keep_known_values():
    # sRGB red in CIELAB (D65): (53.24, 80.09, 67.20), as in the usual published calculators
    # (value from memory); white is L* 100; a CVD simulation leaves greys grey.
    np.testing.assert_allclose(_seen_lab("#FF0000", "normal"), [53.24, 80.09, 67.20], atol=0.01)
    np.testing.assert_allclose(_seen_lab("#FFFFFF", "normal"), [100, 0, 0], atol=1e-6)
    for vision, matrix in MACHADO_2009.items():
        np.testing.assert_allclose(matrix.sum(axis=1), 1, atol=2e-6, err_msg=vision)


@pytest.mark.parametrize("vision", list(MACHADO_2009))
def test_twenty_job_groups_get_distinct_colours(vision):
    colours = list(group_colours([f"group-{k}" for k in range(20)]).values())
    assert colours == list(PALETTE)
    seen = [_seen_lab(c, vision) for c in colours]
    worst = min((_ciede2000(seen[a], seen[b]), colours[a], colours[b])
                for a, b in combinations(range(20), 2))
    assert worst[0] >= MIN_DE00, worst


def test_beyond_twenty_groups_colours_repeat():
    colours = group_colours([f"group-{k}" for k in range(25)])
    assert [colours[f"group-{k}"] for k in range(20, 25)] == list(PALETTE[:5])


# --------------------------------------------------------------------------- utilisation


@pytest.mark.parametrize("which", ["week", "sequential"])
def test_utilisation_curves_mean_over_the_makespan_is_the_cards(which):
    inst, result = week()
    if which == "sequential":
        result = sequential_plan(inst)
    curves = utilisation_curves(inst, result)
    inside = curves.times[:-1] < result.makespan
    span = np.diff(curves.times)[inside, None]
    mean = (curves.busy_pct[:-1][inside] * span).sum(axis=0) / result.makespan
    available = (curves.available_pct[:-1][inside] * span).sum(axis=0) / result.makespan
    s = summary(inst, result)
    for r, key in enumerate(("core", "memory", "gpu")):
        assert mean[r] == pytest.approx(s[f"{key}_utilisation_pct"], abs=0.006), key
        assert available[r] == pytest.approx(100.0)
    if which == "week":  # a feasible plan never uses more than is available
        assert (curves.busy_pct <= curves.available_pct + 1e-9).all()


def _path_points(d: str) -> np.ndarray:
    points, x, y = [], 0.0, 0.0
    for cmd, args in re.findall(r"([MLHVZ])([^MLHVZ]*)", d):
        nums = [float(v) for v in re.findall(r"-?[\d.]+", args)]
        if cmd in "ML":
            x, y = nums
        elif cmd == "H":
            x = nums[0]
        elif cmd == "V":
            y = nums[0]
        points.append((x, y))
    return np.array(points)


def test_drawn_utilisation_curve_agrees_with_the_cards():
    """Read the curve back from the SVG the page shows, by its own axis labels."""
    inst, result = week()
    root = ET.fromstring(render_svg(utilisation_scene(inst, result)))
    y_of = {e.text: float(e.get("y")) for e in root.iter("text") if e.get("class") == "ylab"}
    y0, y100 = y_of["0 %"], y_of["100 %"]
    mk_x = LEFT + PLOT * result.makespan / max(result.makespan, inst.window_minutes)
    s = summary(inst, result)
    for r, key in enumerate(("core", "memory", "gpu")):
        (path,) = [e for e in root.iter("path") if e.get("class") == f"curve res{r}"]
        pts = _path_points(path.get("d"))
        x0, x1 = np.minimum(pts[:-1, 0], mk_x), np.minimum(pts[1:, 0], mk_x)
        pct = 100 * (y0 - pts[:-1, 1]) / (y0 - y100)
        mean = float(((x1 - x0) * pct).sum() / (mk_x - LEFT))
        assert mean == pytest.approx(s[f"{key}_utilisation_pct"], abs=0.1), key


def test_page_says_what_utilisation_is_measured_against():
    inst, result = week()
    page = render_html_report(inst, result, PASSED)
    assert "as a share of the capacity available on average over the makespan" in page
    assert "nodes in maintenance taken out" in page


# --------------------------------------------------------------------------- the check


def test_a_plan_failing_the_check_says_so_before_anything_else():
    inst, result = week()
    violations = [Violation("capacity", f"capacity exceeded on node cpu-{k}") for k in range(7)]
    violations.insert(1, Violation("before_ready", "job <x> starts before it is ready"))
    page = render_html_report(inst, result, violations)
    banner = page[page.index('<div class="banner fail"'):]
    banner = banner[: banner.index("</div>")]
    assert page.index('<div class="banner fail"') < page.index('<div class="cards">')
    assert "This plan FAILS the independent check: 8 violations</b> (capacity 7, before ready 1)"\
        in banner
    quoted = re.findall(r"<li>(.*?)</li>", banner)
    assert quoted[:5] == ["capacity exceeded on node cpu-0", "job &lt;x&gt; starts before it"
                          " is ready", *(f"capacity exceeded on node cpu-{k}" for k in (1, 2, 3))]
    assert "and 3 more violations" in quoted[5]
    assert "passes the independent check" not in page


def test_a_plan_passing_the_check_says_so():
    inst, result = week()
    page = render_html_report(inst, result, PASSED)
    assert '<div class="banner ok" id="check"><b>The plan passes the independent check' in page
    assert "FAILS" not in page


SMALL = ROOT / "examples" / "small.json"


def test_report_command_runs_the_checker(tmp_path):
    runner = CliRunner()
    plan = tmp_path / "plan.json"
    solved = runner.invoke(app, ["solve", str(SMALL), "--method", "greedy", "--out", str(plan),
                                 "--report", str(tmp_path / "solve.html")])
    assert solved.exit_code == 0, solved.output
    assert "passes the independent check" in (tmp_path / "solve.html").read_text()
    doc = json.loads(plan.read_text())
    row = next(a for a in doc["assignments"] if a["job"] == "preprocess-1")
    row["end_h"] -= row["start_h"]
    row["start_h"] = 0.0  # before fetch-data, which it follows, has ended
    row.pop("start"), row.pop("end")  # the calendar forms would now disagree
    plan.write_text(json.dumps(doc))
    violations = check_plan(load_batch(SMALL), load_plan(plan))
    assert violations
    out = tmp_path / "report.html"
    reported = runner.invoke(app, ["report", str(SMALL), str(plan), "--out", str(out)])
    assert reported.exit_code == 0, reported.output
    assert f"the plan fails the check ({len(violations)} violation" in reported.stderr
    page = out.read_text()
    n = len(violations)
    assert f"FAILS the independent check: {n} violation{'s' * (n != 1)}</b>" in page
    assert escape(violations[0].message) in page


# --------------------------------------------------------------------------- times


def _new_year() -> tuple[Instance, PlanResult]:
    """A job running into the next year, late: every time on the page must say which year."""
    inst = _instance({
        "window": {"start": "2026-12-31T20:00:00", "hours": 24},
        "nodes": [{"name": "n", "cores": 8, "memory_gib": 16}],
        "jobs": [{"name": "a", "cores": 2, "memory_gib": 1, "hours": 10, "due_h": 6}],
    })
    return inst, make_result(inst, "by-hand", [0], [0], lower_bound=600)


def test_times_on_the_page_are_written_by_units_clock():
    inst, result = _new_year()
    ws = inst.window_start
    end, due = clock(ws, 600), clock(ws, 360)
    assert end == "Fri 01 Jan 2027 06:00"  # a different year than the window's start: said
    page = render_html_report(inst, result, PASSED)
    (bar,) = _bars(timeline_svg(inst, result))
    assert bar.find("title").text == (f"a on n · 2 cores, 1 GiB · 10 h · {clock(ws, 0)} → {end}"
                                      f" · LATE, due {due}")
    assert f"ends {end}, inside the window" in page  # the makespan card
    assert f"<td>{clock(ws, 0)}<td>{end}<td>" in page  # the job table
    assert f"makespan {end} (+10.0 h)" in page  # the timeline's mark
    ticks = _texts(timeline_svg(inst, result), "tick")
    assert "Fri 01 Jan 2027" in ticks and "Thu 31 Dec 20:00" not in ticks
