"""Commands for the week as it happens: `replan`, `diff` and `size` (thin, over the library)."""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path
from typing import Annotated

import typer

from assignplan.cli import (
    AddOpt,
    BatchArg,
    BudgetOpt,
    ChangesOpt,
    ClusterOpt,
    DownOpt,
    ForceOpt,
    GASettingsOpt,
    GenerationsOpt,
    PriorityOpt,
    SeedOpt,
    ShowAllOpt,
    Steps,
    WeightsOpt,
    WithoutOpt,
    WorkersOpt,
    _method_step,
    _print_outputs,
    _read_instance,
    method_settings,
    reports_errors,
    what_if,
)
from assignplan.errors import InputError

PlanArg = Annotated[Path, typer.Argument(help="Plan JSON (from solve --out).",
                                         show_default=False)]


def _now_value(text: str | None) -> datetime | float | None:
    """`--now`: hours from the window start, or an ISO 8601 calendar time."""
    if text is None:
        return None
    try:
        return float(text)
    except ValueError:
        pass
    try:
        return datetime.fromisoformat(text)
    except ValueError:
        raise InputError(f"--now {text}: neither hours from the window start nor an ISO 8601"
                         " calendar time such as 2026-12-09T12:00") from None


def replan(
    batch: BatchArg,
    plan: PlanArg,
    state: Annotated[Path, typer.Option(
        "--state", metavar="STATE", help="Where the week stands: JSON "
        "(schemas/state.schema.json) or CSV (name, status, node, start, end).")],
    now: Annotated[str | None, typer.Option(
        "--now", metavar="TIME", help="The moment to replan from: a calendar time or hours "
        "from the window start (default: the state's now).")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="NEW.json", help="Write the new plan to this JSON file.")] = None,
    free: Annotated[bool, typer.Option(
        "--free", help="No churn tie-break: plan the jobs not yet started as from scratch.")]
    = False,
    fewer_moves: Annotated[bool, typer.Option(
        "--fewer-moves", help="Rank fewer moved and shifted jobs before the weighted "
        "completion time (after makespan and tardiness), not after it.")] = False,
    as_planned: Annotated[bool, typer.Option(
        "--as-planned", help="Jobs the state does not list that the old plan started before "
        "now are taken to have run as planned (done, or running until their planned end).")]
    = False,
    method: Annotated[str, typer.Option(metavar="METHOD", help="ga | greedy | exact")] = "ga",
    seed: SeedOpt = 0,
    budget: BudgetOpt = 30.0,
    as_json: Annotated[bool, typer.Option("--json", help="Print the summary as JSON.")] = False,
    show_all: ShowAllOpt = False,
    no_diff: Annotated[bool, typer.Option(
        "--no-diff", help="Do not print the differences against the old plan.")] = False,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress display.")] = False,
    generations: GenerationsOpt = None,
    ga_settings: GASettingsOpt = None,
    force: ForceOpt = False,
    without: WithoutOpt = None,
    down: DownOpt = None,
    add: AddOpt = None,
    changes: ChangesOpt = None,
    priority: PriorityOpt = "makespan",
    weights: WeightsOpt = None,
) -> None:
    """Replan from where the week stands: done and running jobs stay where they are, nothing
    new starts before now, the rest is planned again with as few moves as the objective
    allows."""
    from assignplan.files import all_or_nothing, check_output_file
    from assignplan.priority import parse_priority

    chosen = parse_priority(priority, weights)
    check_output_file(out, "--out")
    if free and fewer_moves:
        raise InputError("--free and --fewer-moves: choose one (--free has no churn term)")
    settings = method_settings(method, generations, ga_settings, force)
    inventory = what_if(without, down, add, changes)
    moment = _now_value(now)
    steps = Steps(not quiet and not as_json)
    from assignplan.replan import load_replan, replan_rows, stopped_lines
    from assignplan.replan import replan as run

    with steps.step(f"reading {batch}, {plan} and {state}"):
        given = load_replan(batch, plan, state, now=moment, changes=inventory,
                            as_planned=as_planned)
    for line in given.batch.warnings:
        typer.echo(f"{batch}: warning: {line}", err=True)
    with _method_step(steps, f"replanning with {method}"):
        done = run(given, method, seed=seed, budget=budget, settings=settings, free=free,
                   fewer_moves=fewer_moves, priority=chosen)
    from assignplan.check import check_plan
    from assignplan.diff import diff_lines, diff_record, plan_diff
    from assignplan.plan import to_plan_doc
    from assignplan.units import clock, counted

    doc = to_plan_doc(done.inst, done.result)
    violations = check_plan(given.batch, doc, given.pins)
    if violations:  # a defect of ours, never the user's: say so and write nothing
        raise _Failed([f"replan: the new plan fails the check ({v.message})"
                       for v in violations[:5]])
    with all_or_nothing():
        if out is not None:
            from assignplan.report.exports import write_json

            write_json(out, doc.model_dump(mode="json"))
    pins = given.pins
    origin = given.batch.window_start
    lines = [f"replanned from {clock(origin, pins.now)}: {counted(len(pins.jobs), 'job')}"
             f" pinned (done or running), {counted(done.replanned, 'job')} planned again"
             + (f" ({given.assumed:,} taken as planned)" if given.assumed else ""),
             f"{counted(done.churn.moved, 'job')} moved to another node"
             + (f" ({done.churn.forced:,} had to: their node is gone)"
                if done.churn.forced else "")
             + f", {counted(done.churn.shifted, 'start')} shifted by more than an hour"
             + (" (--free: no churn tie-break)" if free else "")
             + (" (--fewer-moves: ranked before the completion time)" if fewer_moves else "")]
    lines += stopped_lines(pins)
    difference = plan_diff(done.inst, given.old, replan_rows(done))
    extra = {"replan": {"now": clock(origin, pins.now), "pinned": len(pins.jobs),
                        "replanned": done.replanned, "moved": done.churn.moved,
                        "shifted": done.churn.shifted, "forced_moves": done.churn.forced,
                        "progress_lost": sorted(pins.lost), "notes": list(pins.notes),
                        "diff": diff_record(done.inst, difference)}}
    if out is not None:
        typer.echo(f"wrote {out}", err=True)
    _print_outputs(done.inst, done.result, [], as_json=as_json, show_all=show_all,
                   plan_to_stdout=False, changes=given.batch.changes, extra=extra)
    if not as_json:
        for line in lines:
            typer.echo(line)
        if not no_diff:
            typer.echo("differences against the old plan:")
            for line in diff_lines(done.inst, difference):
                typer.echo(f"  {line}")


