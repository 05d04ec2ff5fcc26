"""Per-sample cost of the portable firmware core (firmware/core) on this machine (figures only).

    .venv/bin/python bench/bench_firmware_core.py [--samples N] [--wall-samples M] [--repeats R]

Builds bench/firmware_core_driver.c with the core (gcc -O2, into a temporary folder): a fake
port drives a configured, armed device through samples in which one Drive frame answering the
newest Telemetry waits on the serial line, so each poise_device_step sends one Telemetry and
reads one Drive. Two figures:

  - instructions per sample: valgrind's callgrind counts the instructions inside
    poise_device_step (and what it calls, the fake port's trivial functions included) for N
    samples and for 0 samples; the difference over N leaves the set-up steps (Configure,
    ClearFaults, Arm) out. Repeatable whatever the machine's load; it depends on the compiler
    and the instruction set (x86-64 here), so on a microcontroller it is an order of
    magnitude, not a figure.
  - wall time per sample: the same loop run natively, M samples, median of R runs (a
    secondary figure: it wanders on a shared machine).

Every run checks that the device stayed armed with no fault, no late command and one whole
Telemetry per sample, and stops with a one-line error if not.
"""

from __future__ import annotations

import argparse
import math
import platform
import re
import shutil
import statistics
import subprocess
import tempfile
from pathlib import Path

from callgrind import function_instructions  # bench/callgrind.py

from protocol import Telemetry, encode

ROOT = Path(__file__).resolve().parents[1]
CORE = ROOT / "firmware" / "core"
DRIVER = Path(__file__).resolve().parent / "firmware_core_driver.c"
C_FLAGS = ("-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O2", "-g")
TELEMETRY_WIRE_BYTES = len(encode(Telemetry(1, 1_000_000, -1500, 2048, 0, 0, 3, 1.5, math.nan, math.nan, 0)))
RESULT = re.compile(
    r"samples (\d+) tx_bytes (\d+) late (\d+) faults (0x[0-9a-f]{4}) armed (\d) drive \S+ ns_per_sample (\S+)"
)


def _require(tool: str) -> str:
    path = shutil.which(tool)
    if path is None:
        raise SystemExit(f"bench_firmware_core: {tool} is not installed")
    return path


def build(folder: Path) -> Path:
    """Compile the driver with the core; a compile error stops the bench with gcc's output."""
    exe = folder / "firmware_core_driver"
    sources = sorted(str(p) for p in CORE.glob("*.c"))
    command = [_require("gcc"), *C_FLAGS, f"-I{CORE}", *sources, str(DRIVER), "-lm", "-o", str(exe)]
    result = subprocess.run(command, capture_output=True, text=True, check=False)
    if result.returncode != 0:
        raise SystemExit(f"bench_firmware_core: building {DRIVER.name} failed:\n{result.stderr}")
    return exe


def _checked(stdout: str, samples: int) -> float:
    """The driver's ns per sample, after checking the run did what the figures assume."""
    match = RESULT.search(stdout)
    if match is None:
        raise SystemExit(f"bench_firmware_core: unexpected driver output {stdout.strip()[:200]!r}")
    n, tx_bytes, late, faults, armed = (int(match.group(i), 0) for i in range(1, 6))
    if (n, tx_bytes, late, faults, armed) != (samples, samples * TELEMETRY_WIRE_BYTES, 0, 0, 1):
        raise SystemExit(f"bench_firmware_core: the device left the armed, fault-free state: {match.group(0)}")
    return float(match.group(6))


def instructions_per_sample(exe: Path, samples: int) -> float:
    """Callgrind count inside poise_device_step: (N samples - 0 samples) / N."""
    _require("valgrind")
    counts = []
    for n in (samples, 0):
        total, stdout = function_instructions([str(exe), str(n)], "poise_device_step")
        _checked(stdout, n)
        counts.append(total)
    return (counts[0] - counts[1]) / samples


def wall_ns_per_sample(exe: Path, samples: int, repeats: int) -> float:
    """Median over ``repeats`` native runs of the driver's own timing of its sample loop."""
    runs = []
    for _ in range(repeats):
        result = subprocess.run([str(exe), str(samples)], capture_output=True, text=True, check=False)
        if result.returncode != 0:
            raise SystemExit(f"bench_firmware_core: driver exited {result.returncode}: {result.stderr.strip()}")
        runs.append(_checked(result.stdout, samples))
    return statistics.median(runs)


def _machine() -> str:
    model = platform.processor() or platform.machine()
    cpuinfo = Path("/proc/cpuinfo")
    if cpuinfo.exists():
        found = re.search(r"^model name\s*:\s*(.+)$", cpuinfo.read_text(), re.MULTILINE)
        model = found.group(1).strip() if found else model
    gcc = subprocess.run([_require("gcc"), "-dumpfullversion"], capture_output=True, text=True, check=False).stdout.strip()
    valgrind = subprocess.run(["valgrind", "--version"], capture_output=True, text=True, check=False).stdout.strip()
    return f"{model} ({platform.machine()}), gcc {gcc}, {valgrind or 'no valgrind'}"


def _positive(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, not {value}")
    return value


def main() -> None:
    parser = argparse.ArgumentParser(description="Print the firmware core's cost per sample.")
    parser.add_argument("--samples", type=_positive, default=20_000, help="samples counted under callgrind")
    parser.add_argument("--wall-samples", type=_positive, default=1_000_000, help="samples per timed native run")
    parser.add_argument("--repeats", type=_positive, default=5, help="timed native runs (the median is shown)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="poise-bench-fw-") as folder:
        exe = build(Path(folder))
        instructions = instructions_per_sample(exe, args.samples)
        wall_ns = wall_ns_per_sample(exe, args.wall_samples, args.repeats)
    print("firmware core, one sample (Telemetry out, Drive in), armed at 1000 Hz, gcc -O2")
    print(f"  instructions per sample  {instructions:10.1f}     callgrind inside poise_device_step, "
          f"({args.samples} samples - 0-sample baseline) / {args.samples}")
    print(f"  wall time per sample     {wall_ns / 1000:10.3f} us  "
          f"median of {args.repeats} native runs of {args.wall_samples} samples")
    print(f"  machine: {_machine()}")


if __name__ == "__main__":
    main()
