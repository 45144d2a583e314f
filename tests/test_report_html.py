"""The HTML report and its charts: figures checked against the plan, self-contained page, PNGs."""

from __future__ import annotations

import functools
import re
import xml.etree.ElementTree as ET
from dataclasses import replace
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest

from assignplan import solve as planner
from assignplan.instance import Instance, build_instance
from assignplan.model import Batch, HistoryRow, PlanDoc, expand_batch, load_batch
from assignplan.plan import PlanResult, make_result, result_from_doc, to_plan_doc
from assignplan.report import svg
from assignplan.report.charts import (
    NODE_ROW_LIMIT,
    OKABE_ITO,
    PALETTE,
    binned_curve,
    group_colours,
    stack_offsets,
    utilisation_curve,
    write_png_charts,
)
from assignplan.report.html import page_budget, render_html_report, write_html_report
from assignplan.report.stats import summary

ROOT = Path(__file__).resolve().parents[1]
WEEK = ROOT / "examples" / "institute-week.json"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG spec (W3C / ISO/IEC 15948), section 5.2
BUDGET_10K = 5_000_000  # bytes: the page budget for a 10,000-job plan (html.py docstring)


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
    from benchmarks.generate import batch_doc, generate

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
    bars = _bars(svg.timeline_svg(inst, result))
    assert sorted(int(b.get("data-job")) for b in bars) == list(range(inst.n_jobs))


def test_bars_span_start_to_end_with_hover_text():
    inst, result = week()
    scale = svg.PLOT / max(result.makespan, inst.window_minutes)
    for bar in _bars(svg.timeline_svg(inst, result)):
        j = int(bar.get("data-job"))
        x, w = float(bar.get("x")), float(bar.get("width"))
        assert x == pytest.approx(svg.LEFT + result.start[j] * scale, abs=0.06)
        assert x + w == pytest.approx(svg.LEFT + result.end[j] * scale, abs=0.12)
        title = bar.find("title").text
        assert title.startswith(f"{inst.job_names[j]} on {inst.node_names[result.assign[j]]} ")
        assert f"{inst.demand[j, 0]} cores" in title


def test_bar_height_is_the_share_of_the_nodes_cores():
    inst, result = week()
    unit_inner = svg.ROW_PX * (1 - 2 * 0.08)
    for bar in _bars(svg.timeline_svg(inst, result)):
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
    late = {int(b.get("data-job")) for b in _bars(svg.timeline_svg(inst, result))
            if "late" in b.get("class").split()}
    expected = np.flatnonzero(result.end > inst.due)
    assert late == set(expected.tolist())
    assert len(late) == summary(inst, result)["late_jobs"]


def test_job_groups_share_a_colour_and_the_palette_is_okabe_ito():
    # Okabe & Ito, "Color Universal Design" (2002): the published hex values of the 7 hues.
    published = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    assert set(OKABE_ITO) == published
    assert len(set(PALETTE)) == len(PALETTE) == 21
    inst, result = week()
    colour_of_group: dict[str, set[str]] = {}
    for bar in _bars(svg.timeline_svg(inst, result)):
        group = inst.job_groups[int(bar.get("data-job"))]
        colour_of_group.setdefault(group, set()).add(bar.get("class").split()[0])
    assert all(len(c) == 1 for c in colour_of_group.values())
    assert len(set(group_colours(inst.job_groups).values())) == len(set(inst.job_groups))


def test_maintenance_and_window_end_are_drawn():
    inst, result = week()
    root = ET.fromstring(svg.timeline_svg(inst, result))
    maint = [e for e in root.iter("rect") if e.get("class") == "maint"]
    assert len(maint) == len(inst.maint_start) > 0
    assert [e for e in root.iter("line") if e.get("class") == "winend"]


# --------------------------------------------------------------------------- the page


def test_page_is_self_contained():
    inst, result = week()
    page = render_html_report(inst, result)
    assert not re.search(r"https?://", page)
    assert not re.search(r"<(script|link|img|iframe|object)\b", page, re.I)
    assert "@import" not in page and "@font-face" not in page
    assert set(re.findall(r"url\((.)", page)) <= {"#"}  # only in-page references


def test_page_shows_the_summary_figures():
    inst, result = week()
    s = summary(inst, result)
    page = render_html_report(inst, result, title="Week 50 <draft>")
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
    page = render_html_report(inst, result)
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
    chart = svg.convergence_svg(with_history)
    lines = list(ET.fromstring(chart).iter("polyline"))
    assert [len(e.get("points").split()) for e in lines] == [6, 6]
    assert 'id="convergence"' in render_html_report(inst, with_history)
    files = write_png_charts(tmp_path, inst, with_history)
    assert (tmp_path / "convergence.png") in files


def test_write_is_atomic_and_returns_the_bytes(tmp_path):
    inst, result = week()
    target = tmp_path / "report.html"
    target.write_text("old")
    n = write_html_report(target, inst, result)
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
        write_html_report(target, inst, result)
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
    n = write_html_report(tmp_path / "large.html", inst, result)
    assert n <= min(BUDGET_10K, page_budget(inst.n_jobs, inst.n_nodes))
    page = (tmp_path / "large.html").read_text(encoding="utf-8")
    chart = page[page.index('<svg id="timeline"'):]
    chart = chart[: chart.index("</svg>") + 6]
    assert 'class="chart grouped"' in chart
    bars = _bars(chart)
    assert sorted(int(b.get("data-job")) for b in bars) == list(range(inst.n_jobs))
    assert float(ET.fromstring(chart).get("viewBox").split()[3]) < 2500  # height stays bounded
