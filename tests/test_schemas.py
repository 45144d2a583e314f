"""The committed JSON Schemas are exactly what the models generate, and they accept the examples."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from assignplan.cli import app
from assignplan.schemas import schema_texts

ROOT = Path(__file__).resolve().parents[1]


def test_committed_schemas_match_models():
    for name, text in schema_texts().items():
        committed = (ROOT / "schemas" / name).read_text(encoding="utf-8")
        assert committed == text, f"schemas/{name} is stale: run `make schema`"


def test_schema_command_writes_both(tmp_path):
    result = CliRunner().invoke(app, ["schema", "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    for name, text in schema_texts().items():
        assert (tmp_path / name).read_text(encoding="utf-8") == text


def test_batch_schema_describes_job_fields():
    schema = json.loads(schema_texts()["batch.schema.json"])
    job = schema["$defs"]["JobGroup"]
    assert set(job["required"]) == {"name", "cores", "memory_gib", "hours"}
    assert job["additionalProperties"] is False
    assert job["properties"]["cores"]["exclusiveMinimum"] == 0
