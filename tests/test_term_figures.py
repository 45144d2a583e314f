"""Every output gives each objective term with its bound and gap, and the turnaround figures:
wait, its 90th percentile and bounded slowdown, computed as their published definitions say."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from assignplan.cli import app
from assignplan.documents import PlanDoc
from assignplan.metrics import summary
from assignplan.plan import (
    BSLD_THRESHOLD,
    make_result,
    objective,
    result_from_doc,
    term_gap_pct,
    to_plan_doc,
    turnaround,
)
from assignplan.solve import solve
from tests.strategies import instance_of

SMALL = Path(__file__).resolve().parents[1] / "examples" / "small.json"
runner = CliRunner()


def hand_batch():
    """One 4-core node; jobs of 5 min, 1 h and 30 min, whole-node, the last ready at 10 min,
    the first due at 4 min, weights 2, 1, 1."""
    doc = {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
           "nodes": [{"name": "n", "cores": 4, "memory_gib": 8.0}],
           "jobs": [{"name": "a", "cores": 4, "memory_gib": 1.0, "hours": 5 / 60, "weight": 2.0,
                     "due_h": 4 / 60},
                    {"name": "b", "cores": 4, "memory_gib": 1.0, "hours": 1.0},
                    {"name": "c", "cores": 4, "memory_gib": 1.0, "hours": 0.5,
                     "ready_h": 10 / 60}]}
    return instance_of(doc)[1]


def test_turnaround_by_hand():
    inst = hand_batch()
    start = np.array([0, 5, 65])  # a, then b, then c
    end = inst.end_times(np.zeros(3, dtype=np.int64), start)
    figures = turnaround(inst, start, end)
    waits = [0, 5, 55]  # c was ready at 10 and started at 65
    assert figures["mean_wait_h"] == pytest.approx(np.mean(waits) / 60)
    assert figures["p90_wait_h"] == pytest.approx(np.percentile(waits, 90) / 60)
    # Feitelson et al. (JSSPP 1997) bounded slowdown: max(1, (wait + run) / max(run, tau));
    # a's 5 min run counts as BSLD_THRESHOLD = 10 min: (0 + 5) / 10 < 1 -> 1
    expected = [1.0, (5 + 60) / 60, (55 + 30) / 30]
    assert BSLD_THRESHOLD == 10
    assert figures["mean_bounded_slowdown"] == pytest.approx(np.mean(expected))


def test_term_gap_with_a_zero_bound():
    assert term_gap_pct(150.0, 100.0) == pytest.approx(50.0)
    assert term_gap_pct(0.0, 0.0) == 0.0
    assert term_gap_pct(30.0, 0.0) is None  # no finite relative gap: the excess is the figure


def test_summary_gives_every_term_its_bound_and_gap():
    inst = hand_batch()
    result = solve(inst, "greedy", budget=5.0)
    s = summary(inst, result)
    mk, tard, compl = objective(inst, result.end)
    # a is due at 4 min and lasts 5: it is late 1 min even alone, weight 2
    assert s["weighted_tardiness_bound_h"] == pytest.approx(2 / 60, rel=1e-6)
    assert s["weighted_tardiness_excess_h"] == pytest.approx((tard - 2) / 60, rel=1e-6)
    assert s["weighted_completion_bound_h"] * 60 == pytest.approx(result.completion_bound)
    assert s["weighted_completion_gap_pct"] == pytest.approx(
        round(100 * (compl - result.completion_bound) / result.completion_bound, 2))
    assert s["weighted_completion_bound_set_by"] in result.completion_parts
    assert s["bounded_slowdown_threshold_min"] == BSLD_THRESHOLD
    for key in ("mean_wait_h", "p90_wait_h", "mean_bounded_slowdown"):
        assert key in s


def test_plan_document_keeps_bounds_gaps_and_turnaround():
    inst = hand_batch()
    result = solve(inst, "greedy", budget=5.0)
    doc = PlanDoc.model_validate_json(json.dumps(to_plan_doc(inst, result).model_dump(
        mode="json")))
    assert doc.objective_bounds.weighted_completion_h == pytest.approx(
        result.completion_bound / 60)
    assert doc.gaps_pct.weighted_completion_pct == pytest.approx(
        summary(inst, result)["weighted_completion_gap_pct"], abs=0.01)
    assert doc.turnaround.bounded_slowdown_threshold_min == BSLD_THRESHOLD
    back = result_from_doc(inst, doc)
    assert back.completion_bound == pytest.approx(result.completion_bound)
    assert back.tardiness_bound == pytest.approx(result.tardiness_bound)
    # a plan made outside `solve` carries no bounds, and the document says nothing of them
    bare = to_plan_doc(inst, make_result(inst, "x", result.assign, result.start, 0))
    assert bare.objective_bounds is None and bare.gaps_pct is None


def test_cli_json_and_compare_give_the_term_gaps():
    s = json.loads(runner.invoke(app, ["solve", str(SMALL), "--method", "greedy",
                                       "--json"]).stdout)
    assert s["weighted_completion_gap_pct"] > 0 and s["weighted_tardiness_bound_h"] == 0.0
    assert s["weighted_tardiness_gap_pct"] is None  # late against a zero bound
    records = json.loads(runner.invoke(app, ["compare", str(SMALL), "--budget", "2",
                                             "--json"]).stdout)
    greedy = next(r for r in records if r["method"] == "greedy")
    assert greedy["completion_gap_pct"] == s["weighted_completion_gap_pct"]
    assert greedy["mean_wait_h"] == pytest.approx(s["mean_wait_h"])
    table = runner.invoke(app, ["compare", str(SMALL), "--budget", "2"]).stdout
    assert "compl." in table and "tard." in table  # headers wrap at 80 columns
