"""`assignplan import swf|csv`: thin commands that turn a trace or a spreadsheet into a batch."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path
from typing import Annotated

import typer

from assignplan.errors import AssignplanError, InputError

import_app = typer.Typer(
    help="Turn an accounting trace (SWF) or a job spreadsheet (CSV) into a batch file.",
    no_args_is_help=True,
    pretty_exceptions_show_locals=False,
)


InventoryOpt = Annotated[Path, typer.Option(
    "--inventory", show_default=False, metavar="INVENTORY.json",
    help='The nodes and window: {"window": {...}, "nodes": [...]} as in a batch file (a'
    " batch file will do: its jobs are ignored).")]
OutOpt = Annotated[Path, typer.Option("--out", show_default=False, metavar="BATCH.json",
                                      help="Batch JSON to write (atomically).")]


def _run(work) -> None:
    """Run `work`, printing each problem of a library error on stderr with its exit code."""
    try:
        work()
    except AssignplanError as err:
        for line in err.problems:
            typer.echo(line, err=True)
        raise typer.Exit(err.exit_code) from None


def _parse_number(option: str, text: str, *, whole: bool, unit: str = "") -> float:
    """An option's number, parsed here so that a typo is told in our words, not the parser's."""
    try:
        return int(text) if whole else float(text)
    except ValueError:
        what = "a whole number" if whole else "a number"
        raise InputError(f"{option} {text}: not {what}{unit}") from None


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
    inventory: InventoryOpt,
    week: Annotated[str, typer.Option(show_default=False, metavar="K",
                                      help="Week of the trace, from 1: jobs submitted in"
                                      " [(K-1)*7 d, K*7 d) after its start.")],
    out: OutOpt,
    start: Annotated[str | None, typer.Option(
        help="Window start (ISO 8601). Default: the inventory's window, else the trace's"
        " UnixStartTime + (K-1) weeks, else 2000-01-03 + (K-1) weeks.")] = None,
    estimate: Annotated[str, typer.Option(
        metavar="requested|actual",
        help="Job hours from the requested time or the actual run time.")] = "requested",
    gib_per_core: Annotated[str, typer.Option(
        metavar="GIB", help="Memory (GiB) per core of a job whose trace line records none."
    )] = "2",
    skip_bad: Annotated[bool, typer.Option(
        "--skip-bad", help="Skip and count malformed lines instead of stopping.")] = False,
) -> None:
    """Replay one week of a real trace on your inventory: one single-node job per trace job."""
    from assignplan.files import check_output_file
    from assignplan.importers import batch_size, write_batch
    from assignplan.importers.swf import import_swf

    def work() -> None:
        check_output_file(out, "--out")
        result = import_swf(
            trace, inventory, int(_parse_number("--week", week, whole=True)),
            start=_parse_start(start), estimate=estimate, skip_bad=skip_bad,
            gib_per_core=_parse_number("--gib-per-core", gib_per_core, whole=False,
                                       unit=" of GiB"))
        write_batch(result.batch, out)
        for line in result.report_lines():
            typer.echo(line, err=True)
        typer.echo(f"wrote {out}: {batch_size(result.batch)}")

    _run(work)


@import_app.command("csv")
def csv_command(
    jobs: Annotated[Path, typer.Argument(
        show_default=False, help="CSV, one job per row, columns named as the JSON job fields;"
        " cells separated by ',', ';' or tabs (needs/follows: names separated by ';' or ',').")],
    inventory: InventoryOpt,
    out: OutOpt,
) -> None:
    """Read a job spreadsheet into a batch, validated like a batch file."""
    from assignplan.files import check_output_file
    from assignplan.importers import batch_size, write_batch
    from assignplan.importers.table import import_csv

    def work() -> None:
        check_output_file(out, "--out")
        result = import_csv(jobs, inventory)
        write_batch(result.batch, out)
        for line in result.notes:
            typer.echo(line, err=True)
        typer.echo(f"wrote {out}: {batch_size(result.batch)}")

    _run(work)
