"""The `assignplan` command line: thin commands over the library; errors become exit codes."""

from __future__ import annotations

import functools
import json
import sys
import time
from contextlib import contextmanager, nullcontext
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.progress import (
    BarColumn,
    MofNCompleteColumn,
    Progress,
    TextColumn,
    TimeElapsedColumn,
)

from assignplan import __version__
from assignplan.documents import HistoryRow
from assignplan.errors import AssignplanError, InputError

app = typer.Typer(
    name="assignplan",
    help="Plan a week of single-node jobs on a heterogeneous cluster.",
    no_args_is_help=True,
    pretty_exceptions_show_locals=False,
    add_completion=False,
    # plain help: readable at 80 columns, no type placeholders beside every flag
    rich_markup_mode=None,
)


_STARTED = [time.perf_counter()]  # when this command began (reset by the app callback)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"assignplan {__version__}")
        raise typer.Exit()


@app.callback()
def _main(
    version: Annotated[bool, typer.Option(
        "--version", callback=_version, is_eager=True,
        help="Print the version and exit.")] = False,
) -> None:
    """Plan a week of single-node jobs on a heterogeneous cluster."""
    _STARTED[0] = time.perf_counter()


def _fail(problems: list[str], code: int) -> None:
    for line in problems:
        typer.echo(line, err=True)
    raise typer.Exit(code)


def reports_errors(command):
    """Map library errors to one line per problem on stderr and the error's exit code."""

    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        try:
            return command(*args, **kwargs)
        except AssignplanError as err:
            _fail(err.problems, err.exit_code)
        except KeyboardInterrupt:
            _fail(["interrupted; nothing was written"], 130)
        except OSError as err:  # a disk that filled up or went away after the checks passed
            where = f"{err.filename}: " if err.filename else ""
            _fail([f"{where}cannot write ({err.strerror or err}); nothing was written"], 1)

    return wrapper


def load_batch_and_warn(path: Path, changes=()):
    """Load a batch with the what-if `changes` applied; its warnings (doubtful but valid
    input) go to stderr, one line each."""
    from assignplan.expand import load_batch

    expanded = load_batch(path, changes)
    for line in expanded.warnings:
        typer.echo(f"{path}: warning: {line}", err=True)
    return expanded


WithoutOpt = Annotated[list[str] | None, typer.Option(
    "--without", metavar="NAME", help="What-if: plan without this node or node group (glob "
    "patterns such as 'gpu-*'); repeatable.")]
DownOpt = Annotated[list[str] | None, typer.Option(
    "--down", metavar="NAME@FROM..TO", help="What-if: a node or group down from FROM to TO "
    "(hours from the window start or calendar times; no TO: until further notice); "
    "repeatable.")]
AddOpt = Annotated[list[str] | None, typer.Option(
    "--add", metavar="GROUP=COUNT", help="What-if: COUNT more members of a node group; "
    "repeatable.")]
ChangesOpt = Annotated[Path | None, typer.Option(
    "--changes", metavar="FILE", help="What-if: the same changes from a JSON overlay file "
    "(schemas/changes.schema.json).")]


def what_if(without: list[str] | None, down: list[str] | None, add: list[str] | None,
            changes: Path | None):
    """The inventory changes of the what-if options (checked before any work)."""
    from assignplan.whatif import parse_changes

    return parse_changes(without or (), down or (), add or (), changes)


def print_changes(expanded) -> None:
    """What the what-if options changed, on stderr (the summary carries it too)."""
    for line in expanded.changes:
        typer.echo(f"what-if: {line}", err=True)


GenerationsOpt = Annotated[int | None, typer.Option(
    metavar="N", min=0, help="ga: most generations of the makespan phases (default 2,000; "
    "the completion phase adds up to 30 %; the budget usually ends the run first).")]
GASettingsOpt = Annotated[Path | None, typer.Option(
    "--ga-settings", metavar="FILE", help="ga: tuning settings, a TOML or JSON file "
    "(see docs/methods.md).")]
ShowAllOpt = Annotated[bool, typer.Option(
    "--all", help="List every job and node, not the first 30 jobs and 60 nodes.")]
ForceOpt = Annotated[bool, typer.Option(
    "--force", help="exact: try batches above its size limit (300 jobs).")]
