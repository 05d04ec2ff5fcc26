"""Count the machine instructions of marked regions of a Python run, with valgrind's callgrind.

Instruction counts repeat whatever else the machine is doing, so two versions of a hot path
can be compared by ratio on a shared machine where wall-clock figures wander.

A bench script marks the boundaries between its regions by calling :func:`mark` (which
calls ``os.getppid``, something the code under test never calls); callgrind runs with
``--dump-before=os_getppid`` and writes the counts gathered so far into a new dump file on
each mark. The main thread's dumps are, in order: start-up (everything before the first
mark), one per region, and the rest of the run. Counts are of user space only (valgrind
does not see the kernel's side of a system call).

    from callgrind import mark, region_instructions

    # in the child (run under callgrind): mark(); region 1; mark(); region 2; mark()
    # in the parent:
    totals, stdout = region_instructions([__file__, "--child", "1000"], regions=2)

A native program (the firmware core's bench driver) is counted instead with
:func:`function_instructions`, which switches counting on only inside one C function.
"""

from __future__ import annotations

import glob
import os
import re
import subprocess
import sys
import tempfile
from pathlib import Path

__all__ = ["function_instructions", "mark", "region_instructions"]

mark = os.getppid  # callgrind dumps its counts on entering this (see the module docstring)


def region_instructions(child_args: list[str], regions: int) -> tuple[list[int], str]:
    """Run ``python *child_args`` under callgrind: instructions of its first ``regions`` regions, and its stdout.

    The child runs with a fixed hash seed and one BLAS thread (idle OpenBLAS workers spin,
    which is slow under valgrind). A failed run raises SystemExit with the end of its stderr.
    """
    with tempfile.TemporaryDirectory() as folder:
        out = Path(folder) / "callgrind.out"
        command = [
            "valgrind", "--tool=callgrind", "--dump-before=os_getppid", "--separate-threads=yes",
            f"--callgrind-out-file={out}", sys.executable, *child_args,
        ]
        env = dict(os.environ, PYTHONHASHSEED="0", OPENBLAS_NUM_THREADS="1")
        child = subprocess.run(command, capture_output=True, text=True, env=env, check=False)
        if child.returncode != 0:
            raise SystemExit(f"callgrind run failed:\n{child.stderr[-2000:]}")
        # the main thread's dumps in order: start-up, then one per region, then the rest
        dumps = sorted(glob.glob(f"{out}.*-01"), key=lambda p: int(p.rsplit(".", 1)[1].split("-")[0]))
        totals = [_total(Path(path)) for path in dumps[1:regions + 1]]
    if len(totals) != regions:
        raise SystemExit(f"callgrind run gave {len(totals)} region dumps, expected {regions}")
    return totals, child.stdout


def function_instructions(command: list[str], function: str) -> tuple[int, str]:
    """Run a native program under callgrind: instructions inside ``function`` (and what it calls), and its stdout.

    Counting is switched on only while ``function`` runs (``--toggle-collect``), so what the
    program does around it is left out. A failed run raises SystemExit with the end of its stderr.
    """
    with tempfile.TemporaryDirectory() as folder:
        out = Path(folder) / "callgrind.out"
        child = subprocess.run(
            ["valgrind", "--tool=callgrind", f"--toggle-collect={function}", f"--callgrind-out-file={out}", *command],
            capture_output=True, text=True, check=False,
        )
        if child.returncode != 0:
            raise SystemExit(f"callgrind run of {command[0]} failed:\n{child.stderr[-2000:]}")
        return _total(out), child.stdout


def _total(dump: Path) -> int:
    """The instruction total of one callgrind dump file (what callgrind_annotate shows as PROGRAM TOTALS)."""
    match = re.search(r"^(?:summary|totals): (\d+)", dump.read_text(), re.MULTILINE)
    if match is None:
        raise SystemExit(f"callgrind dump {dump} has no instruction total")
    return int(match.group(1))
