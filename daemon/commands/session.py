"""`poise session`: one unattended session (home, arm, swing up, catch, balance, stop, disarm).

Exits 0 only if the pendulum was balanced for the whole duration without a
trip. With ``--sim`` (the default without ``--port``) the built-in simulated
rig runs in lockstep, so a session takes seconds.
"""

from __future__ import annotations

import argparse

from daemon.commands.run import add_port_arguments, load, sim_options

NAME = "session"
HELP = "run one whole session unattended and print a summary"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_port_arguments(parser)
    parser.add_argument(
        "--duration", type=float, default=10.0, metavar="S", help="seconds of balance (default 10)"
    )
    parser.add_argument(
        "--disturb", action="append", default=[], metavar="T:IMPULSE",
        help="a disturbance T s after balance begins, of IMPULSE N*s at the pendulum's centre of "
        "mass (repeatable): applied by the simulated rig, or asked of the operator on a real one",
    )
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")


def run(args: argparse.Namespace) -> int:
    import json
    import logging
    import sys
    import tempfile
    from pathlib import Path

    from daemon.errors import OperatorError
    from daemon.runtime import event_loop
    from daemon.runtime.service import PoiseService
    from daemon.runtime.session import BALANCED, parse_disturbance, run_session, summarise_run

    logging.basicConfig(level=logging.ERROR, format="%(name)s %(levelname)s %(message)s")
    if not args.duration > 0:
        raise OperatorError(f"--duration must be > 0 seconds (got {args.duration})")
    disturbances = [parse_disturbance(text) for text in args.disturb]
    config, text = load(args)
    sim = None if args.port else sim_options(args, lockstep=True)

    async def session(socket_path: Path) -> dict:
        service = PoiseService(config, text, port_url=args.port, sim=sim, socket_path=socket_path)
        await service.start()
        service.install_signal_handlers()
        try:
            result = await run_session(service, args.duration, disturbances)
        finally:
            await service.close(outcome="aborted")
        return summarise_run(config.recording.db_path, result)

    # An unattended session serves its control API on a private socket (a dashboard may attach
    # with `poise dash --socket PATH`), so it never clashes with a daemon already running.
    with tempfile.TemporaryDirectory(prefix="poise-session-") as folder:
        socket_path = Path(folder) / f"{config.rig.id}.sock"
        print(f"poise session: control API on {socket_path}", file=sys.stderr, flush=True)
        summary = event_loop.run(session(socket_path))
    if args.json:
        print(json.dumps(summary, indent=2))
    else:
        _print_table(summary)
    return 0 if summary["outcome"] == BALANCED and not summary["trips"] else 1


def _print_table(summary: dict) -> None:
    from rich.console import Console
    from rich.table import Table

    table = Table(title=f"session: {summary['outcome']}", show_header=False)
    table.add_column("field")
    table.add_column("value", justify="right")

    def show(value: object, spec: str = ".3f") -> str:
        return "-" if value is None else format(value, spec) if isinstance(value, float) else str(value)

    latency = summary["latency_us"]
    loop = summary["loop"]
    rows = [
        ("outcome", summary["outcome"] + (f" ({summary['detail']})" if summary["detail"] else "")),
        ("swing-up", show(summary["swing_up_s"], ".2f") + " s"),
        ("balanced for", show(summary["balance_s"], ".2f") + " s"),
        ("balance rms angle", show(summary["balance_rms_angle_deg"], ".3f") + " deg"),
        ("balance rms x", show(summary["balance_rms_x_m"], ".4f") + " m"),
        ("max |x| in balance", show(summary["max_abs_x_m"], ".4f") + " m"),
        ("samples answered / unanswered / recorded / dropped",
         (f"{summary['samples']} / {summary['samples_unanswered']} / {summary['samples_recorded']} / "
         f"{summary['dropped_samples']}")),
        ("trips", ", ".join(f"{t['reason']} at {t['t_s']:.3f} s" for t in summary["trips"]) or "none"),
        ("latency p50 / p99 / max",
         f"{show(latency['p50'], '.1f')} / {show(latency['p99'], '.1f')} / {show(latency['max'], '.1f')} us"),
        ("loop lag p99 / max / worst",
         (f"{show(loop['lag_ms_p99'], '.2f')} / {show(loop['lag_ms_max'], '.2f')} / "
          f"{show(loop['lag_ms_worst'], '.2f')} ms")),
        ("longest wait between reads", show(loop["read_gap_ms_worst"], ".2f") + " ms"),
        ("run", f"{summary['run_id']} in {summary['recording']}"),
    ]
    for name, value in rows:
        table.add_row(name, value)
    Console().print(table)
