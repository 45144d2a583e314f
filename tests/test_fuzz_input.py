"""Acceptance fuzz test of issue 18: arbitrary JSON into `solve` and `check` never crashes.

Fields of the bundled example (and of a plan of it) are replaced by arbitrary JSON values
(wrong types, huge and tiny numbers, NaN and Infinity as numbers and as text, deep nesting,
long and unicode text) or get unknown keys, so most cases get past the syntax into the deep
checks. Whatever the input: exit 0 or 2 (check: 1 as well, for a plan with violations), never a
traceback, every error line names the file, no file written on exit 2, and a plan written on
exit 0 passes the independent checker.
"""

from __future__ import annotations

import copy
import json
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from assignplan.check import check_plan
from assignplan.cli import app
from assignplan.expand import load_batch
from assignplan.reading import load_plan

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
SMALL = json.loads((EXAMPLES / "small.json").read_text())
runner = CliRunner()

# Values at the edges of every limit and of the number types. Whole numbers stay small or
# beyond every count limit: a valid count of 10,000 nodes alone takes seconds to plan.
EDGE_NUMBERS = [0, -1, 1, 2, 0.5, 1e-300, 5e-324, 0.01, 0.009, 1000.0, 1000.5, 10_000.0,
                10_000.01, 100_000.0, 1_000_001, 1e9, 3.6e7, 1e15, 1e18, 1e300, 2**31,
                2**53 + 1, 2**63, 2**64, -2**63, 10**30, 10**400, 1_048_577.0, float("nan"),
                float("inf"), float("-inf")]
EDGE_TEXTS = ["", " ", "NaN", "Infinity", "-inf", "1e999", "4", "2026-12-07",
              "2026-12-07T09:00", "2026-12-07T09:00+05:00", "2026-12-06T23:00", "9999-12-31",
              "0001-01-01", "next monday", "gpu a100", "gpü", "x" * 300, "\u0000", "\udc00",
              "a\nb", "\u2028",
              "fetch-data", "preprocess", "cpu-1", "gpu", "accel", "☃" * 50]
FIELD_NAMES = ["ready", "due", "ready_h", "due_h", "start", "end", "start_h", "end_h", "count",
               "cores", "gpus", "memory_gib", "hours", "speed", "weight", "tags", "needs",
               "follows", "maintenance", "name", "window", "method", "makespan_h", "walltime"]

scalars = st.one_of(
    st.none(), st.booleans(), st.sampled_from(EDGE_NUMBERS), st.integers(-300, 300),
    st.floats(), st.sampled_from(EDGE_TEXTS), st.text(max_size=30),
)
nested = st.integers(1, 400).map(lambda depth: json.loads("[" * depth + "]" * depth))
json_values = st.one_of(
    scalars, nested,
    st.recursive(scalars, lambda inner: st.lists(inner, max_size=4)
                 | st.dictionaries(st.sampled_from(FIELD_NAMES) | st.text(max_size=8), inner,
                                   max_size=4), max_leaves=8),
)


def _paths(value, here=()):
    """Every place in a JSON document: (path, value), the document itself first."""
    yield here, value
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _paths(item, (*here, key))
    elif isinstance(value, list):
        for k, item in enumerate(value):
            yield from _paths(item, (*here, k))


@st.composite
def mutated(draw, base: dict):
    """`base` with one to three edits: a value replaced (mostly a number, text or true/false,
    so that the rest of the document still reaches the deep checks), a key added or removed.
    (A whole document of arbitrary JSON has a test of its own.)"""
    doc = copy.deepcopy(base)
    for _ in range(draw(st.integers(1, 3))):
        places = list(_paths(doc))[1:]
        leaves = [p for p in places if not isinstance(p[1], dict | list)]
        pool = leaves if draw(st.integers(0, 3)) else places
        path, value = draw(st.sampled_from(pool))
        action = draw(st.sampled_from(["replace", "replace", "replace", "add", "remove"]))
        if action == "replace":
            new = draw(json_values)
            parent = doc
            for key in path[:-1]:
                parent = parent[key]
            parent[path[-1]] = new
        elif action == "add" and isinstance(value, dict):
            value[draw(st.sampled_from(FIELD_NAMES) | st.text(max_size=8))] = draw(json_values)
        elif action == "remove" and isinstance(value, dict) and value:
            value.pop(draw(st.sampled_from(sorted(value))))
        elif action == "remove" and isinstance(value, list) and value:
            value.pop(draw(st.integers(0, len(value) - 1)))
    return doc


