"""`poise bench`: run the benchmark scripts in bench/ one after another and show what they print.

The scripts print figures; nothing here judges them. They run one at a time
because the machines Poise is developed on have two shared cores, and figures
from overlapping runs would be meaningless. Compare ratios within one run.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

from daemon.errors import OperatorError

NAME = "bench"
HELP = "run the benchmarks in bench/ and print their figures"

BENCH_DIR = Path(__file__).resolve().parents[2] / "bench"


def _available() -> dict[str, Path]:
    return {path.stem.removeprefix("bench_"): path for path in sorted(BENCH_DIR.glob("bench_*.py"))}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("names", nargs="*", metavar="NAME", help="benchmarks to run (default: all)")
    parser.add_argument("--list", action="store_true", help="list the benchmarks and exit")


def run(args: argparse.Namespace) -> int:
    available = _available()
    if not available:
        raise OperatorError(f"bench: no benchmark scripts found in {BENCH_DIR} (run from a source checkout)")
    if args.list:
        for name in available:
            print(name)
        return 0
    unknown = [name for name in args.names if name not in available]
    if unknown:
        raise OperatorError(f"bench: unknown benchmark {unknown[0]!r}; choose from {', '.join(available)}")
    status = 0
    for name in args.names or list(available):
        print(f"== {name} ==", flush=True)
        status |= subprocess.run([sys.executable, str(available[name])], check=False).returncode
    return status
