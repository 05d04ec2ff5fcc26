"""A daemon killed during balance and restarted never moves the rig before a deliberate reset.

Real processes on the real serial path: `poise sim --pty` in one process,
`poise run --port` on its pty in another, killed with SIGKILL during balance
and started again, many times in a row, on the real SQLite store. The rig cuts
its motor when commands stop and latches F_WATCHDOG (PROTOCOL.md section 9.1);
each restarted daemon must come up in FAULT showing that latch (the first, on
the freshly powered-up rig, showing F_RESET) and refuse every motion command
until an operator reset (ISO 13850:2015, 5.5: resetting is a deliberate act
and does not by itself start motion); after the reset motion is accepted. Each
killed run must read ``aborted`` in `poise runs`, ending at its last stored
sample. Lockstep keeps each restart cheap (about 80 s of rig time at many
times real time): CI runs 5; the same test runs in real time, marked
``realtime``, once in CI (on a rig without limit switches, so a life is a
swing-up, not a homing run). Both take ``--restarts 20`` for the full trial. The reference firmware's core (its
host port, firmware/host, in lockstep) is killed under in the same way, three
lives in CI: its watchdog's reaction is read from its own log, on its own
clock, and must fall within watchdog_ms of the last command (plus the 0.1 ms
its loop takes to check).
"""

from __future__ import annotations

import asyncio
import json
import math
import re
import signal
import sqlite3
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import pytest
from rig_processes import (
    POISE,
    START_LIMIT_S,
    RigProcess,
    firmware_command,
    rig_process,
    simulator_command,
)
from test_daemon_support import KESTREL, write_rig_config

from daemon.api.client import ApiClient, wait_for_daemon
from daemon.config import load_config
from daemon.control.encoders import wrap_angle
from daemon.errors import CommandRefused
from daemon.supervisor.prechecks import MOTION_COMMANDS, PrecheckLimits

# Each lockstep life is about 80 s of rig time (settle, home, settle again, swing up), 9 s of wall
# time: CI runs 5 to keep the suite inside its time; `--restarts 20` is the full trial.
LOCKSTEP_RESTARTS = 5
FIRMWARE_RESTARTS = 3  # the firmware's lives, in lockstep (the Python simulator's cover the daemon's side)
# Each real-time life settles, homes and swings up on the wall clock (tens of seconds), so CI runs
# one; `pytest -m realtime tests/test_daemon_restart.py --restarts 20` is the full trial.
REAL_TIME_RESTARTS = 1
BALANCE_S = 0.5  # rig time balanced before each kill
STEP_LIMIT_S = 120.0  # wall time for one step (homing, swing-up) in real time
MOTION_ARGS = {"excite": {"kind": "chirp", "duration_s": 1.0}}
# After each kill the pendulum falls and spins for minutes (Kestrel-1's pivot friction is tiny),
# and homing under a spinning pendulum runs the cart onto an end stop. This test rig's pivot has
# more friction, so the pendulum settles within a few tens of seconds of rig time, and each life
# homes only once it hangs still (an invented value of our own scenario).
SETTLING_PIVOT = {"pivot_viscous_nms_per_rad": "0.003"}
# With that pivot the swing-up's cart runs up to about 1.5 m/s, Kestrel-1's overspeed limit:
# this rig's limit is 1.7 m/s (the most the watchdog travel bound allows on this track), so the
# test is about restarts, not about the swing-up's speed (a choice of this scenario's).
FASTER_CART = "[interlocks]\nmax_cart_speed_mps = 1.7\n"


async def start_daemon(config: Path, rig: RigProcess, log: Path) -> asyncio.subprocess.Process:
    with log.open("ab") as out:
        return await asyncio.create_subprocess_exec(
            *POISE, "run", "--port", rig.pty_path, "--config", str(config),
            stdin=asyncio.subprocess.DEVNULL, stdout=out, stderr=out,
        )


async def connect(daemon: asyncio.subprocess.Process, socket_path: Path, log: Path) -> ApiClient:
    async with asyncio.timeout(START_LIMIT_S):
        waiting = asyncio.ensure_future(wait_for_daemon(socket_path, retry_s=0.05))
        exited = asyncio.ensure_future(daemon.wait())
        await asyncio.wait({waiting, exited}, return_when=asyncio.FIRST_COMPLETED)
    if not waiting.done():
        waiting.cancel()
        pytest.fail(f"the daemon exited ({daemon.returncode}): {log.read_text()[-2000:]}")
    exited.cancel()
    return waiting.result()


async def first_status(
    client: ApiClient, wanted: Callable[[dict], bool], what: str, faults_allowed: bool = False
) -> dict:
    """The first status line for which ``wanted`` holds; a latched fault on the way fails."""
    async with asyncio.timeout(STEP_LIMIT_S):
        async for status in client.subscribe(20.0):
            if wanted(status):
                return status
            assert faults_allowed or status["state"] not in ("FAULT", "ESTOP"), (what, status["faults"])
    pytest.fail(f"the daemon closed the connection waiting for {what}")


