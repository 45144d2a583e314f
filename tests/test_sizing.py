"""`assignplan size`: on published P||Cmax instances with known optima, the fewest machines
for a deadline equal to the optimum is the instance's machine count, and one fewer is ruled
out (the output says by what)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from assignplan.cli import app
from assignplan.executor import InProcess
from assignplan.published import graham_lpt_family, pcmax_batch, read_optima, read_pcmax
from assignplan.reading import parse_batch_text
from assignplan.sizing import CONFIRMED, OPEN, RULED_OUT, _first_passing, size_batch

DATA = Path(__file__).resolve().parent / "data" / "published"
runner = CliRunner()


def _sized(times, machines: int, optimum_h: int):
    doc = parse_batch_text(json.dumps(pcmax_batch(list(times), machines)))
    return size_batch(doc, optimum_h * 60, budget=30.0, probe_seconds=2.0)


def _check(result, machines: int) -> None:
    assert result.found == (machines,)
    by_count = {p.counts: p for p in result.probes}
    assert by_count[(machines,)].verdict == CONFIRMED
    # one fewer: ruled out by the bound, or not ruled out and no plan found; either way the
    # probe says which, never "confirmed"
    assert by_count[(machines - 1,)].verdict in (RULED_OUT, OPEN)
    if by_count[(machines - 1,)].verdict == RULED_OUT:
        assert result.bound_min["machine"] == machines


@pytest.mark.parametrize("m", [3, 4, 6])
def test_graham_lpt_family(m):
    # R. L. Graham, SIAM J. Appl. Math. 17(2), 1969: 2m+1 jobs 2m-1, 2m-1, ..., m+1, m+1,
    # m, m, m; optimum 3m on m machines (LPT gives 4m-1), total work 3m^2, so m-1 machines
    # cannot end by 3m (the work bound 3m^2/(m-1) > 3m).
    result = _sized(graham_lpt_family(m), m, 3 * m)
    _check(result, m)
    assert result.bound_min["machine"] == m


@pytest.mark.parametrize("name", ["U_1_0010_05_0", "U_1_0010_05_3", "NU_1_0010_05_1",
                                  "U_2_0010_05_0"])
def test_published_pcmax_optimum_needs_the_instance_machine_count(name):
    # França, Gendreau, Laporte, Müller (1994) instances with their OPT (optima.csv: source)
    optimum = read_optima(DATA / "pcmax" / "optima.csv", "optimal_makespan")[name]
    instance = read_pcmax(DATA / "pcmax" / f"{name}.txt")
    _check(_sized(instance.times, instance.machines, optimum), instance.machines)


def _two_groups(tmp_path: Path, costs: tuple[float, float] | None) -> Path:
    """Graham's m = 4 family on two identical groups of four machines, 'cheap' listed
    second; a deadline of 12 h needs four machines in all."""
    doc = pcmax_batch(list(graham_lpt_family(4)), 4)
    machine = doc["nodes"][0]
    doc["nodes"] = [{**machine, "name": "dear"}, {**machine, "name": "cheap"}]
    if costs is not None:
        doc["nodes"][0]["cost"], doc["nodes"][1]["cost"] = costs
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(doc))
    return path


def test_cost_per_group_shrinks_the_dear_group_first(tmp_path):
    result = runner.invoke(app, ["size", str(_two_groups(tmp_path, (10.0, 1.0))), "--within",
                                 "12", "--json", "--budget", "30", "--probe", "2"])
    assert result.exit_code == 0, result.output
    record = json.loads(result.stdout)
    assert record["found"] == {"dear": 0, "cheap": 4}
    assert record["total"] == 4.0 and record["total_is"] == "cost"


def test_size_command_says_confirmed_and_ruled_out(tmp_path):
    result = runner.invoke(app, ["size", str(_two_groups(tmp_path, None)), "--within", "12",
                                 "--budget", "30", "--probe", "2"])
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "found: 4 nodes in all, confirmed by a plan" in out
    # 48 hours of work on 3 machines: at least 16 h
    assert "dear 0, cheap 3 (3 nodes): bound 16.00 h: ruled out by the bound" in out
    assert "cheap: 4 (now 4); the bound rules out fewer than 4" in out
    result = runner.invoke(app, ["size", str(_two_groups(tmp_path, None)), "--within", "12",
                                 "--vary", "cheap", "--budget", "30", "--probe", "2"])
    assert "dear: 4 (held)" in result.stdout and "cheap: 0 (now 4)" in result.stdout
    result = runner.invoke(app, ["size", str(_two_groups(tmp_path, None))])
    assert result.exit_code == 2
    assert "--within HOURS or --by TIME" in result.stderr
    result = runner.invoke(app, ["size", str(_two_groups(tmp_path, None)), "--within", "12",
                                 "--vary", "nosuch"])
    assert result.exit_code == 2
    assert result.stderr.startswith("--vary nosuch: no node group named 'nosuch'")


def test_size_report_page_has_the_chart_and_every_probe(tmp_path):
    page = tmp_path / "size.html"
    result = runner.invoke(app, ["size", str(_two_groups(tmp_path, None)), "--within", "12",
                                 "--vary", "cheap", "--report", str(page), "--budget", "30",
                                 "--probe", "2"])
    assert result.exit_code == 0, result.output
    html = page.read_text(encoding="utf-8")
    assert "<svg" in html and "Makespan against node count" in html
    assert html.count("<tr><td>") == len(json.loads(runner.invoke(app, [
        "size", str(_two_groups(tmp_path, None)), "--within", "12", "--vary", "cheap",
        "--json", "--budget", "30", "--probe", "2"]).stdout)["probes"])
    assert "confirmed by a plan" in html and "ruled out by the bound" in html


class SeveralAtOnce(InProcess):
    """An in-process executor that says it has three workers: the sizing search then probes
    three counts a round (a 4-ary search), as it would on a cluster of three."""

    workers = 3


@pytest.mark.parametrize("m", [3, 6])
def test_probing_several_counts_a_round_finds_the_same_counts(m):
    # Graham's family again (SIAM J. Appl. Math. 17(2), 1969): optimum 3m on m machines
    doc = parse_batch_text(json.dumps(pcmax_batch(list(graham_lpt_family(m)), m)))
    one = size_batch(doc, 3 * m * 60, budget=30.0, probe_seconds=2.0)
    three = size_batch(doc, 3 * m * 60, budget=30.0, probe_seconds=2.0,
                       executor=SeveralAtOnce())
    assert three.found == one.found == (m,)
    assert three.bound_min == one.bound_min
    # every probe of the wider search agrees with the optimum: m machines and more are
    # confirmed, fewer are never confirmed
    for p in three.probes:
        assert (p.verdict == CONFIRMED) == (p.counts[0] >= m), p


@settings(max_examples=200, deadline=None)
@given(st.integers(0, 300), st.integers(0, 300), st.integers(1, 6))
def test_the_search_of_several_points_a_round_finds_the_first_passing_count(lo, span, width):
    hi = lo + span
    first = lo + span // 3  # monotone: false below it, true from it
    asked = []

    def passing(points):
        assert len(points) <= width and all(lo <= p < hi for p in points)
        asked.append(points)
        return [p >= first for p in points]

    assert _first_passing(lo, hi, passing, width) == first
    # a round cuts the interval to at most 1/(width + 1) of it, plus one
    assert len(asked) <= max(1, 2 + math.ceil(math.log(span + 1, width + 1)))
