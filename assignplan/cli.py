"""The `assignplan` command line: thin commands over the library; errors become exit codes."""

from __future__ import annotations

import functools
import json
import sys
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated

import typer
from pydantic import ValidationError
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from assignplan.errors import AssignplanError, InputError
from assignplan.methods.ga.config import GAConfig
from assignplan.model import HistoryRow

app = typer.Typer(
    name="assignplan",
    help="Plan a week of single-node jobs on a heterogeneous cluster.",
    no_args_is_help=True,
    pretty_exceptions_show_locals=False,
    add_completion=False,
)


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

    return wrapper


def load_batch_and_warn(path: Path):
    """Load a batch; its warnings (doubtful but valid input) go to stderr, one line each."""
    from assignplan.model import load_batch

    expanded = load_batch(path)
    for line in expanded.warnings:
        typer.echo(f"{path}: warning: {line}", err=True)
    return expanded


GA_DEFAULTS = GAConfig()
GenerationsOpt = Annotated[int, typer.Option(help="ga: most generations.", min=0,
                                             rich_help_panel="ga")]
StagnationOpt = Annotated[int, typer.Option(
    help="ga: stop after this many generations without a better plan.", min=1,
    rich_help_panel="ga")]
MuOpt = Annotated[int, typer.Option(help="ga: parents kept (μ).", min=2, rich_help_panel="ga")]
LamOpt = Annotated[int, typer.Option(help="ga: offspring per generation (λ).", min=2,
                                     rich_help_panel="ga")]
CrossoverOpt = Annotated[str, typer.Option(help="ga: uniform | kpoint.", rich_help_panel="ga")]
BiasOpt = Annotated[float, typer.Option(
    help="ga: uniform crossover, chance a gene comes from the first parent.",
    rich_help_panel="ga")]
KpointsOpt = Annotated[int, typer.Option(help="ga: cut points of k-point crossover.", min=1,
                                         rich_help_panel="ga")]
MutationOpt = Annotated[str, typer.Option(
    help="ga: symmetric | asymmetric (moves jobs off the busiest nodes more often).",
    rich_help_panel="ga")]
FlipsOpt = Annotated[float, typer.Option(
    help="ga: expected bit flips per individual in its job x node matrix.",
    rich_help_panel="ga")]
TournamentOpt = Annotated[int, typer.Option(help="ga: tournament size.", min=1,
                                            rich_help_panel="ga")]
SurvivalOpt = Annotated[str, typer.Option(help="ga: plus = (μ+λ), comma = (μ,λ).",
                                          rich_help_panel="ga")]
LocalOpt = Annotated[bool, typer.Option(
    help="ga: sharpen the best offspring by moves off the makespan node.",
    rich_help_panel="ga")]
RepackOpt = Annotated[int, typer.Option(
    help="ga: nodes re-packed exactly (CP-SAT) around the makespan node each generation; "
         "0: off.", min=0, max=64, rich_help_panel="ga")]
DescentOpt = Annotated[int, typer.Option(
    help="ga: node rebuilds the node-local descent (moves, swaps, ejection chains off the "
         "last-ending node) may spend on the best plan each generation; 0: off.",
    min=0, max=10_000_000, rich_help_panel="ga")]
BalancedOpt = Annotated[int, typer.Option(
    help="ga: greedy seeds that keep each class of jobs on the node groups a work-split "
         "relaxation gives it; 0: off.", min=0, max=10_000, rich_help_panel="ga")]
ReserveOpt = Annotated[float, typer.Option(
    help="ga: share of the time limit spent first with scarce node groups (GPU, large "
         "memory, tags) kept for the jobs that need them, when the other nodes can take the "
         "rest; 0: off.", min=0.0, max=1.0, rich_help_panel="ga")]


def ga_config(**fields) -> GAConfig:
    """Validate the ga options once; a bad value is an input error naming its option."""
    try:
        return GAConfig(**fields)
    except ValidationError as err:
        raise InputError([
            f"--{str(e['loc'][0]).replace('_', '-') if e['loc'] else 'ga'}: {e['msg']}"
            for e in err.errors()]) from None


@contextmanager
def progress_bar(enabled: bool, generations: int, bound_h: float):
    """A rich progress bar on stderr fed by the ga's per-generation hook (None when hidden)."""
    console = Console(stderr=True)
    if not enabled or not console.is_terminal:
        yield None
        return
    columns = (TextColumn("ga"), BarColumn(), TextColumn("gen {task.completed:,.0f}"),
               TextColumn("best {task.fields[best]}"), TextColumn("bound gap {task.fields[gap]}"),
               TimeElapsedColumn())
    with Progress(*columns, console=console, transient=True) as progress:
        task = progress.add_task("ga", total=generations, best="–", gap="–")

        def tick(row: HistoryRow) -> None:
            gap = 100 * (row.best_makespan_h - bound_h) / bound_h if bound_h > 0 else 0.0
            progress.update(task, completed=row.generation, best=f"{row.best_makespan_h:.2f} h",
                            gap=f"{gap:.2f} %")

        yield tick


