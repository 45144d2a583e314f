"""Schedule-builder throughput (job placements per second) and greedy run time per scale.

    .venv/bin/python benchmarks/bench_builder.py [--repeats 7] [--pop 64] [--no-write]

Prints a markdown table and writes it as the section "## Schedule builder throughput" of
benchmarks/RESULTS.md (replacing that section only; other sections are left as they are).
Numbers, not asserts: timings depend on the machine and on what else runs on it.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import sys
import time
from pathlib import Path

import numba
import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from assignplan.documents import Batch
from assignplan.expand import expand_batch
from assignplan.generate import SCALES, batch_doc, generate
from assignplan.instance import Instance, build_instance
from assignplan.methods.greedy import greedy_assign
from assignplan.schedule import evaluate_population

SECTION = "## Schedule builder throughput"
COMMAND = ".venv/bin/python benchmarks/bench_builder.py"


def instance(scale: str, seed: int) -> Instance:
    doc = batch_doc(generate(scale, seed))
    return build_instance(expand_batch(Batch.model_validate_json(json.dumps(doc))))


def random_population(inst: Instance, pop_size: int, *, rng: np.random.Generator) -> np.ndarray:
    """int64[pop_size, J]: each job on a uniformly drawn eligible node."""
    counts = inst.eligible.sum(axis=1)
    pick = (rng.random((pop_size, inst.n_jobs)) * counts).astype(np.int64)  # k-th eligible
    out = np.empty((pop_size, inst.n_jobs), dtype=np.int64)
    for j in range(inst.n_jobs):
        nodes = np.flatnonzero(inst.eligible[j])
        out[:, j] = nodes[pick[:, j]]
    return out


def median_seconds(fn, repeats: int) -> float:
    fn()  # warm-up: compile or load the cached kernel, fault pages in
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def throughput_rows(repeats: int, pop_size: int, *, rng: np.random.Generator) -> list[str]:
    rows = []
    for scale, pop, threads in (("medium", pop_size, 1), ("medium", pop_size, None),
                                ("large", max(4, pop_size // 4), 1)):
        inst = instance(scale, 1)
        popn = random_population(inst, pop, rng=rng)
        numba.set_num_threads(threads or numba.config.NUMBA_NUM_THREADS)
        sec = median_seconds(lambda inst=inst, popn=popn: evaluate_population(inst, popn),
                             repeats)
        rate = pop * inst.n_jobs / sec
        rows.append(f"| builder, random eligible assignments | {scale} {inst.n_jobs:,} x "
                    f"{inst.n_nodes:,} | {pop} | {numba.get_num_threads()} | {sec * 1e3:.1f} ms"
                    f" | {rate / 1e6:.2f} M |")
        print(rows[-1], flush=True)
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    return rows


def greedy_rows(repeats: int) -> list[str]:
    rows = []
    for scale in SCALES:
        inst = instance(scale, 1)
        sec = median_seconds(lambda inst=inst: greedy_assign(inst), repeats)
        rows.append(f"| greedy (one plan) | {scale} {inst.n_jobs:,} x {inst.n_nodes:,} | 1 | 1 |"
                    f" {sec * 1e3:.1f} ms | {inst.n_jobs / sec / 1e6:.2f} M |")
        print(rows[-1], flush=True)
    return rows


def machine_note() -> str:
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux
    return (f"{cpu}, {os.cpu_count()} logical CPUs, shared with other work while measured "
            f"(load average {load}); peak memory of this run {peak:.0f} MiB (10,000 x 1,000 "
            f"instance included); "
            f"Python {platform.python_version()}, numpy {np.__version__}, "
            f"numba {numba.__version__} (threading layer {numba.threading_layer()})")


def write_section(text: str, path: Path, section: str = SECTION) -> None:
    """Replace (or append) the section headed `section` of RESULTS.md, leaving every other
    section untouched."""
    old = path.read_text(encoding="utf-8") if path.exists() else "# Benchmark results\n"
    head, found, tail = old.partition(section)
    if found:
        nxt = tail.find("\n## ")
        tail = tail[nxt + 1:] if nxt >= 0 else ""
        new = head + text + ("\n" + tail if tail else "")
    else:
        new = old.rstrip("\n") + "\n\n" + text
    tmp = path.with_suffix(".md.tmp")
    tmp.write_text(new, encoding="utf-8")
    tmp.replace(path)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--pop", type=int, default=64)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--no-write", action="store_true")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)

    header = ["| what | batch (jobs x nodes) | plans per call | threads | median time per call "
              "| placements / s |", "|---|---|---:|---:|---:|---:|"]
    print("\n".join(header), flush=True)
    rows = throughput_rows(args.repeats, args.pop, rng=rng) + greedy_rows(args.repeats)
    text = "\n".join([
        SECTION, "",
        "A placement = one job given its start on its node's free-capacity profile (serial "
        "SGS). Batches from `assignplan/generate.py` (seed 1). Builder rows evaluate a "
        "population of random eligible assignments per call (`evaluate_population`); the "
        "greedy rows time one `greedy_assign` (it probes every eligible node per job, so its "
        "rate counts jobs placed, not probes). Median of "
        f"{args.repeats} calls after one warm-up call (numba compile/cache load excluded).", "",
        *header, *rows, "",
        f"Reproduce: `{COMMAND} --repeats {args.repeats} --pop {args.pop} --seed {args.seed}`"
        " (from the repository root).", "",
        f"Machine: {machine_note()}.", "",
        "Target: >= 1 M placements/s on one thread.", "",
    ])
    if not args.no_write:
        write_section(text, HERE / "RESULTS.md")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
