"""`poise runs`: list the runs recorded in a rig's run store, as a table or JSON."""

from __future__ import annotations

import argparse
import datetime
import json
from pathlib import Path

from daemon.commands import add_config_argument, config_path

NAME = "runs"
HELP = (
    "list recorded runs (id, rig, start, sample time, mode reached, mode ended in, outcome, "
    "samples, drops)"
)


def add_store_arguments(parser: argparse.ArgumentParser) -> None:
    """--db and --config, shared with `poise export`."""
    parser.add_argument(
        "--db", metavar="FILE", help="run store (default: recording.db_path of the config)"
    )
    add_config_argument(parser)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_store_arguments(parser)
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")


def store_path(args: argparse.Namespace) -> Path:
    """The run store named by --db, else by the config's recording.db_path (which must exist)."""
    from daemon.config import load_config
    from daemon.errors import OperatorError

    if args.db:
        return Path(args.db)
    source = config_path(args)
    path = Path(load_config(source).recording.db_path)
    if not path.is_file():
        raise OperatorError(
            f"run store {path}: no such file (recording.db_path in {source}); "
            "pass --db FILE or --config FILE"
        )
    return path


def run(args: argparse.Namespace) -> int:
    from daemon.recording.store import list_runs, open_for_reading

    path = store_path(args)
    conn = open_for_reading(path)
    try:
        runs = list_runs(conn, path)
    finally:
        conn.close()
    rows = [
        {
            "run_id": run.run_id,
            "rig_id": run.rig_id,
            "started": _local_time(run.started_unix_ns),
            "started_unix_ns": run.started_unix_ns,
            "ended_unix_ns": run.ended_unix_ns,
            "duration_s": run.sample_time_s,
            "wall_time_s": run.wall_time_s,
            "mode_reached": run.mode_reached,
            "last_mode": run.last_mode,
            "outcome": run.outcome or "recording",
            "samples": run.samples_written,
            "drops": run.samples_dropped,
            "events_dropped": run.events_dropped,
        }
        for run in runs
    ]
    if args.json:
        print(json.dumps(rows, indent=2))
    else:
        _print_table(path, rows)
    return 0


def _local_time(unix_ns: int) -> str:
    return datetime.datetime.fromtimestamp(unix_ns / 1e9).astimezone().isoformat(timespec="seconds")


def _print_table(path: Path, rows: list[dict]) -> None:
    from rich import box
    from rich.console import Console
    from rich.table import Table

    console = Console()
    if not rows:
        console.print(f"no runs recorded in {path}")
        return
    rigs = sorted({row["rig_id"] for row in rows})
    one_rig = len(rigs) == 1  # the usual case, one store per rig: name it once, in the title
    table = Table(
        title=f"runs of {rigs[0]} in {path}" if one_rig else f"runs in {path}",
        title_justify="left",
        box=box.SIMPLE_HEAD,
        padding=(0, 1, 0, 0),
        pad_edge=False,
    )
    headings = [
        ("id", "right"),
        ("rig", "left"),
        ("start", "left"),
        ("duration", "right"),
        ("reached", "left"),
        ("ended in", "left"),
        ("outcome", "left"),
        ("samples", "right"),
        ("drops", "right"),
    ]
    if one_rig:
        headings.remove(("rig", "left"))
    for heading, justify in headings:
        table.add_column(heading, justify=justify, no_wrap=heading in ("start", "samples"))
    for row in rows:
        duration = "-" if row["duration_s"] is None else f"{row['duration_s']:.1f} s"
        drops = f"{row['drops']:,}"
        if row["events_dropped"]:
            drops += f" (+{row['events_dropped']:,} events)"
        cells = [
            str(row["run_id"]),
            row["rig_id"],
            row["started"].replace("T", " ")[:16],
            duration,
            row["mode_reached"] or "-",
            row["last_mode"] or "-",
            row["outcome"],
            f"{row['samples']:,}",
            f"[bold red]{drops}[/]" if drops != "0" else drops,
        ]
        if one_rig:
            del cells[1]
        table.add_row(*cells)
    console.print(table)
