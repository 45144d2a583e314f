"""Seeded generator of invented batch documents: heterogeneous weeks, or batches whose optimum
is known by construction (for tests and benchmarks; never a published instance).

    python -m assignplan.generate --scale medium --seed 1 [--known-optimum] --out batch.json

`generate(scale, seed, known_optimum)` returns a batch document (a dict in our JSON format).
With ``known_optimum=True`` the dict also carries ``"_known_optimum_h"``, the optimal makespan
in hours; keys starting with ``_`` are not part of the format: pass the dict through
`batch_doc` before validating it (the CLI writer does so). All times are whole minutes
(hours are multiples of 1/60), so durations on speed-1.0 nodes are exact.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

SCALES = {"small": (200, 20), "medium": (2_000, 200), "large": (10_000, 1_000),
          "site": (50_000, 5_000), "national": (100_000, 10_000)}

# kind: cores, memory GiB, GPUs, speed, tags, share of the nodes
NODE_KINDS = {
    "cpu": (64, 256.0, 0, 1.0, [], 0.50),
    "fast": (64, 256.0, 0, 1.3, ["avx512"], 0.20),
    "bigmem": (64, 2048.0, 0, 1.0, ["bigmem"], 0.10),
    "gpu": (32, 512.0, 4, 1.1, ["cuda"], 0.20),
}
RACK = 20  # nodes per group: maintenance is planned per rack, not per kind
KNOWN_CORES, KNOWN_MEM_PER_CORE = 64, 4.0


def batch_doc(doc: dict) -> dict:
    """The document without generator metadata (top-level keys starting with `_`)."""
    return {k: v for k, v in doc.items() if not k.startswith("_")}


def _hours(minutes: int | np.integer) -> float:
    return int(minutes) / 60


def _nodes(n_nodes: int, *, rng: np.random.Generator) -> list[dict]:
    counts = {k: max(1, int(round(v[5] * n_nodes))) for k, v in NODE_KINDS.items()}
    counts["cpu"] += n_nodes - sum(counts.values())
    groups = []
    for kind, total in counts.items():
        cores, mem, gpus, speed, tags, _ = NODE_KINDS[kind]
        for r, first in enumerate(range(0, total, RACK)):
            g = {"name": f"{kind}-r{r + 1}", "count": min(RACK, total - first), "cores": cores,
                 "memory_gib": mem, "gpus": gpus, "speed": speed, "tags": list(tags)}
            if rng.random() < 0.3:  # a few racks go down for a few hours during the week
                start = int(rng.integers(0, 150 * 60))
                g["maintenance"] = [{"start_h": _hours(start),
                                     "end_h": _hours(start + int(rng.integers(60, 8 * 60)))}]
            groups.append(g)
    return groups


def _job(name: str, *, rng: np.random.Generator, max_minutes: int = 20 * 60) -> dict:
    """One job of a random profile: serial, wide (up to a whole node), big-memory, GPU, AVX.

    Hours: 1 job in 5 short (log-uniform 5 min .. 2 h), most 2 h .. `max_minutes`, and 1 in
    12 long (20-40 h). Load, not one long job, then sets most weeks' makespan.
    """
    u = rng.random()
    if u < 0.2:
        minutes = int(np.exp(rng.uniform(np.log(5), np.log(120))))
    elif u < 0.92 or max_minutes < 20 * 60:
        minutes = int(rng.integers(120, max(121, max_minutes)))
    else:
        minutes = int(rng.integers(20 * 60, 40 * 60 + 1))
    profile = rng.choice(5, p=[0.35, 0.3, 0.08, 0.17, 0.1])
    if profile == 0:
        job = {"cores": int(rng.integers(1, 9)), "memory_gib": float(rng.integers(1, 33))}
    elif profile == 1:
        cores = int(rng.choice([16, 32, 48, 64]))
        job = {"cores": cores, "memory_gib": float(rng.integers(cores, 4 * cores + 1))}
    elif profile == 2:
        job = {"cores": int(rng.integers(4, 65)), "memory_gib": float(rng.integers(300, 2000)),
               "needs": ["bigmem"]}
    elif profile == 3:
        gpus = int(rng.integers(1, 5))
        job = {"cores": 8 * gpus, "memory_gib": float(rng.integers(16, 128 * gpus + 1)),
               "gpus": gpus}
    else:
        job = {"cores": int(rng.integers(1, 65)), "memory_gib": float(rng.integers(1, 200)),
               "needs": ["avx512"]}
    job = {"name": name, **job, "hours": _hours(max(1, minutes))}
    if rng.random() < 0.15:
        job["ready_h"] = _hours(rng.integers(0, 12 * 60))
    if rng.random() < 0.25:
        job["due_h"] = _hours(rng.integers(6 * 60, 168 * 60))
        job["weight"] = float(rng.integers(1, 5))
    return job


def _jobs(n_jobs: int, *, rng: np.random.Generator) -> list[dict]:
    """Singles, pipelines (chains of follows) and sweeps (a counted group plus a gather job)."""
    jobs: list[dict] = []
    n = 0
    while n < n_jobs:
        left = n_jobs - n
        kind = rng.random()
        if kind < 0.08 and left >= 5:
            size = int(rng.integers(2, 6))
            chain = [_job(f"pipe{n:05d}-s{k + 1}", rng=rng, max_minutes=6 * 60)
                     for k in range(size)]
            for prev, cur in zip(chain, chain[1:], strict=False):
                cur["follows"] = [prev["name"]]
            jobs += chain
            n += size
        elif kind < 0.12 and left >= 22:
            count = int(rng.integers(5, 21))
            sweep = {**_job(f"sweep{n:05d}", rng=rng), "count": count}
            sweep.pop("due_h", None)
            gather = {**_job(f"gather{n:05d}", rng=rng), "follows": [sweep["name"]]}
            jobs += [sweep, gather]
            n += count + 1
        else:
            jobs.append(_job(f"job{n:05d}", rng=rng))
            n += 1
    return jobs


def _guillotine(width: int, height: int, pieces: int, *, rng: np.random.Generator,
                min_height: int = 5) -> list[tuple[int, int]]:
    """Cut a width x height rectangle into `pieces` rectangles by straight full cuts.

    The largest piece is cut each time, across a random axis at a random integer point, so
    sizes stay mixed; a piece too small on both axes is never cut.
    """
    out = [(width, height)]
    while len(out) < pieces:
        cuttable = [k for k, (w, h) in enumerate(out) if w >= 2 or h >= 2 * min_height]
        if not cuttable:
            break
        k = max(cuttable, key=lambda k: out[k][0] * out[k][1])
        w, h = out.pop(k)
        if w >= 2 and (h < 2 * min_height or rng.random() < 0.5):
            c = int(rng.integers(1, w))
            out += [(c, h), (w - c, h)]
        else:
            c = int(rng.integers(min_height, h - min_height + 1))
            out += [(w, c), (w, h - c)]
    return out


def _known_optimum(n_jobs: int, n_nodes: int, *, rng: np.random.Generator) -> dict:
    """Identical nodes; each node's cores x [0, H) rectangle cut into jobs: optimum = H.

    Total work is n_nodes * cores * H core-minutes, so no plan ends before H; the cut itself
    is a plan ending at H (pieces of a guillotine cut never overlap, so at every minute their
    cores add up to at most the node's). Memory is 4 GiB per core on node and job alike, so it
    never binds before cores do.
    """
    horizon = int(rng.integers(24 * 60, 72 * 60))
    per_node = np.full(n_nodes, n_jobs // n_nodes)
    per_node[rng.permutation(n_nodes)[: n_jobs % n_nodes]] += 1
    jobs = []
    for i in range(n_nodes):
        for w, h in _guillotine(KNOWN_CORES, horizon, int(per_node[i]), rng=rng):
            jobs.append({"name": f"piece{len(jobs):05d}", "cores": w,
                         "memory_gib": KNOWN_MEM_PER_CORE * w, "hours": _hours(h)})
    jobs = [jobs[k] for k in rng.permutation(len(jobs))]  # the list order carries no hint
    nodes = [{"name": "node", "count": n_nodes, "cores": KNOWN_CORES,
              "memory_gib": KNOWN_MEM_PER_CORE * KNOWN_CORES}]
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0}, "nodes": nodes,
            "jobs": jobs, "_known_optimum_h": _hours(horizon)}


def generate(scale: str, seed: int, known_optimum: bool = False) -> dict:
    """An invented batch document at `scale` (small 200 x 20, medium 2,000 x 200,
    large 10,000 x 1,000, site 50,000 x 5,000, national 100,000 x 10,000 jobs x nodes),
    reproducible from `seed`.

    known_optimum=True: the dict also holds ``_known_optimum_h`` (see the module docstring);
    the job count can fall short of the scale only if a node's rectangle cannot be cut further.
    """
    n_jobs, n_nodes = SCALES[scale]
    if known_optimum:
        return _known_optimum(n_jobs, n_nodes, rng=np.random.default_rng(seed))
    return generate_sized(n_jobs, n_nodes, seed)


def generate_sized(n_jobs: int, n_nodes: int, seed: int) -> dict:
    """An invented batch of `n_jobs` jobs on `n_nodes` nodes (any size; `generate` names
    the usual ones), reproducible from `seed`."""
    rng = np.random.default_rng(seed)
    return {"window": {"start": "2026-12-07T00:00:00", "hours": 168.0},
            "nodes": _nodes(n_nodes, rng=rng), "jobs": _jobs(n_jobs, rng=rng)}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scale", choices=sorted(SCALES), default="small")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--known-optimum", action="store_true")
    ap.add_argument("--out", type=Path, help="write here (default: stdout)")
    args = ap.parse_args(argv)
    doc = generate(args.scale, args.seed, args.known_optimum)
    if "_known_optimum_h" in doc:
        print(f"known optimal makespan: {doc['_known_optimum_h']} h", file=sys.stderr)
    text = json.dumps(batch_doc(doc), indent=1)
    if args.out is None:
        print(text)
    else:
        tmp = args.out.with_suffix(args.out.suffix + ".tmp")
        tmp.write_text(text + "\n", encoding="utf-8")
        tmp.replace(args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