DEFAULT_MODEL = "lognormal:0.3"
ModelOpt = Annotated[str | None, typer.Option(
    "--model", metavar="MODEL",
    help="Runtime model (an assumption you choose): lognormal:CV (median = hours), "
         "uniform:LOW,HIGH, scale:FACTOR, trace:SWF (actual/requested run times of a trace), "
         f"or a model file (.json, see schemas/). Default {DEFAULT_MODEL}.")]


def method_settings(method: str, generations: int | None, ga_file: Path | None,
                    force: bool, islands: int | None = None):
    """The settings object of `method` from its options; an option of another method is an
    error naming it, never silently ignored."""
    from assignplan.solve import ExactSettings, method_named

    method_named(method)  # an unknown method is reported first
    misplaced = [flag for flag, given, owner in (
        ("--generations", generations is not None, "ga"), ("--ga-settings", ga_file is not None,
                                                            "ga"), ("--force", force, "exact"),
        ("--islands", islands is not None, "ga"))
        if given and owner != method]
    if misplaced:
        raise InputError([f"{flag}: only the {'exact' if flag == '--force' else 'ga'} method "
                          f"reads it, not {method}" for flag in misplaced])
    if method == "exact":
        return ExactSettings(force=force)
    if method != "ga":
        return None
    from assignplan.methods.ga import GASettings, read_settings

    settings = read_settings(ga_file) if ga_file is not None else GASettings()
    if generations is not None:
        settings = settings.replace(stopping={"generations": generations})
    if islands is not None:
        settings = settings.replace(islands={"count": islands})
    return settings


class Steps:
    """What a long command is doing, on stderr: a spinner per step (reading, the bound,
    greedy...) and a bar for the ga's generations. Silent when stderr is not a terminal,
    with --quiet, or with --json."""

    def __init__(self, enabled: bool):
        self.console = Console(stderr=True)
        self.enabled = enabled and self.console.is_terminal

    def step(self, text: str):
        """A context in which a spinner says `text` with the seconds elapsed."""
        if not self.enabled:
            return nullcontext()
        return self.console.status(text, spinner="dots")

    @contextmanager
    def generations(self, total: int, bound_h: float):
        """A bar fed by the ga's per-generation hook (yields the hook, None when silent)."""
        if not self.enabled:
            yield None
            return
        columns = (TextColumn("ga"), BarColumn(), TextColumn("gen {task.completed:,.0f}"),
                   TextColumn("best {task.fields[best]}"),
                   TextColumn("bound gap {task.fields[gap]}"), TimeElapsedColumn())
        with Progress(*columns, console=self.console, transient=True) as progress:
            task = progress.add_task("ga", total=total, best="–", gap="–")

            def tick(row: HistoryRow) -> None:
                gap = 100 * (row.best_makespan_h - bound_h) / bound_h if bound_h > 0 else 0.0
                progress.update(task, completed=row.generation,
                                best=f"{row.best_makespan_h:.2f} h", gap=f"{gap:.2f} %")

            yield tick

    @contextmanager
    def tasks(self, total: int, what: str):
        """A bar of `total` pieces of work, advanced as each finishes: the hook takes a few
        words on the piece just done (yields None when silent)."""
        if not self.enabled:
            yield None
            return
        columns = (TextColumn(what), BarColumn(), MofNCompleteColumn(),
                   TextColumn("{task.fields[last]}"), TimeElapsedColumn())
        with Progress(*columns, console=self.console, transient=True) as progress:
            task = progress.add_task(what, total=total, last="")

            def tick(text: str) -> None:
                progress.update(task, advance=1, last=text)

            yield tick


PriorityOpt = Annotated[str, typer.Option(
    "--priority", metavar="ORDER",
    help="What to minimise first: makespan (then weighted tardiness, then weighted "
         "completion), due (weighted tardiness first, then makespan, then weighted "
         "completion) or weighted (the --weights sum of the three, in hours).")]
WeightsOpt = Annotated[str | None, typer.Option(
    "--weights", metavar="A,B,C",
    help="--priority weighted: weight per hour of makespan, of weighted tardiness and of "
         "weighted completion, e.g. 1,10,0.01.")]