class _Failed(Exception):
    pass


def diff(
    batch: BatchArg,
    plan_a: Annotated[Path, typer.Argument(help="The first plan (JSON).", show_default=False)],
    plan_b: Annotated[Path, typer.Argument(help="The second plan (JSON).", show_default=False)],
    threshold: Annotated[float, typer.Option(
        "--threshold", metavar="HOURS", min=0.0,
        help="List starts that moved by more than this many hours.")] = 1.0,
    as_json: Annotated[bool, typer.Option("--json", help="Print the differences as JSON.")]
    = False,
    csv: Annotated[Path | None, typer.Option(
        metavar="FOLDER", help="Write diff-jobs.csv and diff-nodes.csv into this folder.")]
    = None,
    show_all: Annotated[bool, typer.Option("--all", help="List every changed job.")] = False,
) -> None:
    """Differences between two plans of a batch: jobs moved to another node, starts moved
    more than a threshold, the makespan and tardiness change, each node's load change."""
    from assignplan.diff import diff_lines, diff_record, plan_diff, rows_of_doc, write_diff_csv
    from assignplan.files import all_or_nothing, check_output_dir
    from assignplan.reading import load_plan

    check_output_dir(csv, "--csv")
    _, inst = _read_instance(batch, Steps(False))
    a = rows_of_doc(load_plan(plan_a), inst, str(plan_a))
    b = rows_of_doc(load_plan(plan_b), inst, str(plan_b))
    d = plan_diff(inst, a, b, threshold=round(threshold * 60))
    if csv is not None:
        with all_or_nothing():
            names = write_diff_csv(csv, inst, a, b, d)
        typer.echo(f"wrote {csv}/{' and '.join(names)}", err=True)
    if as_json:
        typer.echo(json.dumps(diff_record(inst, d), indent=2))
        return
    for line in diff_lines(inst, d, limit=10**9 if show_all else 10):
        typer.echo(line)
    if d.nodes:
        typer.echo("node load (jobs, core-hours) first -> second plan:")
        for n in d.nodes[: None if show_all else 10]:
            typer.echo(f"  {n.node}: {n.jobs_a} -> {n.jobs_b} jobs,"
                       f" {n.core_hours_a:,.1f} -> {n.core_hours_b:,.1f} core-h")
        if not show_all and len(d.nodes) > 10:
            typer.echo(f"  ... and {len(d.nodes) - 10:,} more nodes (--all lists them)")


def register(app: typer.Typer) -> None:
    """Mount the commands of this module on the `assignplan` app."""
    app.command(name="replan")(reports_errors(_checked(replan)))
    app.command(name="diff")(reports_errors(diff))
    app.command(name="size")(reports_errors(size))


def _checked(command):
    """A replanned plan that fails the checker is our defect: exit 1, nothing written."""
    import functools

    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        try:
            return command(*args, **kwargs)
        except _Failed as err:
            for line in err.args[0]:
                typer.echo(line, err=True)
            raise typer.Exit(1) from None

    return wrapper


