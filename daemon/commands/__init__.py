"""Poise's sub-commands, one module each (found by :mod:`daemon.cli`), and the options they share."""

from __future__ import annotations

import argparse
from pathlib import Path


def add_config_argument(parser: argparse.ArgumentParser) -> None:
    """``--config FILE``, defaulting to the demo rig (resolve it with :func:`config_path`)."""
    parser.add_argument("--config", metavar="FILE", help="rig config TOML (default: the demo rig)")


def config_path(args: argparse.Namespace) -> Path:
    """The file ``--config`` names, or the demo rig's config."""
    from daemon.config import demo_config_path  # pydantic: only once a command runs

    return Path(args.config) if args.config else demo_config_path()
