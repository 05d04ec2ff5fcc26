"""`poise check-config`: validate rig configs and report every problem in every file at once.

Beyond the fields themselves, it checks on the plant model that the drive can brake as hard as
the category 1 stop counts on (:mod:`daemon.control.stop_capability`), and lists the values the
file left out and had derived from the rig, with what each came from. A bad file does not stop
the check: each file given is checked, and all their problems are printed, one line each.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from daemon.config import ConfigError, ConfigErrors, PoiseConfig, demo_config_path, load_config

NAME = "check-config"
HELP = "validate rig config files (one line per problem in every file, exit status 2 if any)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("configs", nargs="*", metavar="FILE", help="rig config TOML (default: the demo rig)")


def _checked(path: str | Path) -> PoiseConfig:
    """The config in ``path``, or a ConfigError with its problems."""
    from daemon.config.plant import plant_params  # the plant model: numpy, only when checking
    from daemon.control.stop_capability import stop_decel_problem

    config = load_config(path)
    problem = stop_decel_problem(config, plant_params(config))
    if problem is not None:
        raise ConfigError(str(path), [problem])
    return config


def run(args: argparse.Namespace) -> int:
    failed = []
    for path in args.configs or [demo_config_path()]:
        try:
            config = _checked(path)
        except ConfigError as exc:
            failed.append(exc)
            continue
        print(f"{path}: ok (rig {config.rig.id}, {config.sampling.rate_hz} Hz, {config.drive.kind} drive)")
        for value in config.derived:
            print(f"  {value.describe()}")
    if failed:
        raise ConfigErrors(failed)
    return 0