def size(
    batch: BatchArg,
    within: Annotated[float | None, typer.Option(
        "--within", metavar="HOURS", min=0.0,
        help="Deadline: the plan must end within this many hours of the window start.")]
    = None,
    by: Annotated[str | None, typer.Option(
        "--by", metavar="TIME", help="Deadline as a calendar time (or hours from the window "
        "start).")] = None,
    vary: Annotated[list[str] | None, typer.Option(
        "--vary", metavar="GROUP", help="A node group to size (repeatable; default: every "
        "group).")] = None,
    seed: SeedOpt = 0,
    budget: Annotated[float, typer.Option(
        "--budget", metavar="SECONDS", min=0.1, help="Time for all the probes together.")]
    = 120.0,
    probe: Annotated[float, typer.Option(
        "--probe", metavar="SECONDS", min=0.1, help="ga budget of one probe (after greedy).")]
    = 3.0,
    as_json: Annotated[bool, typer.Option("--json", help="Print the sizing as JSON.")] = False,
    report: Annotated[Path | None, typer.Option(
        metavar="REPORT.html", help="Also write a page with the chart of makespan against "
        "node count and every probe.")] = None,
    priority: Annotated[str, typer.Option(
        "--priority", metavar="ORDER", help="makespan (default), or due / weighted: the "
        "probes plan for it and a count must also meet every due time.")] = "makespan",
    weights: WeightsOpt = None,
    workers: WorkersOpt = None,
    cluster: ClusterOpt = None,
) -> None:
    """How many nodes of each group the batch needs to end by a deadline: counts ruled out
    by the lower bound, counts confirmed by a plan (greedy, then a short ga run). With
    --workers or --cluster each round probes as many counts at once as there are workers."""
    from assignplan.dask_executor import check_options, open_executor
    from assignplan.files import all_or_nothing, check_output_file
    from assignplan.priority import parse_priority

    chosen = parse_priority(priority, weights)
    check_output_file(report, "--report")
    check_options(workers, cluster)
    from assignplan.reading import calendar_hours, parse_batch_text, read_text
    from assignplan.sizing import CONFIRMED, size_batch, size_record
    from assignplan.units import clock, floor_minutes, number

    if (within is None) == (by is None):
        raise InputError("size: give the deadline as --within HOURS or --by TIME (one of them)")
    doc = parse_batch_text(read_text(batch), str(batch))
    origin = doc.window.start
    if within is not None:
        hours = within
    else:
        value = _now_value(by)
        if isinstance(value, datetime):
            problems: list[str] = []
            hours = calendar_hours(value, origin, "--by", problems)
            if problems:
                raise InputError(problems)
            if hours <= 0:
                raise InputError(f"--by {by}: not after the window start ({origin.isoformat()})")
        else:
            hours = value
    deadline = floor_minutes(hours * 60)  # a plan ends by the deadline: whole minutes
    with open_executor(workers, cluster) as executor:
        result = size_batch(doc, deadline, vary=tuple(vary or ()), seed=seed, budget=budget,
                            probe_seconds=probe, priority=chosen, executor=executor)
    record = size_record(result, origin)
    if report is not None:
        from assignplan.report.sizing import write_sizing_report

        with all_or_nothing():
            write_sizing_report(report, record, f"Sizing {batch.name}")
        typer.echo(f"wrote {report}", err=True)
    if as_json:
        typer.echo(json.dumps(record, indent=2))
        return
    unit = "cost" if result.cost is not None else "nodes"
    typer.echo(f"deadline {clock(origin, deadline)} ({number(deadline / 60, 2)} h from the"
               " window start)")
    if result.found is None:
        typer.echo("no count tried was confirmed by a plan (the groups were grown up to x4);"
                   " the deadline may be out of reach")
    for k, name in enumerate(result.groups):
        now_count = result.current[k]
        if name not in result.varied:
            typer.echo(f"  {name}: {now_count} (held)")
            continue
        found = "–" if result.found is None else str(result.found[k])
        low = result.bound_min.get(name)
        low_text = "" if low is None else (
            f"; the bound rules out fewer than {low}"
            + (" (by bisection)" if result.bisected.get(name) else ""))
        typer.echo(f"  {name}: {found} (now {now_count}){low_text}")
    if result.found is not None:
        typer.echo(f"found: {number(result.total(result.found), None)} {unit} in all,"
                   f" {CONFIRMED}; a count between the bound's minimum and it may still allow"
                   " a plan the probes did not find")
    typer.echo("probes (makespan against node count):")
    for p in record["probes"]:
        counts = ", ".join(f"{g} {c}" for g, c in p["counts"].items())
        plan = " ".join(f"{m} {number(p[f'{m}_h'], 2)} h" for m in ("greedy", "ga")
                        if p[f"{m}_h"] is not None)
        bound = "no node for some job" if p["lower_bound_h"] is None else \
            f"bound {number(p['lower_bound_h'], 2)} h"
        typer.echo(f"  {counts} ({p['nodes']} nodes): {bound}" + (f", {plan}" if plan else "")
                   + f": {p['verdict']}")
