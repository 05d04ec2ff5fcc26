"""The real-time tests of the main job, repeated with a CPU hog on the other core: how often they pass.

Runs tests/test_realtime.py (a real-time session against `poise sim` in its
own process, and the README's `poise demo` driven in tmux) RUNS times while a
process spinning at 100 % is pinned to the last CPU, and prints each run's
outcome and the loop-lag and read-gap figures the tests print. Goal (the
README's first command on an ordinary machine): every run passes.

Run: ``python bench/bench_realtime.py [--runs N] [--no-hog]``. About 100 s a run.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
HOG = "while True: pass"


def start_hog() -> subprocess.Popen | None:
    cpus = sorted(os.sched_getaffinity(0))
    if len(cpus) < 2:
        print("one CPU only: no hog (it would starve the rig itself)")
        return None
    hog = subprocess.Popen([sys.executable, "-c", HOG])
    os.sched_setaffinity(hog.pid, {cpus[-1]})
    print(f"CPU hog pid {hog.pid} pinned to CPU {cpus[-1]}")
    return hog


def one_run(index: int) -> tuple[bool, list[str]]:
    result = subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-s", "-p", "no:cacheprovider", "-p",
         "no:rerunfailures", "tests/test_realtime.py"],
        cwd=REPO, capture_output=True, text=True, check=False,
    )
    figures = [line.strip() for line in result.stdout.splitlines() if line.startswith("real-time")]
    passed = result.returncode == 0
    summary = result.stdout.strip().splitlines()[-1] if result.stdout.strip() else result.stderr[-200:]
    print(f"run {index}: {'pass' if passed else 'FAIL'} ({summary})")
    for line in figures:
        print(f"    {line}")
    for line in result.stdout.splitlines():
        if line.startswith(("FAILED", "E   ")):
            print(f"    {line[:200]}")
    return passed, figures


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5)
    parser.add_argument("--no-hog", action="store_true", help="run without the CPU hog")
    args = parser.parse_args()
    hog = None if args.no_hog else start_hog()
    try:
        passes = sum(one_run(i + 1)[0] for i in range(args.runs))
    finally:
        if hog is not None:
            hog.kill()
            hog.wait()
    print(f"{passes} of {args.runs} runs passed{'' if hog is None else ' with the CPU hog'}")


if __name__ == "__main__":
    main()
