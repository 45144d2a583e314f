"""Random batches for property tests: heterogeneous nodes, maintenance, follows, ready and due.

`random_batch_doc(rng, ...)` builds a batch document (a dict in our JSON format) from an explicit
generator; `batches()` is the hypothesis strategy over it (drawn from a seed, so a failing case
is reproduced by its seed, which hypothesis prints).
"""

from __future__ import annotations

import json

import numpy as np
from hypothesis import strategies as st

from assignplan.documents import Batch
from assignplan.expand import ExpandedBatch, expand_batch
from assignplan.instance import Instance, build_instance

NODE_KINDS = (
    # name, cores, memory_gib, gpus, speed, tags
    ("cpu", 16, 64.0, 0, 1.0, []),
    ("fast", 16, 64.0, 0, 1.5, ["avx512"]),
    ("mem", 32, 512.0, 0, 1.0, []),
    ("gpu", 8, 128.0, 4, 1.25, ["cuda"]),
)


def random_batch_doc(
    rng: np.random.Generator,
    *,
    max_jobs: int = 12,
    max_node_groups: int = 3,
    p_follows: float = 0.15,
    p_maintenance: float = 0.3,
    p_ready: float = 0.2,
    p_due: float = 0.3,
) -> dict:
    """A small heterogeneous batch; every job fits on at least one node by construction."""
    kinds = rng.choice(len(NODE_KINDS), size=int(rng.integers(1, max_node_groups + 1)),
                       replace=False)
    nodes = []
    for k in kinds:
        name, cores, mem, gpus, speed, tags = NODE_KINDS[int(k)]
        node = {"name": name, "count": int(rng.integers(1, 4)), "cores": cores,
                "memory_gib": mem, "gpus": gpus, "speed": speed, "tags": list(tags)}
        if rng.random() < p_maintenance:
            start = float(rng.integers(0, 20))
            node["maintenance"] = [{"start_h": start, "end_h": start + float(rng.integers(1, 6))}]
        nodes.append(node)

    n_jobs = int(rng.integers(1, max_jobs + 1))
    jobs = []
    for j in range(n_jobs):
        host = nodes[int(rng.integers(len(nodes)))]  # the job is sized to fit this group
        job = {
            "name": f"j{j}",
            "cores": int(rng.integers(1, host["cores"] + 1)),
            "memory_gib": float(rng.integers(1, int(host["memory_gib"]) + 1)),
            "hours": round(float(rng.uniform(0.05, 8.0)), 2),
        }
        if host["gpus"] and rng.random() < 0.5:
            job["gpus"] = int(rng.integers(1, host["gpus"] + 1))
        if host["tags"] and rng.random() < 0.3:
            job["needs"] = [host["tags"][0]]
        if j > 0 and rng.random() < p_follows:
            job["follows"] = sorted({f"j{int(p)}" for p in rng.integers(0, j, size=2)})
        if rng.random() < p_ready:
            job["ready_h"] = round(float(rng.uniform(0, 10)), 2)
        if rng.random() < p_due:
            job["due_h"] = round(float(rng.uniform(1, 30)), 2)
            job["weight"] = float(rng.integers(1, 4))
        if rng.random() < 0.15:
            job["count"] = int(rng.integers(2, 4))
        jobs.append(job)
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
            "nodes": nodes, "jobs": jobs}


def expanded(doc: dict) -> ExpandedBatch:
    return expand_batch(Batch.model_validate_json(json.dumps(doc)))


def instance_of(doc: dict) -> tuple[ExpandedBatch, Instance]:
    batch = expanded(doc)
    return batch, build_instance(batch)


@st.composite
def batches(draw, **kwargs) -> dict:
    """Hypothesis strategy: a random batch document (see `random_batch_doc` for the knobs)."""
    seed = draw(st.integers(min_value=0, max_value=2**32 - 1))
    return random_batch_doc(np.random.default_rng(seed), **kwargs)
