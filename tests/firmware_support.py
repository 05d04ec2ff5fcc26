"""Build the C firmware's test programs with gcc for the tests that run them.

Each program is compiled once per test session into its own temporary directory (the build
takes a fraction of a second, but the codec and fuzz tests call it from many test cases).
Warnings are errors: the core must stay clean C99 under -Wall -Wextra.
"""

import functools
import shutil
import subprocess
import tempfile
from pathlib import Path

import pytest

FIRMWARE = Path(__file__).resolve().parent.parent / "firmware"
CORE = FIRMWARE / "core"
C_FLAGS = ("-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O1", "-g")
SANITIZE = ("-fsanitize=address,undefined", "-fno-sanitize-recover=all")


@functools.cache
def build(program: str, sanitize: bool = False, device: bool = False) -> Path:
    """Compile firmware/tests/<program>.c with the portable core and return the executable.

    The codec alone needs no hardware port; ``device`` adds the state machine (device.c),
    whose port functions the program must then define. Skips the test when gcc is not installed; a compile error fails it with gcc's output.
    """
    sources = [p for p in CORE.glob("*.c") if device or p.name != "device.c"]
    return _compile(program, [*sources, FIRMWARE / "tests" / f"{program}.c"], sanitize)


@functools.cache
def build_host_port() -> Path:
    """The Linux host port (firmware/host): the whole core as a device on a pty, with its C model."""
    return _compile("poise-fw-host", [*CORE.glob("*.c"), *(FIRMWARE / "host").glob("*.c")], False)


def _compile(name: str, sources: list[Path], sanitize: bool) -> Path:
    gcc = shutil.which("gcc")
    if gcc is None:
        pytest.skip("gcc is not installed")
    out_dir = Path(tempfile.mkdtemp(prefix=f"poise-fw-{name}-"))
    exe = out_dir / name
    command = [
        gcc, *C_FLAGS, *(SANITIZE if sanitize else ()), f"-I{CORE}",
        *sorted(str(p) for p in sources), "-lm", "-o", str(exe),
    ]
    result = subprocess.run(command, capture_output=True, text=True, check=False)
    if result.returncode != 0:
        pytest.fail(f"building {name} failed:\n{result.stderr}")
    return exe


def run(exe: Path, stdin: str = "", args: tuple[str, ...] = (), timeout: float = 120) -> str:
    """Run a built program, fail the test with its stderr when it exits non-zero."""
    result = subprocess.run(
        [str(exe), *args], input=stdin, capture_output=True, text=True, timeout=timeout,
        check=False,
    )
    if result.returncode != 0:
        pytest.fail(f"{exe.name} exited {result.returncode}:\n{result.stderr}{result.stdout[-2000:]}")
    return result.stdout
