"""The executor seam on Dask distributed, with a real LocalCluster of 2 worker processes: the
same figures as in this process, a worker killed mid-run, a task that keeps killing its
workers, the missing-extra message and the option checks."""

from __future__ import annotations

import json
import os
import signal
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import dask
import numpy as np
import pytest
from rich.console import Console
from typer.testing import CliRunner

from assignplan import __version__
from assignplan.cli import app
from assignplan.dask_executor import DaskExecutor, open_executor
from assignplan.errors import SolveError
from assignplan.executor import InProcess
from assignplan.expand import load_batch
from assignplan.instance import build_instance
from assignplan.methods.ga import ga_settings
from assignplan.plan import to_plan_doc
from assignplan.published import graham_lpt_family, pcmax_batch
from assignplan.reading import load_plan
from assignplan.report.tables import compare_table
from assignplan.risk.models import parse_model
from assignplan.risk.replay import ReplayJob, Tally, chunks, replay, replay_plan
from assignplan.risk.sampling import bind
from assignplan.solve import solve

ROOT = Path(__file__).resolve().parents[1]
SMALL = ROOT / "examples" / "small.json"
runner = CliRunner()


@pytest.fixture(scope="module")
def executor():
    # One death per task is forgiven (the scheduler's default forgives three): the test of a
    # task that keeps killing its workers then costs two worker restarts, not four.
    with dask.config.set({"distributed.scheduler.allowed-failures": 1}), \
            open_executor(workers=2) as ex:
        yield ex


@pytest.fixture(scope="module")
def small():
    inst = build_instance(load_batch(SMALL))
    return inst, solve(inst, "greedy")


@dataclass(frozen=True)
class KillsItsWorker:
    """Runs `job` on an item, but a try of the item `victim` kills its own worker process with
    SIGKILL: only the first try (`marker`, a file, says it happened), or every try."""

    job: object
    victim: object
    marker: str
    every_try: bool = False

    def __call__(self, item):
        if item == self.victim:
            if self.every_try or not os.path.exists(self.marker):
                Path(self.marker).touch()
                os.kill(os.getpid(), signal.SIGKILL)
        return self.job(item)


def _merged(run, n_jobs: int, n_nodes: int, samples: int) -> dict[str, Tally]:
    totals = {p: Tally.empty(n_jobs, n_nodes, samples, 0) for p in ("keep", "dispatch")}
    for _, tallies in run:
        totals = {p: totals[p].merge(tallies[p]) for p in totals}
    return totals


def _same_tallies(a: dict[str, Tally], b: dict[str, Tally]) -> None:
    assert a.keys() == b.keys()
    for policy in a:
        for field in ("covered", "makespan", "tardiness", "end_sum", "late", "past", "last",
                      "work"):
            np.testing.assert_array_equal(getattr(a[policy], field), getattr(b[policy], field))
        np.testing.assert_array_equal(a[policy].job_quantile_end(),
                                      b[policy].job_quantile_end())


def test_replay_on_two_workers_is_bit_identical_to_in_process(executor, small):
    inst, result = small
    assert isinstance(executor, DaskExecutor) and executor.workers == 2
    plan, sampler = replay_plan(inst, result), bind(parse_model("lognormal:0.4"), inst)
    args = {"samples": 1_100, "seed": 7}  # 5 chunks, the last one short
    here = replay(inst, plan, sampler, executor=InProcess(), **args)
    there = replay(inst, plan, sampler, executor=executor, **args)
    _same_tallies(here, there)


@dataclass(frozen=True)
class WhereItRan:
    """Which worker process ran an item (after a short sleep, so one worker cannot take them
    all before the other is free)."""

    def __call__(self, item):
        time.sleep(0.2)
        return os.getpid()


def test_every_worker_gets_items(executor):
    # The function is one task every item depends on; the scheduler sends a task only to
    # workers holding its inputs, so without a copy on each worker one worker ran them all.
    pids = {pid for _, pid in executor.run(WhereItRan(), range(8))}
    assert len(pids) == 2


def _missing_on_the_worker():
    raise ModuleNotFoundError("No module named 'assignplan_elsewhere'")


class ArrivesBroken:
    """Pickles here; unpickling it (on a worker) fails as on a worker without the package."""

    def __reduce__(self):
        return (_missing_on_the_worker, ())

    def __call__(self, item):
        return item


