"""`poise dash`: the terminal dashboard, a client of a running daemon's control API.

Quitting the dashboard leaves the daemon running (it keeps its own state and
watchdogs); quitting while the rig moves sends a controlled stop first.
"""

from __future__ import annotations

import argparse

from daemon.commands import add_config_argument, config_path

NAME = "dash"
HELP = "terminal dashboard for a running daemon (live state, plots, interlocks, keys)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--socket", metavar="PATH",
        help="control socket (default: the config's api.socket_path, else this user's socket for the rig)",
    )
    add_config_argument(parser)


def drive_unit(drive_kind: str) -> str:
    """The unit the drive command is shown in: volts or newtons, as the rig's drive."""
    return "V" if drive_kind == "voltage" else "N"


def run(args: argparse.Namespace) -> int:
    from daemon.api.paths import control_socket_path
    from daemon.config import load_config
    from daemon.ui.app import PoiseDash

    config = load_config(config_path(args))
    socket_path = args.socket or str(control_socket_path(config))
    PoiseDash(socket_path, drive_unit=drive_unit(config.drive.kind)).run()
    return 0
