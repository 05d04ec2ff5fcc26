"""Operator commands sent to a running daemon over its control API: `poise arm`, `poise status`, ...

Every verb takes ``--socket PATH`` (default: ``api.socket_path`` of ``--config
FILE``, itself defaulting to the demo rig) and ``--json``. A refused command
prints ``poise: <verb> refused: <reason>`` and exits 2, as does a daemon that is
not running.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable
from dataclasses import dataclass

from daemon.commands import add_config_argument, config_path
from daemon.control.excitation import EXCITE_KINDS
from daemon.operator_commands import COMMANDS as OPERATOR_COMMANDS
from daemon.operator_commands import CommandSpec

# asyncio, json, rich and the API client are imported inside run() (see daemon/cli.py).

DEFAULT_TIMEOUT_S = 5.0
TINY = 1e-9


def _add_setpoint(parser: argparse.ArgumentParser) -> None:
    spec = OPERATOR_COMMANDS["setpoint"]
    parser.add_argument("x_m", type=float, metavar="X_M", help=spec.argument_help["x_m"])


def _setpoint_args(args: argparse.Namespace) -> dict:
    return {"x_m": args.x_m}


def _add_excite(parser: argparse.ArgumentParser) -> None:
    arg_help = OPERATOR_COMMANDS["excite"].argument_help
    parser.add_argument("--kind", required=True, choices=EXCITE_KINDS, help=arg_help["kind"])
    parser.add_argument("--amplitude", type=float, help=arg_help["amplitude"])
    parser.add_argument(
        "--duration", required=True, type=float, metavar="S", help=arg_help["duration_s"]
    )


def _excite_args(args: argparse.Namespace) -> dict:
    api_args: dict = {"kind": args.kind, "duration_s": args.duration}
    if args.amplitude is not None:
        api_args["amplitude"] = args.amplitude
    return api_args


def _add_record(parser: argparse.ArgumentParser) -> None:
    arg_help = OPERATOR_COMMANDS["record"].argument_help
    parser.add_argument("switch", choices=("on", "off"), help=arg_help["on"])
    parser.add_argument("--note", help=arg_help["note"])


def _record_args(args: argparse.Namespace) -> dict:
    api_args: dict = {"on": args.switch == "on"}
    if args.note is not None:
        api_args["note"] = args.note
    return api_args


#: How a verb's own command-line arguments are declared and turned into the API's arguments,
#: for the commands that take any.
_ARGUMENTS: dict[
    str, tuple[Callable[[argparse.ArgumentParser], None], Callable[[argparse.Namespace], dict]]
] = {
    "setpoint": (_add_setpoint, _setpoint_args),
    "excite": (_add_excite, _excite_args),
    "record": (_add_record, _record_args),
}


@dataclass(frozen=True)
class Verb:
    """One CLI verb: the API command it sends (name, help and arguments from its spec)."""

    spec: CommandSpec

    @property
    def name(self) -> str:
        return self.spec.verb

    @property
    def command(self) -> str:
        return self.spec.name

    def add_arguments(self, parser: argparse.ArgumentParser) -> None:
        if self.command in _ARGUMENTS:
            _ARGUMENTS[self.command][0](parser)
        parser.add_argument(
            "--socket",
            metavar="PATH",
            help="control socket (default: the config's api.socket_path, else this user's socket for the rig)",
        )
        add_config_argument(parser)
        parser.add_argument("--json", action="store_true", help="print the daemon's answer as JSON")
        parser.add_argument(
            "--timeout",
            type=float,
            default=DEFAULT_TIMEOUT_S,
            metavar="S",
            help=f"give up waiting for the daemon after S seconds (default {DEFAULT_TIMEOUT_S:g})",
        )

    def api_args(self, args: argparse.Namespace) -> dict:
        return _ARGUMENTS[self.command][1](args) if self.command in _ARGUMENTS else {}

    def run(self, args: argparse.Namespace) -> int:
        result = _send(
            self.name, _socket_path(args), self.command, self.api_args(args), args.timeout
        )
        if args.json:
            import json

            print(json.dumps(result, allow_nan=False))
        elif self.command == "status":
            _print_status(result)
        else:
            details = " ".join(f"{key}={value}" for key, value in result.items())
            print(f"{self.name}: ok{' ' + details if details else ''}")
        return 0


VERBS = tuple(Verb(spec) for spec in OPERATOR_COMMANDS.values() if spec.has_verb)

COMMANDS = [(verb.name, verb.spec.summary, verb.add_arguments, verb.run) for verb in VERBS]


def _socket_path(args: argparse.Namespace) -> str:
    if args.socket:
        return args.socket
    from daemon.api.paths import control_socket_path
    from daemon.config import load_config

    return str(control_socket_path(load_config(config_path(args))))


def _send(verb: str, socket_path: str, command: str, api_args: dict, timeout_s: float) -> dict:
    """Run one request against the daemon; operator-facing failures become OperatorError."""
    import asyncio

    from daemon.api.client import ApiClient, ApiError
    from daemon.errors import CommandRefused, OperatorError

    async def request() -> dict:
        async with asyncio.timeout(timeout_s):
            async with await ApiClient.connect(socket_path, source="cli") as client:
                return await client.request(command, api_args)

    try:
        return asyncio.run(request())
    except CommandRefused as exc:
        raise OperatorError(f"{verb} refused: {exc.reason}") from None
    except ApiError as exc:  # its message already names the command or the socket
        raise OperatorError(str(exc)) from None
    except TimeoutError:
        raise OperatorError(
            f"{verb}: no answer from the daemon on {socket_path} within {timeout_s:g} s"
        ) from None


def _print_status(status: dict) -> None:
    """Scalars and nested objects in one key/value table; each list of records in its own table."""
    from rich.console import Console
    from rich.table import Table

    console = Console()
    summary = Table(title="Poise status", show_header=False)
    summary.add_column("key", style="bold")
    summary.add_column("value")
    record_tables = []
    for key, value in status.items():
        if isinstance(value, list) and value and all(isinstance(item, dict) for item in value):
            record_tables.append(_records_table(key, value))
        elif isinstance(value, dict):
            for sub_key, sub_value in value.items():
                summary.add_row(f"{key}.{sub_key}", _show(sub_value))
        else:
            summary.add_row(key, _show(value))
    console.print(summary)
    for table in record_tables:
        console.print(table)


def _records_table(title: str, records: list[dict]):
    from rich.table import Table

    columns: list[str] = []
    for record in records:
        columns.extend(key for key in record if key not in columns)
    table = Table(title=title)
    for column in columns:
        table.add_column(column)
    for record in records:
        table.add_row(*(_show(record.get(column, "")) for column in columns))
    return table


def _show(value: object) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        # Below a nanometre, nano-volt or nano-radian nothing is physical: show 0, not the
        # 4.94066e-324 a filter decaying to rest passes through.
        return "0" if abs(value) < TINY else f"{value:.6g}"
    if isinstance(value, list):
        return ", ".join(_show(item) for item in value) if value else "none"
    if isinstance(value, dict):
        return ", ".join(f"{key}={_show(item)}" for key, item in value.items())
    return str(value)
