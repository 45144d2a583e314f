"""The input and output documents: a batch (window, node groups, job groups) and a plan.

Pydantic models with every field's description, title and limits, from which the published
JSON Schemas are generated. Times are hours from the window start (`*_h`) or ISO 8601
calendar times (the same name without `_h`); the models only check each field on its own:
`reading` turns files into documents, `expand` does every cross-field check.
"""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    WithJsonSchema,
    model_validator,
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


def _offset(title: str, description: str) -> Any:
    return Field(default=None, ge=0, le=MAX_OFFSET_HOURS, title=title, description=description)


def _calendar(title: str, description: str) -> Any:
    return Field(default=None, title=title, description=description)


class Window(BaseModel):
    """The planning window: the week the batch is planned for."""

    model_config = _STRICT
    start: CalendarTime = Field(
        title="Window start", description="Calendar time of minute 0 (ISO 8601; a date alone "
        "is midnight); every `*_h` offset counts from here.")
    hours: float = Field(default=168.0, gt=0, le=MAX_OFFSET_HOURS, title="Window length (h)",
                         description="Length of the window in hours; jobs ending later are "
                                     "planned and reported as past the window.")


class Maintenance(BaseModel):
    """A half-open interval [start, end) during which nothing may run on the node."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "A half-open interval [start, end) during which nothing may run on the"
                       " node. " + TIME_RULE,
        "allOf": [{"oneOf": [{"required": ["start_h"]}, {"required": ["start"]}]},
                  {"oneOf": [{"required": ["end_h"]}, {"required": ["end"]}]}]})
    start_h: float | None = _offset("Start (h from window start)",
                                    "Start, in hours from the window start.")
    end_h: float | None = _offset("End (h from window start)",
                                  "End (exclusive), in hours from the window start.")
    start: CalendarTime | None = _calendar("Start (calendar time)",
                                           "Start as a calendar time (instead of start_h).")
    end: CalendarTime | None = _calendar("End (calendar time)",
                                         "End as a calendar time (instead of end_h).")


class NodeGroup(BaseModel):
    """One node, or `count` identical nodes named `<name>-<k>`."""

    model_config = _STRICT
    name: Name = Field(title="Name", description="The node's name, or the group's: its members "
                       "are `<name>-<k>`, k from 1, zero-padded to the width of count.")
    count: int = Field(default=1, ge=1, le=100_000, title="Count",
                       description="How many identical nodes the group holds.")
    cores: int = Field(gt=0, le=MAX_CORES, title="Cores", description="Cores per node.")
    memory_gib: float = Field(gt=0, le=MAX_MEMORY_GIB, title="Memory (GiB)",
                              description="Memory per node, GiB (compared in whole MiB).")
    gpus: int = Field(default=0, ge=0, le=MAX_GPUS, title="GPUs", description="GPUs per node.")
    speed: float = Field(default=1.0, ge=MIN_SPEED, le=MAX_SPEED, title="Speed",
                         description="Relative speed; 1.0 = reference node. A job of h hours "
                                     "runs ceil(h * 60 / speed) minutes here.")
    tags: list[Name] = Field(default_factory=list, title="Tags",
                             description="Hardware or site tags jobs can ask for (`needs`).")
    maintenance: list[Maintenance] = Field(
        default_factory=list, title="Maintenance",
        description="Windows during which nothing may run on these nodes.")
    cost: float | None = Field(default=None, ge=0, le=1e9, title="Cost per node",
                               description="What one node of this group costs, in any unit "
                               "you choose; `assignplan size` then minimises the total cost "
                               "instead of the node count.")


class JobGroup(BaseModel):
    """One job, or `count` identical jobs named `<name>-<k>` (a parameter sweep)."""

    model_config = ConfigDict(**_STRICT, json_schema_extra={
        "description": "One job, or `count` identical jobs named `<name>-<k>` (a parameter"
                       " sweep). " + TIME_RULE,
        "not": {"anyOf": [{"required": ["ready", "ready_h"]}, {"required": ["due", "due_h"]}]}})
    name: Name = Field(title="Name", description="The job's name, or the group's: its members "
                       "are `<name>-<k>` (a parameter sweep).")
    count: int = Field(default=1, ge=1, le=1_000_000, title="Count",
                       description="How many identical jobs the group holds.")
    cores: int = Field(gt=0, le=MAX_CORES, title="Cores", description="Cores the job uses.")
    memory_gib: float = Field(gt=0, le=MAX_MEMORY_GIB, title="Memory (GiB)",
                              description="Memory the job uses, GiB.")
    hours: float = Field(ge=MIN_JOB_HOURS, le=MAX_JOB_HOURS, title="Run time (h)",
                         description="Run time on a reference node (speed 1.0), hours.")
    gpus: int = Field(default=0, ge=0, le=MAX_GPUS, title="GPUs",
                      description="GPUs the job uses.")
    needs: list[Name] = Field(default_factory=list, title="Needs",
                              description="Node tags the job requires (all of them).")
    follows: list[Name] = Field(
        default_factory=list, title="Follows",
        description="Jobs or job groups that must end before this starts (a group: all "
                    "its members).")
    ready_h: float | None = _offset("Ready (h from window start)",
                                    "Earliest start, in hours from the window start (default 0).")
    due_h: float | None = _offset("Due (h from window start)",
                                  "Due time, in hours from the window start; ending later "
                                  "counts as tardiness, weighted by `weight`.")
    weight: float = Field(default=1.0, ge=0, le=MAX_WEIGHT, title="Weight",
                          description="Weight of the job's tardiness and completion time.")
    limit_h: float | None = Field(
        default=None, gt=0, le=MAX_OFFSET_HOURS, title="Run-time limit (h)",
        description="Hard run-time limit, hours of wall time: a job still running then is "
                    "stopped, as a cluster's scheduler stops it. Plans use `hours`; runtime "
                    "risk replays (`assignplan risk`) cut sampled run times here. At least "
                    "`hours`.")
    ready: CalendarTime | None = _calendar("Ready (calendar time)",
                                           "Earliest start as a calendar time (instead of"
                                           " ready_h).")
    due: CalendarTime | None = _calendar("Due (calendar time)",
                                         "Due time as a calendar time (instead of due_h).")


class Batch(BaseModel):
    """The input document: a window, the node inventory and the job list."""

    model_config = _STRICT
    window: Window = Field(title="Window", description="The week the batch is planned for.")
    nodes: list[NodeGroup] = Field(min_length=1, title="Nodes",
                                   description="The node inventory, one entry per group.")
    jobs: list[JobGroup] = Field(min_length=1, title="Jobs",
                                 description="The jobs, one entry per job or sweep.")


def _plan_offset(title: str, description: str) -> Any:
    return Field(default=None, ge=-MAX_PLAN_HOURS, le=MAX_PLAN_HOURS, title=title,
                 description=description)


PlanHours = Annotated[float, Field(ge=-MAX_PLAN_HOURS, le=MAX_PLAN_HOURS)]


class Assignment(BaseModel):
    """Where and when one job runs: its start as `start_h` or `start` (or both, agreeing)."""

    model_config = _PLAN
    job: Name = Field(title="Job", description="A job of the batch (member name).")
    node: Name = Field(title="Node", description="The node it runs on (member name).")
    start_h: float | None = _plan_offset("Start (h from window start)",
                                         "Start, in hours from the window start.")
    end_h: float | None = _plan_offset(
        "End (h from window start)",
        "End, in hours from the window start; optional (the model's duration gives it).")
    start: CalendarTime | None = _calendar("Start (calendar time)",
                                           "Start as a calendar time (ISO 8601).")
    end: CalendarTime | None = _calendar("End (calendar time)",
                                         "End as a calendar time (ISO 8601); optional.")


class Objective(BaseModel):
    """The lexicographic objective of a plan, in hours."""

    model_config = _PLAN
    makespan_h: float = Field(title="Makespan (h)", description="End of the last job.")
    weighted_tardiness_h: float = Field(
        title="Weighted tardiness (h)", description="Sum of weight x hours past the due time.")
    weighted_completion_h: float = Field(
        title="Weighted completion (h)", description="Sum of weight x end time.")


class PlanPriority(BaseModel):
    """Which term of the objective the plan was made to minimise first."""

    model_config = _PLAN
    name: Literal["makespan", "due", "weighted"] = Field(
        title="Priority", description="makespan: makespan, then weighted tardiness, then "
        "weighted completion; due: weighted tardiness, then makespan, then weighted "
        "completion; weighted: the weighted sum of the three terms in hours.")
    weights: tuple[float, float, float] | None = Field(
        default=None, title="Weights (per hour)",
        description="weighted only: the weight per hour of makespan, of weighted tardiness "
                    "and of weighted completion.")

    @model_validator(mode="after")
    def _weights_with_weighted(self) -> PlanPriority:
        if (self.name == "weighted") != (self.weights is not None):
            raise ValueError("weights are given with the weighted priority, and only with it")
        if self.weights is not None and (min(self.weights) < 0 or not any(self.weights)):
            raise ValueError("weights must be >= 0 and not all 0")
        return self


class ObjectiveGaps(BaseModel):
    """Each term's gap to its lower bound, in percent; a zero tardiness bound has no relative
    gap (null when the plan is late at all: read the excess, in weighted hours)."""

    model_config = _PLAN
    makespan_pct: float = Field(title="Makespan gap (%)",
                                description="Makespan above its lower bound, per cent.")
    weighted_tardiness_pct: float | None = Field(
        title="Tardiness gap (%)", description="Weighted tardiness above its lower bound, per "
        "cent; null when the bound is 0 and the plan is late.")
    weighted_tardiness_excess_h: float = Field(
        title="Tardiness excess (h)",
        description="Weighted tardiness above its lower bound, in weighted hours.")
    weighted_completion_pct: float | None = Field(
        title="Completion gap (%)",
        description="Weighted completion time above its lower bound, per cent.")


class Turnaround(BaseModel):
    """Mean and 90th percentile wait (start - ready), mean bounded slowdown and its threshold."""

    model_config = _PLAN
    mean_wait_h: float = Field(title="Mean wait (h)", description="Mean of start - ready.")
    p90_wait_h: float = Field(title="P90 wait (h)",
                              description="90th percentile of start - ready.")
    mean_bounded_slowdown: float = Field(
        title="Mean bounded slowdown",
        description="Mean of (wait + run) / max(run, threshold), at least 1.")
    bounded_slowdown_threshold_min: int = Field(
        title="Slowdown threshold (min)",
        description="Runs shorter than this count as this long in the slowdown.")


class HistoryRow(BaseModel):
    """One generation of an iterative method: best and median fitness."""

    model_config = _PLAN
    generation: int = Field(title="Generation", description="0: the initial population.")
    evaluations: int = Field(title="Plans built", description="Plans built so far.")
    best_makespan_h: float = Field(title="Best makespan (h)",
                                   description="Makespan of the best plan so far.")
    median_makespan_h: float = Field(title="Median makespan (h)",
                                     description="Median makespan of the population.")
    best_tardiness_h: float = Field(default=0.0, title="Best tardiness (h)",
                                    description="Weighted tardiness of the best plan.")


class PlanDoc(BaseModel):
    """The plan document written by `solve --out` and read by `check` and `report`.

    Only `assignments` is required, so a hand-written plan of job, node and start is a plan.
    """

    model_config = _PLAN
    method: str | None = Field(default=None, title="Method",
                               description="How the plan was made (ga, greedy, exact; any "
                                           "text for a hand-written plan).")
    status: str = Field(default="feasible", title="Status",
                        description="optimal (proven by exact), feasible or unknown.")
    seed: int | None = Field(default=None, title="Seed",
                             description="Seed of the random generator that made it.")
    window_start: CalendarTime | None = Field(default=None, title="Window start",
                                              description="The batch's window start.")
    makespan_h: float | None = _plan_offset("Makespan (h)",
                                            "Stated makespan (hours); checked when given.")
    lower_bound_h: float | None = _plan_offset(
        "Lower bound (h)", "Provable lower bound on the makespan (hours); computed when not "
        "given.")
    lower_bound_parts_h: dict[str, PlanHours] = Field(
        default_factory=dict, title="Lower bound parts (h)",
        description="Each part of the provable lower bound (hours); the largest is the bound "
                    "unless the method proved a better one.")
    gap_pct: float | None = Field(default=None, title="Gap (%)",
                                  description="Makespan above the lower bound, per cent.")
    objective: Objective | None = Field(default=None, title="Objective",
                                        description="The objective's three terms.")
    priority: PlanPriority | None = Field(
        default=None, title="Priority", description="How the method compared plans; absent "
        "in a hand-written plan.")
    objective_bounds: Objective | None = Field(
        default=None, title="Objective bounds",
        description="A lower bound on each term of the objective (hours).")
    gaps_pct: ObjectiveGaps | None = Field(default=None, title="Gaps (%)",
                                           description="Each term's gap to its bound.")
    turnaround: Turnaround | None = Field(default=None, title="Turnaround",
                                          description="Waits and bounded slowdown.")
    seconds: float = Field(default=0.0, title="Seconds",
                           description="The method's own run time.")
    assignments: list[Assignment] = Field(title="Assignments",
                                          description="Every job's node and start.")
    history: list[HistoryRow] = Field(default_factory=list, title="History",
                                      description="Per generation of the ga: its progress.")