def hanging_still(config: Path) -> Callable[[dict], bool]:
    """Whether a status shows the pendulum hanging still enough to home under (the pre-arm limits)."""
    limits = PrecheckLimits.from_config(load_config(config))

    def still(status: dict) -> bool:
        off_rad = abs(wrap_angle(status["theta_rad"] - math.pi))
        return off_rad < limits.hanging_tolerance_rad and abs(status["omega_radps"]) < limits.still_rate_radps

    return still


def fault_names(status: dict) -> list[str]:
    return [fault["name"] for fault in status["faults"]]


async def refuses_motion_until_reset(client: ApiClient, held: list[str]) -> None:
    """Up in FAULT with the rig's latches shown and every motion command refused; a reset, then
    motion is accepted (homing starts)."""
    status = await client.request("status")
    assert status["state"] == "FAULT"
    # Each latch the rig holds, shown with its reason and hint, and nothing else (the old
    # stream's telemetry, read before this link's Configure, is ignored).
    shown = {fault["name"]: fault for fault in status["faults"]}
    assert sorted(shown) == sorted(held), shown
    for name in held:
        assert shown[name]["reason"].startswith(f"{name}: held latched by the rig"), shown
        assert shown[name]["hint"]
    for command in sorted(command.value for command in MOTION_COMMANDS):
        with pytest.raises(CommandRefused, match=r"not allowed in FAULT: fault latched \(reset first\)"):
            await client.request(command, MOTION_ARGS.get(command, {}))
    status = await client.request("status")
    assert (status["state"], status["drive"]) == ("FAULT", 0.0)
    assert (await client.request("reset"))["state"] == "IDLE"
    assert (await client.request("home"))["state"] == "HOMING"


async def to_balance(client: ApiClient) -> None:
    """From homing to balance, held ``BALANCE_S`` of rig time."""
    await first_status(client, lambda s: s["state"] == "IDLE" and s["homed"], "homing")
    await client.request("arm")
    while True:
        try:
            await client.request("swing_up")
            break
        except CommandRefused as refused:
            if "pendulum.hanging_still" not in refused.reason:
                raise
        await first_status(client, lambda s: True, "the next status line")  # still swinging
    balanced = await first_status(client, lambda s: s["state"] == "BALANCE", "the catch")
    t_balance = balanced["t_s"]
    held = await first_status(client, lambda s: s["t_s"] >= t_balance + BALANCE_S, "balance")
    # A kill loses the writer's transaction in flight, which in lockstep can hold more than the
    # whole balance: the kill waits until the store has committed the samples up to the catch
    # (the run opened before the first sample, so the cycle's count numbers the run's samples).
    caught = balanced["cycle"]["samples"]
    await first_status(client, lambda s: s["recording"]["samples"] > caught, "balance stored")
    assert held["state"] == "BALANCE"


def stored_span(db_path: Path, run_id: int) -> tuple[int, int, int, int]:
    """First and last device time, last host time and the last sample's mode, from the samples."""
    conn = sqlite3.connect(db_path)
    try:
        first_us, last_us, last_host_ns = conn.execute(
            "SELECT min(t_device_us), max(t_device_us), max(t_host_ns) FROM samples WHERE run_id = ?",
            (run_id,),
        ).fetchone()
        (mode,) = conn.execute(
            "SELECT mode FROM samples WHERE run_id = ? ORDER BY sample_id DESC LIMIT 1", (run_id,)
        ).fetchone()
    finally:
        conn.close()
    return first_us, last_us, last_host_ns, mode


async def poise_runs(config: Path) -> list[dict]:
    runs = await asyncio.create_subprocess_exec(
        *POISE, "runs", "--config", str(config), "--json", stdout=asyncio.subprocess.PIPE
    )
    out, _ = await runs.communicate()
    assert runs.returncode == 0
    return json.loads(out)


@dataclass(frozen=True)
class Rig:
    """How to start one kind of rig, and how its log states the watchdog's reaction."""

    command: Callable[[Path], list[str]]
    reaction_ms: Callable[[str], float]  # from its "latched F_WATCHDOG" line: ms since the last feed
    resolution_ms: float  # how often it checks its watchdog
    edits: dict[str, str] = field(default_factory=dict)  # to the test's rig config


def simulator_reaction_ms(line: str) -> float:
    return float(re.search(r"\(detail ([0-9.]+)\)", line).group(1))


def firmware_reaction_ms(line: str) -> float:
    """From firmware/host/main.c's log, on the firmware's own clock; the drive must read 0."""
    found = re.search(r"at t_us (\d+) \(host last fed the watchdog at t_us (\d+); drive now (\S+)\)", line)
    assert float(found.group(3)) == 0.0, line
    return (int(found.group(1)) - int(found.group(2))) * 1e-3


