"""JSON Schemas of the batch, plan, runtime-model, state and changes documents, generated
from the pydantic models."""

from __future__ import annotations

import json

from assignplan.documents import Batch, PlanDoc
from assignplan.risk.models import ModelDocument
from assignplan.state import StateDoc
from assignplan.whatif import ChangesDoc

SCHEMA_ID = "https://assignplan.invalid/schemas/"


def schema_texts() -> dict[str, str]:
    """File name -> schema text (stable formatting, so a test can diff the committed files)."""
    out = {}
    for name, model, title in (("batch.schema.json", Batch, "assignplan batch"),
                               ("plan.schema.json", PlanDoc, "assignplan plan"),
                               ("runtime-model.schema.json", ModelDocument,
                                "assignplan runtime model"),
                               ("state.schema.json", StateDoc, "assignplan week state"),
                               ("changes.schema.json", ChangesDoc,
                                "assignplan inventory changes")):
        schema = {"$schema": "https://json-schema.org/draft/2020-12/schema",
                  "$id": SCHEMA_ID + name, "title": title, **model.model_json_schema()}
        schema["title"] = title
        out[name] = json.dumps(schema, indent=2, ensure_ascii=False) + "\n"
    return out
