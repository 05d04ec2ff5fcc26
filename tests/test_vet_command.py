"""`poise vet` against conforming devices (the Python simulator, the C host-port firmware) and
against simulated devices each broken in one clause (tests/vet_support.py).

The reference is protocol/PROTOCOL.md revision 1.1 (its section numbers are in the clause
lines); every device runs on a real pty opened through the daemon's own port code. Broken
devices run in lockstep with a short grace period, so a whole check takes about a second.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest
from rig_processes import firmware_command
from vet_support import broken_clauses, demo_rig

from daemon.cli import main
from daemon.config import demo_config_path
from daemon.link import open_port
from daemon.vet import CLAUSES, VetOptions, vet

ROOT = Path(__file__).resolve().parent.parent
LINE = re.compile(r"^(PASS|FAIL|SKIP) §([0-9.]+) (.+?): (.+)$")
READY = re.compile(r"connect to (\S+)")
# Clauses that see the same fault from another side (the rest must not fail):
KNOCK_ON = {
    "disarmed_zero": {"disarm", "stop", "watchdog"},  # all read drive_applied while disarmed
    "watchdog": {"fault_latch"},  # no F_WATCHDOG to see latched
    "fault_latch": {"arm_faulted"},  # the fault it forgot no longer refuses Arm
    "heartbeat": {"arm"},  # the watchdog it let trip is latched again when arming
}
REAL_TIME_ONLY = {"device_clock"}  # a lockstep device has no wall-clock rate to get wrong


async def check(rig, options: VetOptions | None = None):
    rig.start()
    try:
        return await vet(open_port(rig.where), options or VetOptions())
    finally:
        rig.close()


def verdicts(report) -> dict[str, str]:
    return {outcome.key: outcome.verdict for outcome in report.outcomes()}


async def test_lockstep_simulator_passes_every_clause():
    report = await check(demo_rig())
    lines = [outcome.line for outcome in report.outcomes()]
    assert [key for key, _s, _n in CLAUSES] == list(verdicts(report))
    assert all(LINE.match(line) for line in lines), lines
    assert {v for k, v in verdicts(report).items() if k != "device_clock"} == {"PASS"}, "\n".join(lines)
    assert verdicts(report)["device_clock"] == "SKIP"  # lockstep: t_us is simulated time
    assert report.passed()


@pytest.mark.parametrize("clause", [c for c in broken_clauses() if c not in REAL_TIME_ONLY])
async def test_a_broken_device_fails_its_clause(clause):
    report = await check(demo_rig(clause))
    outcomes = verdicts(report)
    lines = "\n".join(outcome.line for outcome in report.outcomes())
    assert outcomes[clause] == "FAIL", lines
    knock_on = {key for key, verdict in outcomes.items() if verdict == "FAIL"} - {clause}
    assert knock_on <= KNOCK_ON.get(clause, set()), lines
    assert list(outcomes) == [key for key, _s, _n in CLAUSES]  # the others still report
    assert not report.passed()


def test_every_clause_has_a_broken_device():
    assert broken_clauses() == [key for key, _s, _n in CLAUSES]
    # the real-time-only one is checked by test_a_device_clock_running_slow_fails_on_the_wall_clock


@pytest.mark.parametrize("argv, says", [
    (["vet", "--port", "/dev/no-such-rig"], "cannot open rig port /dev/no-such-rig"),
    (["vet", "--port", "/dev/null", "--rate", "fast"], "--rate: 'fast' is not a whole number"),
    (["vet", "--port", "/dev/null", "--watchdog-ms", "0"], "--watchdog-ms: 0 is not in 1..65535"),
    (["vet", "--port", "tcp://localhost"], "--port: 'tcp://localhost' is not tcp://HOST:PORT"),
])
def test_bad_input_is_one_line_and_exit_2(argv, says, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and says in err, err


def test_missing_port_is_a_usage_error(capsys):
    with pytest.raises(SystemExit) as exit_:
        main(["vet"])
    assert exit_.value.code == 2
    assert "--port" in capsys.readouterr().err


def _serve(command: list[str]) -> tuple[subprocess.Popen, str]:
    """Start a device process and return it with the pty path it prints."""
    process = subprocess.Popen(command, stdout=subprocess.PIPE, text=True, cwd=ROOT)
    line = process.stdout.readline()
    found = READY.search(line)
    if found is None:
        process.kill()
        pytest.fail(f"device did not say where to connect: {line!r}")
    return process, found.group(1)


def _vet_cli(path: str, capsys, *extra: str) -> list[str]:
    code = main(["vet", "--port", path, *extra])
    lines = capsys.readouterr().out.splitlines()
    assert code == 0, "\n".join(lines)
    assert len(lines) == len(CLAUSES) and all(LINE.match(line) for line in lines)
    return lines


@pytest.mark.realtime
def test_cli_passes_against_the_real_time_simulator(capsys):
    process, path = _serve([sys.executable, "-m", "daemon.cli", "sim", "--pty"])
    try:
        lines = _vet_cli(path, capsys)
    finally:
        process.terminate()
        process.wait(timeout=10)
    assert all(line.startswith("PASS") for line in lines), "\n".join(lines)


def test_cli_passes_against_the_c_firmware_in_lockstep(capsys):
    """The reference firmware's core in its host port (built with gcc), in lockstep: every clause
    passes but the wall-clock one, which a lockstep device cannot be held to."""
    process, path = _serve(firmware_command(demo_config_path(), lockstep=True))
    try:
        lines = _vet_cli(path, capsys)
    finally:
        process.terminate()
        process.wait(timeout=10)
    failed = [line for line in lines if not line.startswith("PASS")]
    assert len(failed) == 1 and failed[0].startswith("SKIP") and "device clock" in failed[0], "\n".join(lines)


@pytest.mark.realtime
async def test_a_device_clock_running_slow_fails_on_the_wall_clock():
    report = await check(demo_rig("device_clock", lockstep=False))
    assert verdicts(report)["device_clock"] == "FAIL"
    assert verdicts(report)["rate"] == "PASS"  # its t_us agrees with itself
