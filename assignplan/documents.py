"""The input and output documents: a batch (window, node groups, job groups) and a plan.

Pydantic models with every field's description, title and limits, from which the published
JSON Schemas are generated. Times are hours from the window start (`*_h`) or ISO 8601
calendar times (the same name without `_h`); the models only check each field on its own:
`reading` turns files into documents, `expand` does every cross-field check.
"""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    WithJsonSchema,
)
from pydantic_core import PydanticCustomError

from assignplan.units import (
    MAX_CORES,
    MAX_GPUS,
    MAX_JOB_HOURS,
    MAX_MEMORY_GIB,
    MAX_OFFSET_HOURS,
    MAX_SPEED,
    MAX_WEIGHT,
    MIN_JOB_HOURS,
    MIN_SPEED,
)

CALENDAR_HELP = "an ISO 8601 calendar time such as 2026-12-07T08:00 or 2026-12-07"


def _calendar_time(value: Any) -> Any:
    """ISO 8601 text -> datetime, in JSON and in Python input alike; a date alone is midnight.

    Anything that is not text is left to pydantic's strict datetime check, which refuses it.
    """
    if isinstance(value, str):
        try:
            return datetime.fromisoformat(value)
        except ValueError:
            raise PydanticCustomError("calendar_time", "must be {help}",
                                      {"help": CALENDAR_HELP}) from None
    return value


CalendarTime = Annotated[
    datetime,
    BeforeValidator(_calendar_time),
    WithJsonSchema({"type": "string", "anyOf": [{"format": "date-time"}, {"format": "date"}]}),
]


Name = Annotated[str, Field(min_length=1, max_length=200, pattern=r"^[A-Za-z0-9_.:+\-]+$")]


# No NaN or Infinity anywhere: a number that is not finite has no place in a plan.
_STRICT = ConfigDict(strict=True, extra="forbid", frozen=True, allow_inf_nan=False)


_PLAN = ConfigDict(strict=True, extra="forbid", allow_inf_nan=False)


# Offsets a plan may state (either sign): no plan of a valid batch ends later, its horizon
# being below MAX_RESOURCE_MINUTES (1.9e16 h), and in minutes they still fit int64 (9.2e18).
MAX_PLAN_HOURS = 1e17


TIME_RULE = (
    "Each time is given either as `<name>_h`, hours from the window start, or as `<name>`, an"
    " ISO 8601 calendar time (a date alone is midnight), not both. A calendar time without a"
    " UTC offset is read in the window start's offset; one with an offset needs a window start"
    " with an offset too."
)


def _offset(description: str) -> Any:
    return Field(default=None, ge=0, le=MAX_OFFSET_HOURS, description=description)


def _calendar(description: str) -> Any:
    return Field(default=None, description=description)


class Window(BaseModel):
    """The planning window: the week the batch is planned for."""

    model_config = _STRICT
    start: CalendarTime = Field(
        description="Calendar time of minute 0 (ISO 8601; a date alone is midnight).")
    hours: float = Field(default=168.0, gt=0, le=MAX_OFFSET_HOURS,
                         description="Length of the window in hours.")