BatchArg = Annotated[Path, typer.Argument(help="Batch JSON: window, nodes and jobs.",
                                          show_default=False)]


@app.command()
@reports_errors
def solve(
    batch: BatchArg,
    method: Annotated[str, typer.Option(help="ga | greedy | exact")] = "ga",
    seed: Annotated[int, typer.Option(help="Seed of the random generator.")] = 0,
    time_limit: Annotated[float, typer.Option(help="Seconds a search method may run.",
                                              min=0.1)] = 30.0,
    out: Annotated[Path | None, typer.Option(help="Write the plan to this JSON file.")] = None,
    csv: Annotated[Path | None, typer.Option(
        help="Write jobs.csv, nodes.csv and summary.csv into this folder.")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
    show_all: Annotated[bool, typer.Option("--all", help="List every job, not the first 30.")]
    = False,
    force: Annotated[bool, typer.Option(help="Let exact try batches above its size limit.")]
    = False,
    report: Annotated[Path | None, typer.Option(
        help="Also write the HTML report of the plan to this file.")] = None,
    png: Annotated[Path | None, typer.Option(help="Also write each chart as PNG here.")] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")] = False,
    generations: GenerationsOpt = GA_DEFAULTS.generations,
    stagnation: StagnationOpt = GA_DEFAULTS.stagnation,
    mu: MuOpt = GA_DEFAULTS.mu,
    lam: LamOpt = GA_DEFAULTS.lam,
    crossover: CrossoverOpt = GA_DEFAULTS.crossover,
    crossover_bias: BiasOpt = GA_DEFAULTS.crossover_bias,
    kpoints: KpointsOpt = GA_DEFAULTS.kpoints,
    mutation: MutationOpt = GA_DEFAULTS.mutation,
    mutation_flips: FlipsOpt = GA_DEFAULTS.mutation_flips,
    tournament_size: TournamentOpt = GA_DEFAULTS.tournament_size,
    survival: SurvivalOpt = GA_DEFAULTS.survival,
    local_search: LocalOpt = GA_DEFAULTS.local_search,
    repack_nodes: RepackOpt = GA_DEFAULTS.repack_nodes,
    descent_trials: DescentOpt = GA_DEFAULTS.descent_trials,
    balanced_seeds: BalancedOpt = GA_DEFAULTS.balanced_seeds,
    reserve_share: ReserveOpt = GA_DEFAULTS.reserve_share,
) -> None:
    """Plan a batch: node and start time per job, makespan, utilisation, gap to the bound."""
    from assignplan.instance import build_instance
    from assignplan.report import exports

    exports.check_output_file(out, "--out")
    exports.check_output_dir(csv, "--csv")
    exports.check_output_file(report, "--report")
    exports.check_output_dir(png, "--png")
    expanded = load_batch_and_warn(batch)
    # The planning stack (numba, solvers) loads only once the input is known to be good.
    from assignplan.bounds import lower_bound
    from assignplan.plan import to_plan_doc
    from assignplan.planner import solve as run
    from assignplan.report import stats, tables

    config = ga_config(generations=generations, stagnation=stagnation, mu=mu, lam=lam,
                       crossover=crossover, crossover_bias=crossover_bias, kpoints=kpoints,
                       mutation=mutation, mutation_flips=mutation_flips,
                       tournament_size=tournament_size, survival=survival,
                       local_search=local_search, repack_nodes=repack_nodes,
                       descent_trials=descent_trials, balanced_seeds=balanced_seeds,
                       reserve_share=reserve_share)
    inst = build_instance(expanded)
    bound = lower_bound(inst)
    with progress_bar(method == "ga" and not quiet and not as_json, config.generations,
                      bound.value / 60) as tick:
        result = run(inst, method, seed=seed, time_limit=time_limit, force=force,
                     ga_config=config, on_generation=tick, bound=bound)
    summary = stats.summary(inst, result)
    nodes, jobs = stats.node_frame(inst, result), stats.job_frame(inst, result)
    if out is not None:
        exports.write_json(out, to_plan_doc(inst, result).model_dump(mode="json"))
    if csv is not None:
        exports.write_csv_tables(csv, summary, nodes, jobs)
    _write_report(inst, result, report, png)
    if as_json:
        typer.echo(json.dumps(summary, indent=2))
    else:
        tables.print_plan(tables.make_console(), summary, nodes, jobs, show_all=show_all)


@app.command()
@reports_errors
def compare(
    batch: BatchArg,
    seed: Annotated[int, typer.Option(help="Seed of the random generator.")] = 0,
    time_limit: Annotated[float, typer.Option(help="Seconds each method may run.", min=0.1)]
    = 30.0,
    as_json: Annotated[bool, typer.Option("--json", help="Print a JSON list.")] = False,
) -> None:
    """Run greedy, ga and (on small batches) exact with one budget; one row per method."""
    from assignplan.instance import build_instance

    inst = build_instance(load_batch_and_warn(batch))
    from assignplan.compare import compare_methods, compare_records
    from assignplan.planner import METHODS
    from assignplan.report.tables import compare_table, make_console

    rows = compare_methods(inst, METHODS, seed=seed, time_limit=time_limit)
    records = compare_records(inst, rows)
    if as_json:
        typer.echo(json.dumps(records, indent=2))
    else:
        make_console().print(compare_table(records))
        for rec in records:
            if rec["note"]:
                typer.echo(f"{rec['method']}: {rec['status']}: {rec['note']}")
    if any(rec["status"] == "failed" for rec in records):
        raise typer.Exit(1)


@app.command()
@reports_errors
def report(
    batch: BatchArg,
    plan: Annotated[Path, typer.Argument(help="Plan JSON (from solve --out).", show_default=False)],
    out: Annotated[Path, typer.Option(help="HTML file to write.")] = Path("report.html"),
    png: Annotated[Path | None, typer.Option(help="Also write each chart as PNG here.")] = None,
) -> None:
    """Write a self-contained HTML report (timeline, utilisation, tables) of a plan."""
    from assignplan.instance import build_instance
    from assignplan.model import load_plan
    from assignplan.plan import result_from_doc
    from assignplan.report.exports import check_output_dir, check_output_file

    check_output_file(out, "--out")
    check_output_dir(png, "--png")
    inst = build_instance(load_batch_and_warn(batch))
    try:
        result = result_from_doc(inst, load_plan(plan))
    except InputError as err:
        raise InputError([p if p.startswith(str(plan)) else f"{plan}: {p}"
                          for p in err.problems]) from None
    _write_report(inst, result, out, png)


def _write_report(inst, result, html_path: Path | None, png_dir: Path | None) -> None:
    from assignplan.report.charts import write_png_charts
    from assignplan.report.html import write_html_report

    if html_path is not None:
        size = write_html_report(html_path, inst, result)
        typer.echo(f"wrote {html_path} ({size / 1024:,.0f} KiB)", err=True)
    if png_dir is not None:
        png_dir.mkdir(parents=True, exist_ok=True)
        for path in write_png_charts(png_dir, inst, result):
            typer.echo(f"wrote {path}", err=True)


@app.command()
@reports_errors
def check(
    batch: BatchArg,
    plan: Annotated[Path, typer.Argument(help="Plan JSON to verify.", show_default=False)],
    as_json: Annotated[bool, typer.Option("--json", help="Print the violations as JSON.")]
    = False,
) -> None:
    """Verify any plan against its batch; list every violation (exit 1 if there is any)."""
    from assignplan.check import check_plan, summary_line
    from assignplan.model import load_plan
    from assignplan.units import hours_of, iso

    expanded = load_batch_and_warn(batch)
    doc = load_plan(plan)
    try:
        violations = check_plan(expanded, doc)
    except InputError as err:
        raise InputError([f"{plan}: {p}" for p in err.problems]) from None
    if as_json:
        def when(minute):
            return {"at_h": None if minute is None else hours_of(minute),
                    "at": None if minute is None else iso(expanded.window_start, minute)}

        typer.echo(json.dumps({"ok": not violations, "violations": [
            {"kind": v.kind, "job": v.job, "node": v.node, **when(v.minute),
             "message": v.message} for v in violations]}, indent=2))
    else:
        for v in violations:
            typer.echo(v.message)
        typer.echo(summary_line(violations, doc, expanded))
    if violations:
        raise typer.Exit(1)


@app.command()
@reports_errors
def schema(
    out: Annotated[Path, typer.Option(help="Folder for batch.schema.json and plan.schema.json.")]
    = Path("schemas"),
) -> None:
    """Write the JSON Schemas of the batch and plan documents (generated from the models)."""
    from assignplan.report.exports import atomic_write_text, check_output_dir
    from assignplan.schemas import schema_texts

    check_output_dir(out, "--out")
    out.mkdir(parents=True, exist_ok=True)
    for name, text in schema_texts().items():
        atomic_write_text(out / name, text)
        typer.echo(f"wrote {out / name}")


from assignplan.importers.cli import import_app  # noqa: E402  (sub-app, mounted last)

app.add_typer(import_app, name="import")


def main() -> None:  # pragma: no cover - the console script goes through `app`
    app(sys.argv[1:])
