"""bench/bench_firmware_core.py builds the firmware core, counts it under callgrind and prints a
positive instruction count per sample (common practice, no source: a smoke test of the bench).
The driver's own checks (armed, no fault, one Telemetry per sample) make the bench exit non-zero
when the device did not run the samples it counts."""

import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[1] / "bench" / "bench_firmware_core.py"


@pytest.mark.skipif(shutil.which("gcc") is None or shutil.which("valgrind") is None, reason="needs gcc and valgrind")
def test_bench_prints_a_positive_instruction_count_per_sample():
    result = subprocess.run(
        [sys.executable, str(BENCH), "--samples", "20", "--wall-samples", "1000", "--repeats", "1"],
        capture_output=True, text=True, timeout=300, check=False,
    )
    assert result.returncode == 0, result.stderr
    match = re.search(r"instructions per sample\s+([0-9.]+)", result.stdout)
    assert match is not None, result.stdout
    assert float(match.group(1)) > 0
