"""`poise bench` finds every script in bench/ and refuses unknown names in one line."""

import subprocess
import sys
from pathlib import Path

BENCH = Path(__file__).resolve().parents[1] / "bench"


def _poise(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "daemon.cli", "bench", *args], capture_output=True, text=True, check=False)


def test_list_names_every_bench_script():
    listed = _poise("--list").stdout.split()
    assert listed == sorted(p.stem.removeprefix("bench_") for p in BENCH.glob("bench_*.py"))
    assert "protocol" in listed


def test_unknown_benchmark_is_one_line_exit_2():
    result = _poise("warp-drive")
    assert result.returncode == 2
    assert result.stderr.strip().splitlines() == [
        f"poise: bench: unknown benchmark 'warp-drive'; choose from {', '.join(_poise('--list').stdout.split())}"
    ]
