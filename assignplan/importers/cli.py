"""`assignplan import swf|csv`: thin commands that turn a trace or a spreadsheet into a batch."""

from __future__ import annotations

from datetime import datetime
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from assignplan.errors import AssignplanError, InputError

import_app = typer.Typer(
    help="Turn an accounting trace (SWF) or a job spreadsheet (CSV) into a batch file.",
    no_args_is_help=True,
    pretty_exceptions_show_locals=False,
)


class Estimate(StrEnum):
    requested = "requested"
    actual = "actual"


NodesOpt = Annotated[Path, typer.Option(
    "--nodes", show_default=False,
    help='Node file: {"window": {...}, "nodes": [...]} in the batch\'s node format.')]
OutOpt = Annotated[Path, typer.Option("--out", show_default=False,
                                      help="Batch JSON to write (atomically).")]


def _run(work) -> None:
    """Run `work`, printing each problem of a library error on stderr with its exit code."""
    try:
        work()
    except AssignplanError as err:
        for line in err.problems:
            typer.echo(line, err=True)
        raise typer.Exit(err.exit_code) from None


def _parse_start(text: str | None) -> datetime | None:
    if text is None:
        return None
    try:
        return datetime.fromisoformat(text)
    except ValueError:
        raise InputError(f"--start {text}: not an ISO 8601 date or time (2025-03-03T08:00)"
                         ) from None


@import_app.command("swf")
def swf_command(
    trace: Annotated[Path, typer.Argument(show_default=False, help="SWF accounting trace.")],
    nodes: NodesOpt,
    week: Annotated[int, typer.Option(min=1, show_default=False,
                                      help="Week of the trace, from 1: jobs submitted in"
                                      " [(K-1)*7 d, K*7 d) after its start.")],
    out: OutOpt,
    start: Annotated[str | None, typer.Option(
        help="Window start (ISO 8601). Default: the node file's window, else the trace's"
        " UnixStartTime + (K-1) weeks, else 2000-01-03 + (K-1) weeks.")] = None,
    estimate: Annotated[Estimate, typer.Option(
        help="Job hours from the requested time or the actual run time.")] = Estimate.requested,
    memory_per_core_gib: Annotated[float, typer.Option(
        help="Memory per core when the trace records none.")] = 2.0,
    skip_bad: Annotated[bool, typer.Option(
        help="Skip and count malformed lines instead of stopping.")] = False,
) -> None:
    """Replay one week of a real trace on your inventory: one single-node job per trace job."""
    from assignplan.importers import write_batch
    from assignplan.importers.swf import import_swf
    from assignplan.report.exports import check_output_file

    def work() -> None:
        check_output_file(out, "--out")
        result = import_swf(trace, nodes, week, start=_parse_start(start),
                            estimate=estimate.value, memory_per_core_gib=memory_per_core_gib,
                            skip_bad=skip_bad)
        write_batch(result.batch, out)
        for line in result.report_lines():
            typer.echo(line, err=True)
        typer.echo(f"wrote {out}: {result.imported} jobs")

    _run(work)


@import_app.command("csv")
def csv_command(
    jobs: Annotated[Path, typer.Argument(
        show_default=False, help="CSV, one job per row, columns named as the JSON job fields"
        " (needs/follows separated by ';').")],
    nodes: Annotated[Path, typer.Option(
        "--nodes", show_default=False,
        help='Node file with the window: {"window": {...}, "nodes": [...]}. Required.')],
    out: OutOpt,
) -> None:
    """Read a job spreadsheet into a batch, validated like a batch file."""
    from assignplan.importers import write_batch
    from assignplan.importers.table import import_csv
    from assignplan.report.exports import check_output_file

    def work() -> None:
        check_output_file(out, "--out")
        batch = import_csv(jobs, nodes)
        write_batch(batch, out)
        typer.echo(f"wrote {out}: {len(batch.jobs)} jobs")

    _run(work)