def test_a_cluster_that_cannot_unpack_the_work_says_so_in_one_line(executor):
    with pytest.raises(SolveError) as err:
        list(executor.run(ArrivesBroken(), range(3)))
    (line,) = err.value.problems
    assert "\n" not in line and line.startswith("the Dask cluster could not take the work (")
    assert line.endswith(f"its scheduler and workers need assignplan {__version__} and its "
                         "dependencies installed; nothing was written")


def test_a_worker_killed_mid_run_loses_nothing(executor, small, tmp_path):
    inst, result = small
    plan, sampler = replay_plan(inst, result), bind(parse_model("uniform:0.8,1.5"), inst)
    samples, marker = 1_000, tmp_path / "killed"
    job = ReplayJob(inst, plan, sampler, ("keep", "dispatch"), 3, samples)
    killer = KillsItsWorker(job, victim=chunks(samples)[2], marker=str(marker))
    there = _merged(executor.run(killer, chunks(samples)), inst.n_jobs, inst.n_nodes, samples)
    assert marker.exists()  # the worker running chunk 3 really died
    _same_tallies(there, replay(inst, plan, sampler, samples=samples, seed=3))


def test_a_task_that_keeps_killing_its_workers_is_named_and_nothing_is_merged(executor, small,
                                                                              tmp_path):
    inst, result = small
    plan, sampler = replay_plan(inst, result), bind(parse_model("scale:1.2"), inst)
    job = ReplayJob(inst, plan, sampler, ("keep",), 0, 1_000)
    killer = KillsItsWorker(job, victim=chunks(1_000)[1], marker=str(tmp_path / "m"),
                            every_try=True)
    # The first task to fail ends the run; a task queued on a dying worker shares the blame,
    # so it need not be the victim itself (the scheduler's rule).
    with pytest.raises(SolveError, match=r"^task [1-4] of 4 \(samples \d+-\d+\) failed on "
                                         r"the Dask workers: KilledWorker: .*nothing was "
                                         r"written$"):
        list(executor.run(killer, chunks(1_000)))


def _risk_json(*args: str, plan: Path) -> dict:
    result = runner.invoke(app, ["risk", str(SMALL), str(plan), "--json", "--samples", "600",
                                 "--seed", "11", *args])
    assert result.exit_code == 0, result.output
    out = json.loads(result.stdout)
    out.pop("seconds")
    return out