WorkersOpt = Annotated[int | None, typer.Option(
    "--workers", metavar="N", help="Run the independent pieces (sample chunks, methods, ga "
    "islands, sizing probes) on a local Dask cluster of N worker processes, started for "
    "this command and closed afterwards (optional extra: pip install "
    "'assignplan[distributed]').")]
ClusterOpt = Annotated[str | None, typer.Option(
    "--cluster", metavar="ADDRESS", help="Run the independent pieces on the workers of a "
    "running Dask scheduler (e.g. tcp://10.1.2.3:8786, one started inside an allocation); "
    "this command starts no batch jobs.")]


BatchArg = Annotated[Path, typer.Argument(help="Batch JSON: window, nodes and jobs.",
                                          metavar="BATCH", show_default=False)]


SeedOpt = Annotated[int, typer.Option(metavar="N", help="Seed of the random generator.")]
PngOpt = Annotated[Path | None, typer.Option(
    metavar="FOLDER", help="Also write each chart as a PNG file into this folder.")]
BudgetOpt = Annotated[float, typer.Option(
    "--budget", metavar="SECONDS", min=0.1,
    help="Search budget in seconds for everything after reading the batch (the bound and "
         "the method).")]


@app.command()
@reports_errors
def solve(
    batch: BatchArg,
    method: Annotated[str, typer.Option(metavar="METHOD", help="ga | greedy | exact")] = "ga",
    seed: SeedOpt = 0,
    budget: BudgetOpt = 30.0,
    out: Annotated[Path | None, typer.Option(
        metavar="PLAN.json",
        help="Write the plan (every job's node and start) to this JSON file; '-' prints it "
             "on standard output instead of the tables.")] = None,
    csv: Annotated[Path | None, typer.Option(
        metavar="FOLDER", help="Write jobs.csv, nodes.csv and summary.csv into this folder.")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print the summary as JSON.")] = False,
    show_all: ShowAllOpt = False,
    report: Annotated[Path | None, typer.Option(
        metavar="REPORT.html", help="Also write the HTML report of the plan to this file.")
    ] = None,
    png: PngOpt = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress display.")] = False,
    generations: GenerationsOpt = None,
    ga_settings: GASettingsOpt = None,
    force: ForceOpt = False,
    risk: Annotated[bool, typer.Option(
        "--risk", help="Also replay the new plan under 1,000 sampled futures of --model "
        "(as `assignplan risk` does).")] = False,
    robust: Annotated[float | None, typer.Option(
        "--robust", metavar="Q", help="ga: plan for the Q-quantile of the makespan (e.g. 0.9) "
        "and the mean weighted tardiness over --samples futures of --model.")] = None,
    samples: Annotated[int | None, typer.Option(
        "--samples", metavar="K", help="--robust: sampled futures each candidate plan is "
        "scored on (default 32).")] = None,
    model: ModelOpt = None,
    without: WithoutOpt = None,
    down: DownOpt = None,
    add: AddOpt = None,
    changes: ChangesOpt = None,
    priority: PriorityOpt = "makespan",
    weights: WeightsOpt = None,
    islands: Annotated[int | None, typer.Option(
        "--islands", metavar="K", min=1, max=1024, help="ga: evolve K populations side by "
        "side, the best plans migrating between them every islands.epoch generations (see "
        "docs/methods.md); with --workers or --cluster each island runs on a worker.")] = None,
    workers: WorkersOpt = None,
    cluster: ClusterOpt = None,
) -> None:
    """Plan a batch: node and start time per job, makespan, utilisation, gap to the bound."""
    from assignplan.dask_executor import check_options, open_executor
    from assignplan.files import all_or_nothing, check_output_dir, check_output_file
    from assignplan.priority import parse_priority

    chosen = parse_priority(priority, weights)

    to_stdout = out is not None and str(out) == "-"
    if to_stdout and as_json:
        raise InputError("--out - and --json both print to standard output; choose one")
    check_output_file(out, "--out")
    check_output_dir(csv, "--csv")
    check_output_file(report, "--report")
    check_output_dir(png, "--png")
    settings = method_settings(method, generations, ga_settings, force, islands)
    runtime = runtime_options(method, risk=risk, robust=robust, samples=samples, model=model)
    inventory = what_if(without, down, add, changes)
    if islands is not None and islands > 1 and robust is not None:
        raise InputError("--islands: not with --robust (an island run plans for the objective"
                         " itself)")
    if (workers is not None or cluster is not None) and not risk and (
            settings is None or getattr(settings, "islands", None) is None
            or settings.islands.count == 1):
        raise InputError(f"{'--workers' if workers is not None else '--cluster'}: only "
                         "--islands (above 1) and --risk run pieces on workers")
    check_options(workers, cluster)
    steps = Steps(not quiet and not as_json and not to_stdout)
    expanded, inst = _read_instance(batch, steps, inventory)
    objective = None
    if robust is not None:
        from assignplan.risk.robust import DEFAULT_ROBUST_SAMPLES, Robust
        from assignplan.risk.sampling import bind

        objective = Robust(robust, samples or DEFAULT_ROBUST_SAMPLES, bind(runtime, inst),
                           seed=seed)
    deadline = time.perf_counter() + budget  # the budget covers everything after reading
    # The planning stack (numba, solvers) loads only once the input is known to be good.
    from assignplan.bounds import lower_bound
    from assignplan.solve import solve as run

    with steps.step("lower bound"):
        bound = lower_bound(inst, deadline=deadline)
    stepper = steps.generations(settings.most_generations, bound.value / 60) \
        if method == "ga" else _method_step(steps, method)
    with open_executor(workers, cluster) as executor:
        with stepper as tick:
            result = run(inst, method, seed=seed,
                         budget=max(0.0, deadline - time.perf_counter()), settings=settings,
                         progress=tick, bound=bound, robust=objective, priority=chosen,
                         executor=executor)
        replays = _assess(inst, result, runtime, samples=None, seed=seed, steps=steps,
                          executor=executor) if risk else None
    with all_or_nothing():
        wrote = _write_outputs(expanded, inst, result, out=None if to_stdout else out,
                               csv=csv, report=report, png=png, risk=replays)
    _print_outputs(inst, result, wrote, as_json=as_json, show_all=show_all,
                   plan_to_stdout=to_stdout, risk=replays, changes=expanded.changes)


def runtime_options(method: str, *, risk: bool, robust: float | None, samples: int | None,
                    model: str | None):
    """The runtime model `solve` reads for --risk and --robust (None when neither is given),
    checked before any work; an option nothing reads is an error naming what would."""
    problems = []
    if robust is not None and method != "ga":
        problems.append(f"--robust: only the ga method plans for it; {method} keeps its own"
                        " objective")
    if samples is not None and robust is None:
        problems.append("--samples: only --robust reads it (assignplan risk takes its own)")
    if model is not None and not (risk or robust is not None):
        problems.append("--model: only --risk and --robust read it")
    if problems:
        raise InputError(problems)
    if robust is not None:
        from assignplan.risk.robust import DEFAULT_ROBUST_SAMPLES, check_robust

        check_robust(robust, DEFAULT_ROBUST_SAMPLES if samples is None else samples)
    if not risk and robust is None:
        return None
    from assignplan.risk.models import parse_model

    return parse_model(model or DEFAULT_MODEL)


def _assess(inst, result, runtime, *, samples: int | None, seed: int, steps: Steps,
            executor=None):
    """The plan's replays under `samples` (default 1,000) futures of the runtime model (on
    `executor`'s workers when given; the figures are the same)."""
    from assignplan.risk.figures import assess
    from assignplan.risk.replay import DEFAULT_SAMPLES
    from assignplan.risk.sampling import bind

    n = DEFAULT_SAMPLES if samples is None else samples
    sampler = bind(runtime, inst)
    text = f"replaying {n:,} sampled futures"
    with steps.step(text) as status:
        def done(k: int) -> None:
            if status is not None:
                status.update(f"{text}: {k:,} done")

        return assess(inst, result, sampler, samples=n, seed=seed, executor=executor,
                      on_chunk=done)


@contextmanager
def _method_step(steps: Steps, method: str):
    with steps.step(method):
        yield None


def _read_instance(batch: Path, steps: Steps, changes=()):
    """(expanded batch, instance): the batch file read with the what-if `changes`, checked
    and turned into arrays (one spinner while it lasts)."""
    from assignplan.instance import build_instance

    with steps.step(f"reading {batch}"):
        expanded = load_batch_and_warn(batch, changes)
        return expanded, build_instance(expanded)


def _write_outputs(expanded, inst, result, *, out: Path | None, csv: Path | None,
                   report: Path | None, png: Path | None, risk=None) -> list[str]:
    """Every file of one plan (call inside `files.all_or_nothing`); returns the lines that
    say what was written. `risk`: the plan's replays (`risk.figures.assess`), or None."""
    from assignplan import metrics
    from assignplan.plan import to_plan_doc
    from assignplan.report import exports

    wrote = []
    doc = to_plan_doc(inst, result) if out is not None or report is not None else None
    if out is not None:
        exports.write_json(out, doc.model_dump(mode="json"))
        wrote.append(f"wrote {out}")
    if csv is not None:
        summary = metrics.summary(inst, result)
        exports.write_csv_tables(csv, summary, metrics.node_frame(inst, result),
                                 metrics.job_frame(inst, result))
        wrote.append(f"wrote {csv}/jobs.csv, nodes.csv and summary.csv")
        wrote += _write_risk_csv(csv, inst, risk)
    return wrote + _write_report(expanded, doc, inst, result, report, png, risk)


def _write_risk_csv(folder: Path, inst, risk) -> list[str]:
    if risk is None:
        return []
    from assignplan.report.risk import write_risk_csv

    write_risk_csv(folder, inst, risk)
    return [f"wrote {folder}/risk-jobs.csv, risk-nodes.csv and risk-summary.csv"]


def _print_outputs(inst, result, wrote: list[str], *, as_json: bool, show_all: bool,
                   plan_to_stdout: bool, risk=None, changes=(), extra=None) -> None:
    """The terminal's share: what was written (stderr), then the plan, the JSON summary or
    the tables (stdout), and the plan's runtime risk when it was replayed. `changes`: the
    what-if lines; `extra`: more summary entries (a replan's), shown after the tables."""
    from assignplan import metrics
    from assignplan.plan import to_plan_doc
    from assignplan.report import tables

    for line in wrote:
        typer.echo(line, err=True)
    if plan_to_stdout:
        typer.echo(json.dumps(to_plan_doc(inst, result).model_dump(mode="json"), indent=2,
                              ensure_ascii=False))
        return
    summary = metrics.summary(inst, result)
    summary["wall_seconds"] = round(time.perf_counter() - _STARTED[0], 3)
    if changes:
        summary["inventory_changes"] = list(changes)
    summary.update(extra or {})
    if as_json:
        if risk is not None:
            from assignplan.risk.figures import summary as risk_summary

            summary["risk"] = risk_summary(inst, risk)
        typer.echo(json.dumps(summary, indent=2))
        return
    console = tables.make_console()
    tables.print_plan(console, summary, metrics.node_frame(inst, result),
                      metrics.job_frame(inst, result), show_all=show_all)
    for line in changes:
        console.print(f"what-if: {line}", highlight=False)
    if risk is not None:
        from assignplan.report.risk import print_risk

        print_risk(console, inst, risk)


def batch_files(paths: list[Path]) -> list[Path]:
    """The batch files named: a folder stands for its *.json files (sorted); a folder without
    any, or a path that is neither, is an InputError."""
    files, problems = [], []
    for path in paths:
        if path.is_dir():
            found = sorted(path.glob("*.json"))
            if not found:
                problems.append(f"{path}: a folder without batch files (*.json)")
            files += found
        else:
            files.append(path)
    if problems:
        raise InputError(problems)
    return files


@app.command()
@reports_errors
def compare(
    batches: Annotated[list[Path], typer.Argument(
        help="Batch JSON files, or folders of them (each folder's *.json).", metavar="BATCH...",
        show_default=False)],
    seed: SeedOpt = 0,
    budget: BudgetOpt = 30.0,
    out: Annotated[Path | None, typer.Option(
        metavar="PLAN.json", help="Write the best plan found to this JSON file (one batch "
        "only).")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print a JSON list.")] = False,
    without: WithoutOpt = None,
    down: DownOpt = None,
    add: AddOpt = None,
    changes: ChangesOpt = None,
    priority: PriorityOpt = "makespan",
    weights: WeightsOpt = None,
    workers: WorkersOpt = None,
    cluster: ClusterOpt = None,
) -> None:
    """Run greedy, ga and (on small batches) exact with one budget each; one row per method
    (and batch, when given several: each method on each batch is a task of its own)."""
    from assignplan.dask_executor import check_options, open_executor
    from assignplan.files import all_or_nothing, check_output_file
    from assignplan.priority import parse_priority

    chosen = parse_priority(priority, weights)
    check_output_file(out, "--out")
    check_options(workers, cluster)
    files = batch_files(batches)
    if out is not None and len(files) > 1:
        raise InputError(f"--out: writes one plan; give one batch, not {len(files)}")
    inventory = what_if(without, down, add, changes)
    read = [_read_instance(path, Steps(False), inventory) for path in files]
    for expanded, _ in read[:1]:  # the same changes to every batch: said once
        print_changes(expanded)
    instances = [inst for _, inst in read]
    from assignplan.compare import best_result, compare_batches, compare_records
    from assignplan.report.exports import write_json
    from assignplan.report.tables import compare_notes, compare_table, make_console
    from assignplan.solve import METHODS

    with open_executor(workers, cluster) as executor:
        with Steps(not as_json).tasks(len(files) * len(METHODS), "compare") as tick:
            rows = compare_batches(
                instances, tuple(METHODS), seed=seed, budget=budget, executor=executor,
                priority=chosen, on_done=None if tick is None else lambda task, row: tick(
                    f"{files[task.batch].name} {task.method}: {row.status}"))
    records = []
    for path, inst, batch_rows in zip(files, instances, rows, strict=True):
        named = compare_records(inst, batch_rows)
        records += named if len(files) == 1 else [{"batch": str(path), **r} for r in named]
    with all_or_nothing():
        best = best_result(instances[0], rows[0], chosen) if len(files) == 1 else None
        if out is not None and best is not None:
            from assignplan.plan import to_plan_doc

            write_json(out, to_plan_doc(instances[0], best).model_dump(mode="json"))
    if as_json:
        typer.echo(json.dumps(records, indent=2))
    else:
        make_console().print(compare_table(records))
        for line in compare_notes(records):
            typer.echo(line)
        typer.echo(f"each method minimised {chosen.describe()}")
    if any(rec["status"] == "failed" for rec in records):
        raise typer.Exit(1)


@app.command()
@reports_errors
def report(
    batch: BatchArg,
    plan: Annotated[Path, typer.Argument(help="Plan JSON (from solve --out).", show_default=False)],
    out: Annotated[Path, typer.Option(metavar="REPORT.html", help="HTML file to write.")]
    = Path("report.html"),
    png: PngOpt = None,
) -> None:
    """Write a self-contained HTML report (timeline, utilisation, tables) of a plan."""
    from assignplan.files import all_or_nothing, check_output_dir, check_output_file

    check_output_file(out, "--out")
    check_output_dir(png, "--png")
    expanded, inst = _read_instance(batch, Steps(False))
    doc, result = _read_plan(plan, inst)
    with all_or_nothing():
        wrote = _write_report(expanded, doc, inst, result, out, png)
    for line in wrote:
        typer.echo(line, err=True)


def _read_plan(plan: Path, inst):
    """(plan document, PlanResult) of a plan file of the batch `inst`; every problem names
    the plan file (a job the batch lacks, a job without a row, an unknown node)."""
    from assignplan.plan import result_from_doc
    from assignplan.reading import load_plan

    try:
        doc = load_plan(plan)
        return doc, result_from_doc(inst, doc)
    except InputError as err:
        raise InputError([p if p.startswith(str(plan)) else f"{plan}: {p}"
                          for p in err.problems]) from None


def _write_report(expanded, doc, inst, result, html_path: Path | None,
                  png_dir: Path | None, risk=None) -> list[str]:
    """Write the HTML report (saying what the independent checker finds in `doc`, and the
    runtime `risk` when given) and the PNG charts; the lines to print once every output of
    the command is in place."""
    from assignplan.check import check_plan
    from assignplan.files import ensure_folder
    from assignplan.report.html import write_html_report
    from assignplan.report.png import write_png_charts
    from assignplan.units import counted

    wrote = []
    if html_path is not None:
        violations = check_plan(expanded, doc)
        size = write_html_report(html_path, inst, result, violations, risk=risk)
        wrote.append(f"wrote {html_path} ({size / 1024:,.0f} KiB)")
        if violations:
            wrote.append(f"{html_path}: the plan fails the check"
                         f" ({counted(len(violations), 'violation')}); the report says so")
    if png_dir is not None:
        ensure_folder(png_dir)
        wrote += [f"wrote {path}" for path in write_png_charts(png_dir, inst, result, risk)]
    return wrote


@app.command()
@reports_errors
def risk(
    batch: BatchArg,
    plan: Annotated[Path, typer.Argument(help="Plan JSON (from solve --out).", show_default=False)],
    model: ModelOpt = None,
    samples: Annotated[int, typer.Option(
        metavar="N", help="Sampled futures to replay the plan under.")] = 1_000,
    seed: SeedOpt = 0,
    as_json: Annotated[bool, typer.Option("--json", help="Print the figures as JSON.")] = False,
    csv: Annotated[Path | None, typer.Option(
        metavar="FOLDER", help="Write risk-jobs.csv, risk-nodes.csv and risk-summary.csv "
        "into this folder.")] = None,
    report: Annotated[Path | None, typer.Option(
        metavar="REPORT.html", help="Also write the plan's HTML report with a runtime-risk "
        "section to this file.")] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress display.")] = False,
    without: WithoutOpt = None,
    down: DownOpt = None,
    add: AddOpt = None,
    changes: ChangesOpt = None,
    workers: WorkersOpt = None,
    cluster: ClusterOpt = None,
) -> None:
    """Replay a plan under sampled run times: makespan quantiles, the chance to finish inside
    the window, the jobs likeliest to be late, the nodes that end last."""
    from assignplan.dask_executor import check_options, open_executor
    from assignplan.files import all_or_nothing, check_output_dir, check_output_file
    from assignplan.risk.models import parse_model
    from assignplan.risk.replay import check_samples

    check_output_dir(csv, "--csv")
    check_output_file(report, "--report")
    check_samples(samples)
    check_options(workers, cluster)
    runtime = parse_model(model or DEFAULT_MODEL)
    inventory = what_if(without, down, add, changes)
    steps = Steps(not quiet and not as_json)
    expanded, inst = _read_instance(batch, steps, inventory)
    print_changes(expanded)
    doc, result = _read_plan(plan, inst)
    with open_executor(workers, cluster) as executor:
        replays = _assess(inst, result, runtime, samples=samples, seed=seed, steps=steps,
                          executor=executor)
    with all_or_nothing():
        wrote = _write_risk_csv(csv, inst, replays) if csv is not None else []
        wrote += _write_report(expanded, doc, inst, result, report, None, replays)
    for line in wrote:
        typer.echo(line, err=True)
    if as_json:
        from assignplan.risk.figures import summary

        typer.echo(json.dumps(summary(inst, replays), indent=2))
    else:
        from assignplan.report.risk import print_risk
        from assignplan.report.tables import make_console

        print_risk(make_console(), inst, replays)


@app.command()
@reports_errors
def check(
    batch: BatchArg,
    plan: Annotated[Path, typer.Argument(help="Plan JSON to verify.", show_default=False)],
    as_json: Annotated[bool, typer.Option("--json", help="Print the violations as JSON.")]
    = False,
    state: Annotated[Path | None, typer.Option(
        "--state", metavar="STATE", help="Check a replanned plan with its pins: the state it "
        "was replanned from (needs --old).")] = None,
    old: Annotated[Path | None, typer.Option(
        "--old", metavar="PLAN.json", help="With --state: the plan that was replaced.")]
    = None,
    now: Annotated[str | None, typer.Option(
        "--now", metavar="TIME", help="With --state: the moment of the replan (default: "
        "the state's now).")] = None,
    as_planned: Annotated[bool, typer.Option(
        "--as-planned", help="With --state: as `replan --as-planned`.")] = False,
) -> None:
    """Verify any plan against its batch; list every violation (exit 1 if there is any)."""
    from assignplan.check import check_plan, summary_line
    from assignplan.reading import load_plan
    from assignplan.units import hours_of, iso

    pins = None
    if (state is None) != (old is None):
        raise InputError("--state and --old: a replanned plan is checked with both")
    if state is None:
        if now is not None or as_planned:
            raise InputError("--now and --as-planned: only --state reads them")
        expanded = load_batch_and_warn(batch)
    else:
        from assignplan.cli_week import _now_value
        from assignplan.replan import load_replan

        given = load_replan(batch, old, state, now=_now_value(now), as_planned=as_planned)
        expanded, pins = given.batch, given.pins
    doc = load_plan(plan)
    try:
        violations = check_plan(expanded, doc, pins)
    except InputError as err:
        raise InputError([f"{plan}: {p}" for p in err.problems]) from None
    if as_json:
        def when(minute):
            return {"at_h": None if minute is None else hours_of(minute),
                    "at": None if minute is None else iso(expanded.window_start, minute)}

        typer.echo(json.dumps({"ok": not violations, "made_for": _made_for(doc), "violations": [
            {"kind": v.kind, "job": v.job, "node": v.node, **when(v.minute),
             "message": v.message} for v in violations]}, indent=2))
    else:
        for v in violations:
            typer.echo(v.message)
        made_for = _made_for(doc)
        typer.echo(summary_line(violations, doc, expanded)
                   + ("" if made_for is None else f"; the plan was made to minimise {made_for}"))
    if violations:
        raise typer.Exit(1)


def _made_for(doc) -> str | None:
    """What the plan document says its method minimised first (None: it does not say)."""
    from assignplan.priority import Priority

    if doc.priority is None:
        return None
    return Priority(doc.priority.name, doc.priority.weights).describe()


@app.command()
@reports_errors
def export(
    batch: BatchArg,
    plan: Annotated[Path, typer.Argument(help="Plan JSON (from solve --out).", show_default=False)],
    template: Annotated[Path, typer.Option(
        "--template", metavar="FILE", help="Text template with {job}, {node}, {start} ... "
        "fields (see README); with an '@@ name' section, one file per job.")],
    out: Annotated[Path, typer.Option(
        "--out", metavar="DIR|FILE", help="The folder for one file per job, or the one file.")],
) -> None:
    """Write the plan through your own text template: a file per job (scripts) or one file
    with a block per job (a manifest), in planned start order."""
    from assignplan.check import check_plan
    from assignplan.export import read_template, write_export
    from assignplan.files import all_or_nothing, check_output_dir, check_output_file
    from assignplan.units import counted

    chosen = read_template(template)
    if chosen.per_job:
        check_output_dir(out, "--out")
    elif out.is_dir():
        raise InputError(f"--out {out}: is a folder; {template} writes one file (it has no "
                         "'@@ name' section)")
    else:
        check_output_file(out, "--out")
    expanded, inst = _read_instance(batch, Steps(False))
    doc, result = _read_plan(plan, inst)
    violations = check_plan(expanded, doc)
    with all_or_nothing():
        wrote = write_export(chosen, inst, result, out)
    for line in wrote:
        typer.echo(line, err=True)
    if violations:
        typer.echo(f"{plan}: warning: the plan fails the check "
                   f"({counted(len(violations), 'violation')}); `assignplan check` lists them",
                   err=True)


@app.command()
@reports_errors
def schema(
    out: Annotated[Path, typer.Option(
        metavar="FOLDER", help="Folder for batch.schema.json, plan.schema.json, "
        "runtime-model.schema.json, state.schema.json and changes.schema.json.")]
    = Path("schemas"),
) -> None:
    """Write the JSON Schemas of the batch, plan, runtime-model, state and changes documents
    (generated from the models)."""
    from assignplan.files import (
        all_or_nothing,
        atomic_write_text,
        check_output_dir,
        ensure_folder,
    )
    from assignplan.schemas import schema_texts

    check_output_dir(out, "--out")
    with all_or_nothing():
        ensure_folder(out)
        for name, text in schema_texts().items():
            atomic_write_text(out / name, text)
    for name in schema_texts():
        typer.echo(f"wrote {out / name}")


from assignplan.cli_week import register  # noqa: E402  (commands of their own module)
from assignplan.importers.cli import import_app  # noqa: E402  (sub-app, mounted last)

register(app)
app.add_typer(import_app, name="import")


def main() -> None:  # pragma: no cover - the console script goes through `app`
    app(sys.argv[1:])
