"""`poise check-config`: validate rig configs and report every problem at once."""

from __future__ import annotations

import argparse

from daemon.config import demo_config_path, load_config

NAME = "check-config"
HELP = "validate rig config files (one line per problem, exit status 2 if any)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("configs", nargs="*", metavar="FILE", help="rig config TOML (default: the demo rig)")


def run(args: argparse.Namespace) -> int:
    paths = args.configs or [demo_config_path()]
    for path in paths:
        config = load_config(path)
        print(f"{path}: ok (rig {config.rig.id}, {config.sampling.rate_hz} Hz, {config.drive.kind} drive)")
    return 0
