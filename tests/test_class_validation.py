"""The capacity check runs per node type and per job group (`expand.hosts`), never per job and
node; these tests hold it to a plain per-node, per-job reference written here: same problems,
same JSON paths, same closest node, over random inventories with repeated and near-identical
node groups (one core, one MiB or one tag apart)."""

from __future__ import annotations

import json

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from assignplan.documents import Batch
from assignplan.errors import InputError
from assignplan.expand import expand_batch, member_names
from assignplan.units import memory_mib

BASE_KINDS = ((16, 64.0, 0, ()), (32, 512.0, 0, ()), (8, 128.0, 4, ("cuda",)),
              (16, 64.0, 0, ("avx512",)))
TAGS = ("cuda", "avx512", "ib")


def _inventory(rng: np.random.Generator) -> list[dict]:
    groups = []
    for g in range(int(rng.integers(1, 7))):
        cores, mem, gpus, tags = BASE_KINDS[int(rng.integers(len(BASE_KINDS)))]
        nudge = int(rng.integers(4))  # 0: a repeat of its kind; else one unit apart
        groups.append({
            "name": f"n{g}", "count": int(rng.integers(1, 4)),
            "cores": cores + (1 if nudge == 1 else 0),
            "memory_gib": mem + (1 / 1024 if nudge == 2 else 0.0),
            "gpus": gpus, "tags": sorted(set(tags) | ({"ib"} if nudge == 3 else set()))})
    return groups


def _jobs(rng: np.random.Generator) -> list[dict]:
    jobs = []
    for j in range(int(rng.integers(1, 9))):
        cores, mem, gpus, tags = BASE_KINDS[int(rng.integers(len(BASE_KINDS)))]
        job = {"name": f"j{j}", "count": int(rng.integers(1, 3)), "hours": 1.0,
               # at, just over or well over a kind's size: the edges the types must keep
               "cores": cores + int(rng.choice([0, 0, 1, 2, -1])),
               "memory_gib": mem + float(rng.choice([0.0, 0.0, 1 / 1024, 2 / 1024, 64.0])),
               "gpus": gpus + int(rng.choice([0, 0, 0, 1]))}
        needs = [t for t in TAGS if rng.random() < 0.25]
        if needs:
            job["needs"] = needs
        jobs.append(job)
    return jobs


def _per_node_problems(doc: dict) -> list[str]:
    """The capacity problems as a per-node check states them: each job group against every
    node, the closest node the first with the fewest things missing, then the smallest
    relative shortfall."""
    nodes = [(name, g) for g in doc["nodes"] for name in member_names(g["name"], g["count"])]
    problems = []
    for gi, job in enumerate(doc["jobs"]):
        need = (job["cores"], memory_mib(job["memory_gib"]), job.get("gpus", 0))
        needs = set(job.get("needs", []))

        def short(g: dict, need=need, needs=needs) -> list[str]:
            have = (g["cores"], memory_mib(g["memory_gib"]), g.get("gpus", 0))
            out = []
            if need[0] > have[0]:
                out.append(f"{need[0] - have[0]} cores")
            if need[1] > have[1]:
                out.append(f"{(need[1] - have[1]) / 1024:g} GiB memory")
            if need[2] > have[2]:
                out.append(f"{need[2] - have[2]} GPUs")
            if needs - set(g.get("tags", [])):
                out.append("tags " + ", ".join(sorted(needs - set(g.get("tags", [])))))
            return out

        if any(not short(g) for _, g in nodes):
            continue

        def distance(item, need=need, short=short) -> tuple[int, float]:
            g = item[1]
            rel = (max(0, need[0] - g["cores"]) / need[0]
                   + max(0, need[1] - memory_mib(g["memory_gib"])) / need[1]
                   + (max(0, need[2] - g.get("gpus", 0)) / need[2] if need[2] else 0.0))
            return (len(short(g)), rel)

        name, g = min(nodes, key=distance)
        first = member_names(job["name"], job["count"])[0]
        problems.append(
            f"<batch>: jobs[{gi}]: no node can hold job '{first}' (needs {need[0]} cores,"
            f" {need[1] / 1024:g} GiB, {need[2]} GPUs"
            + (f", tags {', '.join(sorted(needs))}" if needs else "")
            + f"); closest node '{name}' is short of {', '.join(short(g))}")
    return problems


@settings(max_examples=150, deadline=None)
@given(st.integers(0, 2**32 - 1))
def test_capacity_problems_per_type_match_the_per_node_check(seed: int):
    rng = np.random.default_rng(seed)
    doc = {"window": {"start": "2026-12-07T00:00:00", "hours": 168},
           "nodes": _inventory(rng), "jobs": _jobs(rng)}
    expected = _per_node_problems(doc)
    try:
        expand_batch(Batch.model_validate_json(json.dumps(doc)))
        found = []
    except InputError as err:
        found = [p for p in err.problems if "no node can hold" in p]
    assert found == expected