def _no_crash(result, *files: Path) -> None:
    assert result.exception is None or isinstance(result.exception, SystemExit), (
        result.exception, result.output)
    assert "Traceback" not in result.output
    if result.exit_code == 2:
        lines = result.stderr.splitlines()
        assert lines and all(line.startswith(tuple(f"{f}: " for f in files)) for line in lines), (
            result.stderr)


def _write(folder: Path, name: str, doc, *, ascii_only: bool = False) -> Path:
    """The document as JSON text (NaN and Infinity as bare tokens); unicode as UTF-8 (a lone
    surrogate then makes the file invalid UTF-8) or, `ascii_only`, as \\u escapes."""
    path = folder / name
    path.write_text(json.dumps(doc, ensure_ascii=ascii_only), errors="surrogatepass")
    return path


FUZZ = settings(max_examples=300, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@FUZZ
@given(mutated(SMALL))
def test_solve_never_crashes_and_writes_only_checked_plans(doc):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        batch, plan = _write(folder, "batch.json", doc), folder / "plan.json"
        result = runner.invoke(app, ["solve", str(batch), "--method", "greedy", "--out",
                                     str(plan), "--quiet"])
        _no_crash(result, batch)
        assert result.exit_code in (0, 2), result.output
        if result.exit_code == 2:
            assert sorted(p.name for p in folder.iterdir()) == ["batch.json"]
        else:
            assert check_plan(load_batch(batch), load_plan(plan)) == []


@settings(max_examples=60, deadline=None)
@given(json_values)
@example({"window\n": None})  # a line break in a key once split an error line in two
@example(json.loads("[" * 150 + "]" * 150))
def test_any_json_document_is_refused_in_words(doc):
    with tempfile.TemporaryDirectory() as tmp:
        batch = _write(Path(tmp), "batch.json", doc)
        result = runner.invoke(app, ["solve", str(batch), "--method", "greedy"])
        _no_crash(result, batch)
        assert result.exit_code == 2


@pytest.fixture(scope="module")
def small_plan(tmp_path_factory) -> dict:
    plan = tmp_path_factory.mktemp("plan") / "plan.json"
    result = runner.invoke(app, ["solve", str(EXAMPLES / "small.json"), "--method", "greedy",
                                 "--out", str(plan)])
    assert result.exit_code == 0, result.output
    return json.loads(plan.read_text())


@FUZZ
@given(data=st.data())
def test_check_never_crashes(small_plan, data):
    mutate_batch = data.draw(st.booleans())
    batch_doc = data.draw(mutated(SMALL)) if mutate_batch else SMALL
    plan_doc = small_plan if mutate_batch else data.draw(mutated(small_plan))
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        batch = _write(folder, "batch.json", batch_doc)
        plan = _write(folder, "plan.json", plan_doc, ascii_only=True)
        result = runner.invoke(app, ["check", str(batch), str(plan)])
        _no_crash(result, batch, plan)
        assert result.exit_code in (0, 1, 2), result.output
        if result.exit_code == 1:  # violations: listed, then counted (then, if the plan
            # says so, what it was made to minimise)
            lines = [line for line in result.stdout.splitlines()
                     if not line.startswith("the plan was made to minimise")]
            assert " violation" in lines[-1]
        assert sorted(p.name for p in folder.iterdir()) == ["batch.json", "plan.json"]