class Maintenance(BaseModel):
    """A half-open interval [start, end) during which nothing may run on the node."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "A half-open interval [start, end) during which nothing may run on the"
                       " node. " + TIME_RULE,
        "allOf": [{"oneOf": [{"required": ["start_h"]}, {"required": ["start"]}]},
                  {"oneOf": [{"required": ["end_h"]}, {"required": ["end"]}]}]})
    start_h: float | None = _offset("Start, in hours from the window start.")
    end_h: float | None = _offset("End (exclusive), in hours from the window start.")
    start: CalendarTime | None = _calendar("Start as a calendar time (instead of start_h).")
    end: CalendarTime | None = _calendar("End as a calendar time (instead of end_h).")


class NodeGroup(BaseModel):
    """One node, or `count` identical nodes named `<name>-<k>`."""

    model_config = _STRICT
    name: Name
    count: int = Field(default=1, ge=1, le=100_000)
    cores: int = Field(gt=0, le=MAX_CORES)
    memory_gib: float = Field(gt=0, le=MAX_MEMORY_GIB)
    gpus: int = Field(default=0, ge=0, le=MAX_GPUS)
    speed: float = Field(default=1.0, ge=MIN_SPEED, le=MAX_SPEED,
                         description="Relative speed; 1.0 = reference node.")
    tags: list[Name] = Field(default_factory=list)
    maintenance: list[Maintenance] = Field(default_factory=list)


class JobGroup(BaseModel):
    """One job, or `count` identical jobs named `<name>-<k>` (a parameter sweep)."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "One job, or `count` identical jobs named `<name>-<k>` (a parameter"
                       " sweep). " + TIME_RULE,
        "not": {"anyOf": [{"required": ["ready", "ready_h"]}, {"required": ["due", "due_h"]}]}})
    name: Name
    count: int = Field(default=1, ge=1, le=1_000_000)
    cores: int = Field(gt=0, le=MAX_CORES)
    memory_gib: float = Field(gt=0, le=MAX_MEMORY_GIB)
    hours: float = Field(ge=MIN_JOB_HOURS, le=MAX_JOB_HOURS,
                         description="Run time on a reference node (speed 1.0).")
    gpus: int = Field(default=0, ge=0, le=MAX_GPUS)
    needs: list[Name] = Field(default_factory=list, description="Node tags the job requires.")
    follows: list[Name] = Field(
        default_factory=list, description="Jobs or job groups that must end before this starts."
    )
    ready_h: float | None = _offset("Earliest start, in hours from the window start (default 0).")
    due_h: float | None = _offset("Due time, in hours from the window start.")
    weight: float = Field(default=1.0, ge=0, le=MAX_WEIGHT)
    ready: CalendarTime | None = _calendar("Earliest start as a calendar time (instead of"
                                           " ready_h).")
    due: CalendarTime | None = _calendar("Due time as a calendar time (instead of due_h).")


class Batch(BaseModel):
    """The input document: a window, the node inventory and the job list."""

    model_config = _STRICT
    window: Window
    nodes: list[NodeGroup] = Field(min_length=1)
    jobs: list[JobGroup] = Field(min_length=1)


def _plan_offset(description: str) -> Any:
    return Field(default=None, ge=-MAX_PLAN_HOURS, le=MAX_PLAN_HOURS, description=description)


PlanHours = Annotated[float, Field(ge=-MAX_PLAN_HOURS, le=MAX_PLAN_HOURS)]


class Assignment(BaseModel):
    """Where and when one job runs: its start as `start_h` or `start` (or both, agreeing)."""

    model_config = _PLAN
    job: Name
    node: Name
    start_h: float | None = _plan_offset("Start, in hours from the window start.")
    end_h: float | None = _plan_offset(
        "End, in hours from the window start; optional (the model's duration gives it).")
    start: CalendarTime | None = _calendar("Start as a calendar time (ISO 8601).")
    end: CalendarTime | None = _calendar("End as a calendar time (ISO 8601); optional.")


class Objective(BaseModel):
    """The lexicographic objective of a plan, in hours."""

    model_config = _PLAN
    makespan_h: float
    weighted_tardiness_h: float
    weighted_completion_h: float


class HistoryRow(BaseModel):
    """One generation of an iterative method: best and median fitness."""

    model_config = _PLAN
    generation: int
    evaluations: int
    best_makespan_h: float
    median_makespan_h: float
    best_tardiness_h: float = 0.0


class PlanDoc(BaseModel):
    """The plan document written by `solve --out` and read by `check` and `report`.

    Only `assignments` is required, so a hand-written plan of job, node and start is a plan.
    """

    model_config = _PLAN
    method: str | None = None
    status: str = "feasible"
    seed: int | None = None
    window_start: CalendarTime | None = None
    makespan_h: float | None = _plan_offset("Stated makespan (hours); checked when given.")
    lower_bound_h: float | None = _plan_offset(
        "Provable lower bound on the makespan (hours); computed when not given.")
    lower_bound_parts_h: dict[str, PlanHours] = Field(
        default_factory=dict,
        description="Each part of the provable lower bound (hours); the largest is the bound "
                    "unless the method proved a better one.")
    gap_pct: float | None = None
    objective: Objective | None = None
    seconds: float = 0.0
    assignments: list[Assignment]
    history: list[HistoryRow] = Field(default_factory=list)
