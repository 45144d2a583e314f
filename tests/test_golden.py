"""Golden plans: the bound, greedy's plan and a seeded ga run, reproduced bit for bit.

A guard for changes of structure: whatever moves inside the package, the same batch, seed and
generation count must give the same assignments, starts and ga history. A deliberate change of
results re-records `tests/data/golden/expected.json` in a commit of its own
(`python -m tests.test_golden --record`), saying why and what was measured.
"""

from __future__ import annotations

import json
import sys
from functools import cache
from pathlib import Path

import pytest

from assignplan.bounds import lower_bound
from assignplan.check import check_plan
from assignplan.expand import ExpandedBatch, expand_batch, load_batch
from assignplan.instance import Instance, build_instance
from assignplan.methods.ga import ga_settings
from assignplan.methods.greedy import solve_greedy
from assignplan.plan import to_plan_doc
from assignplan.published import pcmax_batch, read_pcmax
from assignplan.reading import parse_batch_text
from assignplan.solve import solve

ROOT = Path(__file__).resolve().parents[1]
GOLDEN = ROOT / "tests" / "data" / "golden"
EXPECTED = GOLDEN / "expected.json"
# batch name -> ga generations (enough for every improvement step to run several times)
GENERATIONS = {"small": 20, "generated-200": 16, "pcmax-U_2_0050_25_8": 20}
GA_SEED = 7


def _batch(name: str) -> ExpandedBatch:
    if name == "small":
        return load_batch(ROOT / "examples" / "small.json")
    if name == "generated-200":
        return load_batch(GOLDEN / "generated-200.json")
    # published P||Cmax instance (source: tests/data/published/README.md), reduced here
    pcmax = read_pcmax(ROOT / "tests" / "data" / "published" / "pcmax" / "U_2_0050_25_8.txt")
    doc = pcmax_batch(pcmax.times, pcmax.machines)
    return expand_batch(parse_batch_text(json.dumps(doc)))


@cache
def _run(name: str) -> tuple[ExpandedBatch, Instance, dict]:
    """Everything recorded for one batch: bound, the greedy method's and a ga plan, ga history."""
    batch = _batch(name)
    inst = build_instance(batch)
    bound = lower_bound(inst)
    greedy = solve_greedy(inst, lower_bound=bound.value)
    assign, start = greedy.assign, greedy.start
    ga = solve(inst, "ga", seed=GA_SEED, budget=1e6, bound=bound,
               settings=ga_settings(generations=GENERATIONS[name]))
    record = {
        "bound": bound.value,
        "bound_parts": dict(sorted(bound.parts.items())),
        "greedy": {"assign": assign.tolist(), "start": start.tolist()},
        "ga": {"assign": ga.assign.tolist(), "start": ga.start.tolist(),
               "history": [row.model_dump() for row in ga.history]},
    }
    return batch, inst, record


@pytest.mark.parametrize("name", sorted(GENERATIONS))
def test_golden_plan_reproduced(name):
    batch, inst, record = _run(name)
    expected = json.loads(EXPECTED.read_text())[name]
    assert record["bound"] == expected["bound"]
    assert record["bound_parts"] == expected["bound_parts"]
    assert record["greedy"] == expected["greedy"]
    assert record["ga"]["assign"] == expected["ga"]["assign"]
    assert record["ga"]["start"] == expected["ga"]["start"]
    assert record["ga"]["history"] == expected["ga"]["history"]


def record() -> None:
    out = {name: _run(name)[2] for name in sorted(GENERATIONS)}
    for name in out:  # never record a plan the checker rejects
        batch, inst, _ = _run(name)
        from assignplan.plan import make_result

        for key in ("greedy", "ga"):
            plan = make_result(inst, key, out[name][key]["assign"], out[name][key]["start"], 0)
            assert check_plan(batch, to_plan_doc(inst, plan)) == [], (name, key)
    EXPECTED.write_text(json.dumps(out, indent=0, sort_keys=True) + "\n")
    print(f"wrote {EXPECTED}")


if __name__ == "__main__" and "--record" in sys.argv:
    record()
