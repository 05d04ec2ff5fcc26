"""The `poise` command line: one sub-command per module in daemon/commands/.

Each command module defines ``NAME``, ``HELP``, ``add_arguments(parser)`` and
``run(args) -> int``; a module offering several sub-commands instead defines
``COMMANDS``, a list of ``(NAME, HELP, add_arguments, run)`` tuples. Modules
import their heavy dependencies inside ``run`` so that `poise --help` stays fast. Errors meant for the operator are raised as
:class:`daemon.errors.OperatorError` or ConfigError (ConfigErrors for several files) and printed
one line per problem with exit status 2, never as a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
from collections.abc import Callable
from types import ModuleType

import daemon.commands
from daemon.config import ConfigError, ConfigErrors
from daemon.errors import OperatorError
from daemon.version import software_version


def _command_modules() -> list[ModuleType]:
    names = sorted(
        m.name for m in pkgutil.iter_modules(daemon.commands.__path__) if not m.name.startswith("_")
    )
    return [importlib.import_module(f"daemon.commands.{name}") for name in names]


def _subcommands(module: ModuleType) -> list[tuple[str, str, Callable, Callable]]:
    if hasattr(module, "COMMANDS"):
        return module.COMMANDS
    return [(module.NAME, module.HELP, module.add_arguments, module.run)]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="poise",
        description="Supervisor for motorised cart-and-pendulum rigs. "
        "A hardware e-stop that cuts motor power is mandatory; software stops are no substitute.",
    )
    parser.add_argument("--version", action="version", version=f"poise {software_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for module in _command_modules():
        for name, help_text, add_arguments, run in _subcommands(module):
            command = sub.add_parser(name, help=help_text, description=help_text)
            add_arguments(command)
            command.set_defaults(_run=run)
    return parser


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return args._run(args)
    except (ConfigError, ConfigErrors) as exc:
        for line in exc.lines():
            print(f"poise: {line}", file=sys.stderr)
        return 2
    except OperatorError as exc:
        print(f"poise: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    sys.exit(main())