SIMULATOR_LOCKSTEP = Rig(lambda config: simulator_command(config, "--lockstep"), simulator_reaction_ms, 2.0)
# In real time this rig has no limit switches, so homing takes the present position as the centre
# and each life is a swing-up, not a half-minute homing run (the real-time sessions home in full).
SIMULATOR_REAL_TIME = Rig(simulator_command, simulator_reaction_ms, 2.0, {"has_limit_switches": "false"})
# The host port checks its watchdog every 100 us step of its model (TICK_NS in firmware/host/main.c).
FIRMWARE_LOCKSTEP = Rig(lambda config: firmware_command(config, lockstep=True), firmware_reaction_ms, 0.1)


async def kill_during_balance_and_restart(tmp_path: Path, restarts: int, rig_kind: Rig) -> None:
    config = write_rig_config(tmp_path, KESTREL, extra=FASTER_CART, edits=SETTLING_PIVOT | rig_kind.edits)
    watchdog_ms = load_config(config).sampling.device_watchdog_ms
    still = hanging_still(config)
    socket_path, db_path, log = tmp_path / "poise.sock", tmp_path / "runs.db", tmp_path / "daemon.log"
    async with rig_process(rig_kind.command(config)) as rig:
        held = ["device.reset"]  # the freshly powered-up rig's F_RESET
        for _ in range(restarts):
            daemon = await start_daemon(config, rig, log)
            try:
                async with await connect(daemon, socket_path, log) as client:
                    await first_status(client, still, "the pendulum to settle", faults_allowed=True)
                    await refuses_motion_until_reset(client, held)
                    await to_balance(client)
            finally:
                daemon.kill()
                await daemon.wait()
            # The rig cut its motor, on its own clock, within its watchdog time of the last command.
            reaction_ms = rig_kind.reaction_ms(await rig.said("latched F_WATCHDOG"))
            assert watchdog_ms < reaction_ms <= watchdog_ms + rig_kind.resolution_ms + 1e-6, reaction_ms
            held = ["device.watchdog"]
        daemon = await start_daemon(config, rig, log)
        try:
            async with await connect(daemon, socket_path, log) as client:
                await refuses_motion_until_reset(client, held)
        finally:
            daemon.send_signal(signal.SIGTERM)
            await daemon.wait()
        assert daemon.returncode == 0, log.read_text()[-2000:]

    runs = await poise_runs(config)
    assert [run["outcome"] for run in runs] == ["aborted"] * restarts + ["completed"]
    for run in runs[:restarts]:
        first_us, last_us, last_host_ns, mode = stored_span(db_path, run["run_id"])
        assert (run["mode_reached"], run["last_mode"]) == ("BALANCE", "BALANCE")
        # The run ends at the last sample stored before the kill, in BALANCE. (A kill loses the
        # writer's transaction in flight: up to two 50 ms flush intervals, many samples in lockstep.)
        assert mode == 5
        assert run["duration_s"] == pytest.approx((last_us - first_us) * 1e-6, abs=1e-9)
        conn = sqlite3.connect(db_path)
        try:
            (started_host_ns,) = conn.execute(
                "SELECT started_host_ns FROM runs WHERE run_id = ?", (run["run_id"],)
            ).fetchone()
        finally:
            conn.close()
        assert run["ended_unix_ns"] == run["started_unix_ns"] + last_host_ns - started_host_ns


async def test_a_daemon_killed_during_balance_and_restarted_comes_up_faulted_until_reset_lockstep(
    tmp_path, request
):
    restarts = request.config.getoption("--restarts") or LOCKSTEP_RESTARTS
    await kill_during_balance_and_restart(tmp_path, restarts, SIMULATOR_LOCKSTEP)


@pytest.mark.realtime
async def test_a_daemon_killed_during_balance_and_restarted_comes_up_faulted_until_reset_real_time(
    tmp_path, request
):
    restarts = request.config.getoption("--restarts") or REAL_TIME_RESTARTS
    await kill_during_balance_and_restart(tmp_path, restarts, SIMULATOR_REAL_TIME)


async def test_the_reference_firmware_cuts_the_drive_within_its_watchdog_when_the_daemon_is_killed(
    tmp_path, request
):
    """The same kills against the reference firmware's core (its host port, in lockstep): its
    watchdog zeroes the drive and latches F_WATCHDOG within watchdog_ms on its own clock, and
    each restarted daemon must clear the latch deliberately."""
    restarts = request.config.getoption("--restarts") or FIRMWARE_RESTARTS
    await kill_during_balance_and_restart(tmp_path, restarts, FIRMWARE_LOCKSTEP)
