"""Runtime models: how each job's `hours` becomes a random run time in a replay.

A model is a small validated document (JSON, schema `runtime-model.schema.json`) or a short
spelling on the command line; both give the same pydantic object:

    lognormal:0.3         {"model": "lognormal", "cv": 0.3, "groups": {"render": 0.8}}
    uniform:0.5,1.5       {"model": "uniform", "low": 0.5, "high": 1.5}
    scale:1.2             {"model": "scale", "factor": 1.2}
    trace:KTH.swf         {"model": "trace", "path": "KTH.swf", "by_cores": true}

Every model draws a factor per job and sample; the run time is the factor times the planned
duration (`kernels_replay.sampled_minutes`), cut at the job's `limit_h`.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, RootModel, ValidationError, model_validator

from assignplan.errors import InputError

_STRICT = ConfigDict(strict=True, extra="forbid", frozen=True)
MAX_FACTOR = 100.0  # keeps a sampled run time of the longest job inside int64 minutes
SPELLINGS = "lognormal:CV, uniform:LOW,HIGH, scale:FACTOR, trace:SWF or a model file (.json)"


class Lognormal(BaseModel):
    """Factor exp(sigma * Z), Z standard normal: median 1 (median run time = `hours`), mean
    exp(sigma^2 / 2), coefficient of variation cv = sqrt(exp(sigma^2) - 1)."""

    model_config = _STRICT
    model: Literal["lognormal"] = Field(title="Model", description="Log-normal factors: "
                                        "median 1, so the median run time is `hours`.")
    cv: float = Field(gt=0, le=10, title="Coefficient of variation",
                      description="Coefficient of variation of the run time.")
    groups: dict[str, Annotated[float, Field(gt=0, le=10)]] = Field(
        default_factory=dict, title="Per job group",
        description="Another cv for the jobs of these job groups (names as in the batch).")


class Uniform(BaseModel):
    """Factor uniform on [low, high]."""

    model_config = _STRICT
    model: Literal["uniform"] = Field(title="Model",
                                      description="Factors drawn uniformly on [low, high].")
    low: float = Field(gt=0, le=MAX_FACTOR, title="Lowest factor",
                       description="Smallest factor on `hours`.")
    high: float = Field(gt=0, le=MAX_FACTOR, title="Highest factor",
                        description="Largest factor on `hours`.")

    @model_validator(mode="after")
    def _ordered(self) -> Uniform:
        if self.low > self.high:
            raise ValueError(f"low {self.low:g} is above high {self.high:g}")
        return self


class Scale(BaseModel):
    """Every job runs `factor` times its estimate: one future, no spread (1.0: the plan)."""

    model_config = _STRICT
    model: Literal["scale"] = Field(title="Model",
                                    description="One factor for every job: one future.")
    factor: float = Field(gt=0, le=MAX_FACTOR, title="Factor",
                          description="Every job runs `factor` x `hours`.")


class Trace(BaseModel):
    """Factors drawn from a trace's actual / requested run times (Standard Workload Format),
    reading each job's `hours` as its requested time."""

    model_config = _STRICT
    model: Literal["trace"] = Field(title="Model", description="Factors drawn from a trace's "
                                    "actual / requested run times.")
    path: str = Field(min_length=1, title="Trace file",
                      description="SWF file; relative to the model file's folder.")
    by_cores: bool = Field(
        default=False, title="By size class",
        description="Draw each job's factor from the trace jobs of its size class (cores "
                    "1, 2-3, 4-7, 8-15, ...) where that class has `min_jobs` jobs, else from "
                    "the whole trace.")
    min_jobs: int = Field(default=200, ge=1, le=10_000_000, title="Jobs per size class",
                          description="Trace jobs a size class needs to be used on its own.")


RuntimeModel = Annotated[Lognormal | Uniform | Scale | Trace, Field(discriminator="model")]


class ModelDocument(RootModel[RuntimeModel]):
    """A runtime model document: one of lognormal, uniform, scale, trace (field `model`)."""


def _lines(err: ValidationError, source: str) -> list[str]:
    """One line per problem, `source: field: message`, in the words of the batch errors."""
    out = []
    for e in err.errors():
        loc = ".".join(str(p) for p in e["loc"] if p not in ("lognormal", "uniform", "scale",
                                                             "trace"))
        msg = str(e["msg"]).replace("Input should be", "must be").replace("Value error, ", "")
        if e["type"] == "extra_forbidden":
            msg = "unknown field"
        elif e["type"] == "missing":
            msg = "required field is missing"
        elif e["type"] == "union_tag_not_found":
            loc, msg = "model", "required field is missing (lognormal, uniform, scale or trace)"
        elif e["type"] == "union_tag_invalid":
            msg = f"unknown model '{e['input'].get('model')}'; choose lognormal, uniform," \
                  " scale or trace"
        out.append(f"{source}: {loc + ': ' if loc else ''}{msg}")
    return out


def validate_model(data: object, source: str) -> RuntimeModel:
    """A model document (parsed JSON) validated; InputError with one line per problem."""
    try:
        return ModelDocument.model_validate(data, strict=False).root
    except ValidationError as err:
        raise InputError(_lines(err, source)) from None


def read_model_file(path: Path) -> RuntimeModel:
    """A model file; a trace path inside it is taken relative to the file's folder."""
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read ({exc.__class__.__name__})") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not valid JSON: {exc}") from None
    model = validate_model(data, str(path))
    if isinstance(model, Trace) and not Path(model.path).is_absolute():
        model = model.model_copy(update={"path": str(path.parent / model.path)})
    return model


def parse_model(text: str, flag: str = "--model") -> RuntimeModel:
    """A model from its short spelling (`lognormal:0.3`, `uniform:0.5,1.5`, `scale:1.2`,
    `trace:PATH`) or the name of a model file ending in `.json`."""
    name, sep, arg = text.partition(":")
    where = f"{flag} {text}"
    if not sep and text.lower().endswith(".json"):
        return read_model_file(Path(text))
    examples = {"lognormal": "lognormal:0.3", "uniform": "uniform:0.5,1.5", "scale": "scale:1.2",
                "trace": "trace:KTH-SP2.swf"}
    if name not in examples:
        raise InputError(f"{where}: unknown runtime model; spell one as {SPELLINGS}")
    if not arg:
        raise InputError(f"{where}: {name} needs its parameters, e.g. {examples[name]}")
    if name == "trace":
        return validate_model({"model": "trace", "path": arg}, where)
    try:
        numbers = [float(x) for x in arg.split(",")]
    except ValueError:
        raise InputError(f"{where}: '{arg}' is not a number (or two, for uniform)") from None
    fields = {"lognormal": ("cv",), "uniform": ("low", "high"), "scale": ("factor",)}[name]
    if len(numbers) != len(fields):
        raise InputError(f"{where}: {name} takes {' and '.join(fields)}, e.g. {examples[name]}")
    return validate_model({"model": name, **dict(zip(fields, numbers, strict=True))}, where)


def describe(model: RuntimeModel) -> str:
    """The model in a few words, for tables and reports."""
    if isinstance(model, Lognormal):
        extra = f"; {len(model.groups)} groups with their own cv" if model.groups else ""
        return f"lognormal, cv {model.cv:g} (median = hours{extra})"
    if isinstance(model, Uniform):
        return f"uniform factor {model.low:g}-{model.high:g}"
    if isinstance(model, Scale):
        return f"every job x {model.factor:g}"
    classes = f", by size class (>= {model.min_jobs} jobs)" if model.by_cores else ""
    return f"actual/requested from {Path(model.path).name}{classes}"
