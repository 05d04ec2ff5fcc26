"""`poise export`: write one recorded run to csv, mat, npz or parquet (units in the column names)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from daemon.commands.runs import add_store_arguments, store_path
from daemon.recording.formats import FORMATS

NAME = "export"
HELP = f"write one recorded run's samples (and events, except in csv) to {', '.join(FORMATS)}"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter  # keep the table's lines
    parser.epilog = "formats:\n" + "\n".join(
        f"  {name:<8} {f.holds}\n  {'':<8} needs: {f.needs or 'nothing beyond Poise itself'}"
        for name, f in FORMATS.items()
    )
    parser.add_argument("run_id", metavar="RUN", type=int, help="run id (see `poise runs`)")
    add_store_arguments(parser)
    parser.add_argument(
        "--format", required=True, choices=list(FORMATS), help="see the formats below"
    )
    parser.add_argument(
        "--out", metavar="FILE", help="output file (default: <rig>-run<RUN>.<format>)"
    )


def run(args: argparse.Namespace) -> int:
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeRemainingColumn,
    )

    from daemon.recording.export import default_out_path, export_run
    from daemon.recording.store import get_run, open_for_reading

    path = store_path(args)
    conn = open_for_reading(path)
    try:
        run_record = get_run(conn, args.run_id, path)
        out = Path(args.out) if args.out else default_out_path(run_record, args.format)
        console = Console(stderr=True)
        if console.is_terminal:
            columns = (
                TextColumn("exporting"),
                BarColumn(),
                MofNCompleteColumn(),
                TimeRemainingColumn(),
            )
            with Progress(*columns, console=console, transient=True) as bar:
                task = bar.add_task("export", total=run_record.samples_written)
                count = export_run(
                    conn,
                    run_record,
                    args.format,
                    out,
                    lambda done: bar.update(task, completed=done),
                )
        else:
            count = export_run(conn, run_record, args.format, out)
    finally:
        conn.close()
    print(f"wrote {count} samples of run {run_record.run_id} ({run_record.rig_id}) to {out}")
    if args.format == "csv" and run_record.events_written:
        print(
            f"note: csv holds samples only; the run's {run_record.events_written} events "
            "are in the mat, npz and parquet exports",
            file=sys.stderr,
        )
    return 0
