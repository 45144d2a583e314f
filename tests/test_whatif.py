"""What-if changes of the inventory on the command line and in an overlay file: applied in one
place while the batch is expanded, said in the summary, refused one line each."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from assignplan.cli import app
from assignplan.expand import load_batch
from assignplan.instance import build_instance
from assignplan.solve import solve
from assignplan.whatif import parse_changes

SMALL = Path(__file__).resolve().parents[1] / "examples" / "small.json"
runner = CliRunner()


def _with_spare(tmp_path: Path) -> Path:
    """small.json plus a group of two nodes too small for any of its jobs."""
    doc = json.loads(SMALL.read_text())
    doc["nodes"].append({"name": "spare", "count": 2, "cores": 1, "memory_gib": 1})
    path = tmp_path / "spare.json"
    path.write_text(json.dumps(doc))
    return path


def _solve_json(*args: str) -> dict:
    result = runner.invoke(app, ["solve", *args, "--method", "greedy", "--json"])
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def test_without_an_unused_node_leaves_greedy_unchanged(tmp_path):
    """The issue's check: no job uses the spare nodes, so greedy's makespan stays."""
    path = _with_spare(tmp_path)
    before = _solve_json(str(path))
    after = _solve_json(str(path), "--without", "spare-*")
    assert after["makespan_h"] == before["makespan_h"]
    assert after["nodes"] == before["nodes"] - 2
    assert after["inventory_changes"] == ["without spare-1, spare-2"]


def test_removing_the_only_group_some_jobs_need_names_them(tmp_path):
    out = tmp_path / "plan.json"
    result = runner.invoke(app, ["solve", str(SMALL), "--without", "gpu", "--out", str(out)])
    assert result.exit_code == 2
    assert result.stderr.strip() == (
        "--without gpu: no node left can hold 1 job of jobs[3] (train): each needs 8 cores,"
        " 64 GiB, 2 GPUs, tags accel, and only nodes taken out have that")
    assert not out.exists()


def test_down_window_delays_the_jobs_that_need_that_node():
    batch = load_batch(SMALL, parse_changes(down=["gpu@0..10"]))
    inst = build_instance(batch)
    result = solve(inst, "greedy")
    train = inst.job_names.index("train")
    assert result.start[train] >= 600
    assert batch.changes == ("gpu down from Mon 07 Dec 08:00 until Mon 07 Dec 18:00",)


def test_add_members_and_the_overlay_file_match_the_options(tmp_path):
    overlay = tmp_path / "changes.json"
    overlay.write_text(json.dumps({"add": [{"group": "cpu", "count": 2}],
                                   "down": [{"node": "bigmem", "start_h": 2, "end_h": 4}]}))
    by_file = load_batch(SMALL, parse_changes(overlay=overlay))
    by_options = load_batch(SMALL, parse_changes(add=["cpu=2"], down=["bigmem@2..4"]))
    assert [n.name for n in by_file.nodes] == [n.name for n in by_options.nodes]
    assert "cpu-3" in [n.name for n in by_file.nodes] and "cpu-4" in [n.name for n in
                                                                      by_file.nodes]
    assert by_file.nodes == by_options.nodes
    assert by_file.changes[0] == "added cpu-3, cpu-4 to group cpu"


def test_bad_changes_are_one_line_each_exit_2():
    result = runner.invoke(app, ["solve", str(SMALL), "--down", "gpu@x..2", "--add", "cpu=0",
                                 "--without", "nosuch"])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert lines[0].startswith("--add cpu=0: write --add GROUP=COUNT")
    assert lines[1].startswith("--down gpu@x..2: 'x' is neither hours")
    result = runner.invoke(app, ["solve", str(SMALL), "--without", "nosuch"])
    assert result.exit_code == 2
    assert result.stderr.strip() == "--without nosuch: no node or node group matches 'nosuch'"
