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


def test_schemas_state_the_time_rule_and_the_limits():
    """Each time as hours (`*_h`) or as an ISO 8601 calendar time, not both; every time-like
    field and resource bounded."""
    batch = json.loads(schema_texts()["batch.schema.json"])["$defs"]
    job, maintenance = batch["JobGroup"], batch["Maintenance"]
    for props in (job["properties"]["ready"], job["properties"]["due"],
                  maintenance["properties"]["start"], maintenance["properties"]["end"]):
        calendar = next(option for option in props["anyOf"] if option.get("type") == "string")
        assert {f["format"] for f in calendar["anyOf"]} == {"date-time", "date"}
    assert "not both" in job["description"] and "not both" in maintenance["description"]
    assert job["not"] == {"anyOf": [{"required": ["ready", "ready_h"]},
                                    {"required": ["due", "due_h"]}]}
    assert "required" not in maintenance  # start_h or start, end_h or end (allOf / oneOf)
    assert maintenance["allOf"][0] == {"oneOf": [{"required": ["start_h"]},
                                                 {"required": ["start"]}]}
    assert job["properties"]["hours"]["maximum"] == 10_000
    assert job["properties"]["ready_h"]["anyOf"][0]["maximum"] == 100_000
    assert batch["NodeGroup"]["properties"]["speed"]["minimum"] == 0.01
    plan = json.loads(schema_texts()["plan.schema.json"])
    assert plan["required"] == ["assignments"]
    assert plan["$defs"]["Assignment"]["required"] == ["job", "node"]


def test_every_field_has_a_human_title_and_a_description():
    """A reader of the schema (or of a form built from it) sees "Memory (GiB)", not the
    generated "Memory Gib", and a sentence saying what the field means."""
    for name, text in schema_texts().items():
        for model, spec in json.loads(text)["$defs"].items():
            for field, prop in spec.get("properties", {}).items():
                assert prop.get("description"), f"{name}: {model}.{field} has no description"
                generated = field.replace("_", " ").title()  # "memory_gib" -> "Memory Gib"
                assert prop.get("title") and ("_" not in field and field != "gpus"
                                              or prop["title"] != generated), (
                    f"{name}: {model}.{field} has the generated title {prop.get('title')!r}")