@pytest.fixture(scope="module")
def plan_file(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("plan") / "plan.json"
    result = runner.invoke(app, ["solve", str(SMALL), "--method", "greedy", "--out", str(path)])
    assert result.exit_code == 0, result.output
    return path


def test_risk_figures_are_the_same_in_process_and_on_a_running_cluster(executor, plan_file):
    here = _risk_json(plan=plan_file)
    assert _risk_json("--cluster", executor.client.scheduler.address, plan=plan_file) == here


ISLANDS = {"generations": 6, "count": 3, "epoch": 2, "migrants": 2, "mu": 8, "lam": 12}


def test_an_island_run_gives_the_same_plan_in_process_on_one_worker_and_on_two(
        executor, small, tmp_path):
    inst, _ = small
    settings = ga_settings(**ISLANDS)
    here = solve(inst, "ga", seed=9, budget=600, settings=settings)
    there = solve(inst, "ga", seed=9, budget=600, settings=settings, executor=executor)
    np.testing.assert_array_equal(here.assign, there.assign)
    np.testing.assert_array_equal(here.start, there.start)
    assert here.history == there.history
    # one worker, started by the command itself; the epoch length from a settings file
    toml, out = tmp_path / "ga.toml", tmp_path / "plan.json"
    toml.write_text("[islands]\nepoch = 2\nmigrants = 2\n[population]\nmu = 8\nlam = 12\n")
    result = runner.invoke(app, ["solve", str(SMALL), "--seed", "9", "--generations", "6",
                                 "--islands", "3", "--ga-settings", str(toml), "--workers", "1",
                                 "--budget", "600", "--out", str(out), "--quiet"])
    assert result.exit_code == 0, result.output
    assert load_plan(out).model_dump()["assignments"] == \
        to_plan_doc(inst, here).model_dump()["assignments"]


def test_without_the_extra_workers_says_what_to_install(monkeypatch, plan_file, tmp_path):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed now fails
    csv = tmp_path / "tables"
    result = runner.invoke(app, ["risk", str(SMALL), str(plan_file), "--workers", "2",
                                 "--csv", str(csv)])
    assert result.exit_code == 2
    assert result.stderr.splitlines() == [
        "--workers: needs Dask distributed, an optional extra: "
        "pip install 'assignplan[distributed]'"]
    assert not csv.exists()


@pytest.mark.parametrize(("args", "fragment"), [
    (["--workers", "0"], "--workers 0: must be between 1 and 256"),
    (["--workers", "2", "--cluster", "tcp://127.0.0.1:1"], "give one of them"),
])
def test_wrong_executor_options_are_one_line_exit_2(plan_file, args, fragment):
    result = runner.invoke(app, ["risk", str(SMALL), str(plan_file), *args])
    assert result.exit_code == 2 and fragment in result.stderr
    assert len(result.stderr.splitlines()) == 1


def test_compare_plans_several_batches_as_tasks_in_one_table(executor, small, tmp_path):
    inst, greedy = small
    folder = tmp_path / "more"
    folder.mkdir()
    (folder / "copy.json").write_text(SMALL.read_text(encoding="utf-8"), encoding="utf-8")
    address = executor.client.scheduler.address
    args = ["compare", str(SMALL), str(folder), "--budget", "1"]
    result = runner.invoke(app, [*args, "--json", "--cluster", address])
    assert result.exit_code == 0, result.output
    records = json.loads(result.stdout)
    assert [(r["batch"], r["method"]) for r in records] == [
        (str(path), method) for path in (SMALL, folder / "copy.json")
        for method in ("ga", "greedy", "exact")]
    assert {r["makespan_h"] for r in records if r["method"] == "greedy"} == {
        greedy.makespan / 60}
    console = Console(record=True, width=1_000)  # no cell wrapped: one line per row
    console.print(compare_table(records))
    lines = console.export_text().splitlines()
    header = next(line for line in lines if "┃" in line)
    rows = [line for line in lines if "│" in line]
    assert header.split("┃")[1].strip() == "batch" and len(rows) == 6
    assert sum("copy.json" in row for row in rows) == 3


@pytest.mark.parametrize(("extra", "fragment"), [
    (["--out", "best.json"], "--out: writes one plan; give one batch, not 2"),
    ([], "a folder without batch files (*.json)"),
])
def test_compare_refuses_an_empty_folder_and_one_plan_of_several(tmp_path, extra, fragment):
    empty = tmp_path / "empty"
    empty.mkdir()
    second = [str(SMALL)] if extra else [str(empty)]
    result = runner.invoke(app, ["compare", str(SMALL), *second, *extra])
    assert result.exit_code == 2 and result.stderr.splitlines() == [
        fragment if extra else f"{empty}: {fragment}"]


def test_solve_with_risk_on_workers_gives_the_in_process_figures(executor):
    args = ["solve", str(SMALL), "--method", "greedy", "--risk", "--json", "--seed", "5"]
    here = runner.invoke(app, args)
    there = runner.invoke(app, [*args, "--cluster", executor.client.scheduler.address])
    assert here.exit_code == 0 and there.exit_code == 0, here.output + there.output
    risk_here, risk_there = (json.loads(r.stdout)["risk"] for r in (here, there))
    assert risk_here.pop("seconds") >= 0 and risk_there.pop("seconds") >= 0
    assert risk_here == risk_there and risk_here["samples"] == 1_000


def test_size_on_workers_probes_a_round_at_once_and_finds_the_same_counts(executor, tmp_path):
    # Graham's LPT family, m = 4 (SIAM J. Appl. Math. 17(2), 1969): optimum 12 on 4 machines,
    # on two identical groups of four; fewer than four machines in all cannot end by 12 h
    doc = pcmax_batch(list(graham_lpt_family(4)), 4)
    machine = doc["nodes"][0]
    doc["nodes"] = [{**machine, "name": "a"}, {**machine, "name": "b"}]
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(doc))
    args = ["size", str(path), "--within", "12", "--json", "--budget", "60", "--probe", "2"]
    here = runner.invoke(app, args)
    there = runner.invoke(app, [*args, "--cluster", executor.client.scheduler.address])
    assert here.exit_code == 0 and there.exit_code == 0, here.output + there.output
    one, two = json.loads(here.stdout), json.loads(there.stdout)
    assert one["found"] == two["found"] and one["bound_minimum"] == two["bound_minimum"]
    assert sum(two["found"].values()) == 4
    # on two workers each round probes two counts: never fewer probes than one at a time
    assert len(two["probes"]) >= len(one["probes"])
