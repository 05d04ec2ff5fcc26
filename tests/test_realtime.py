"""The main job in real time, as a user runs it: no lockstep, default timeouts, the shared machine's own load.

- `poise session --port` against `poise sim --pty` in another process: home,
  swing up, catch and balance for 20 s, stop, with every trip counted (none
  allowed); the disturbance asked of the operator is recorded at its time.
- `poise demo` in a real terminal (tmux): the operator's keys reset the rig's
  power-up flag, home, arm and swing up; the pendulum balances for 10 s with the dashboard attached.

Each prints the daemon's loop lag (p99, max) and the longest wait between two
telemetry reads, the figures that say how close the machine came to the
timeouts (interlocks.loop_stall_ms, link_timeout_ms: 30 ms). These runs take
about 40 s each of wall time; bench/bench_realtime.py repeats them with a CPU
hog on the other core.
"""

from __future__ import annotations

import asyncio
import json
import sys
import time

import pytest
from session_checks import assert_balanced_with_every_sample_recorded
from test_daemon_support import KESTREL, write_rig_config
from test_demo_terminal import POLL_S, Terminal, demo_command, wait_for_file

from daemon.api.client import ApiClient
from daemon.recording.store import open_for_reading, run_events

POISE = [sys.executable, "-m", "daemon.cli"]
BALANCE_S = 20.0
DEMO_BALANCE_S = 10.0  # the session above holds 20 s; the demo adds the dashboard's load
pytestmark = pytest.mark.realtime


async def test_a_real_time_session_against_the_simulator_in_its_own_process_balances(
    tmp_path, capsys
):
    config = write_rig_config(tmp_path, KESTREL)
    sim = await asyncio.create_subprocess_exec(
        *POISE, "sim", "--pty", "--config", str(config), stdout=asyncio.subprocess.PIPE
    )
    try:
        async with asyncio.timeout(30.0):
            pty_path = (await sim.stdout.readline()).decode().rsplit("connect to ", 1)[1].strip()
        session = await asyncio.create_subprocess_exec(
            *POISE, "session", "--port", pty_path, "--config", str(config),
            "--duration", str(BALANCE_S), "--disturb", "10:0.02", "--json",
            stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE,
        )
        async with asyncio.timeout(180.0):  # a hang guard: the session takes about 40 s
            out, err = await session.communicate()
    finally:
        sim.terminate()
        await sim.wait()
    summary = json.loads(out)
    loop = summary["loop"]
    with capsys.disabled():
        print(
            f"\nreal-time session: loop lag p99 {loop['lag_ms_p99']:.2f} ms, max "
            f"{loop['lag_ms_max']:.2f} ms; longest wait between reads "
            f"{loop['read_gap_ms_worst']:.2f} ms; latency p99 {summary['latency_us']['p99']:.0f} us"
        )
    assert session.returncode == 0, (summary["outcome"], summary["detail"], summary["trips"])
    assert_balanced_with_every_sample_recorded(summary, BALANCE_S)
    assert "disturb now" in err.decode()
    conn = open_for_reading(summary["recording"])
    try:
        events = run_events(conn, summary["run_id"])
    finally:
        conn.close()
    [asked] = [json.loads(data) for _, kind, _, data in events if kind == "disturbance.requested"]
    assert asked["after_balance_s"] == 10.0


def test_the_readme_demo_homes_swings_up_and_balances_with_the_dashboard_attached(tmp_path, capsys):
    terminal = Terminal(tmp_path)
    exit_file = tmp_path / "exit-status"
    terminal.start(f"{demo_command(tmp_path)}; echo $? > {exit_file}; sleep 600")
    try:
        terminal.wait_for("rig link   up")
        socket_path = terminal.demo_socket()

        def status() -> dict:
            return asyncio.run(_status(socket_path))

        def wait_state(*states: str, limit_s: float = 60.0, leaving: str = "") -> dict:
            deadline = time.monotonic() + limit_s
            while time.monotonic() < deadline:
                now = status()
                if now["state"] in states:
                    return now
                if now["state"] != leaving:  # the state a key just pressed is taking it out of
                    assert now["state"] not in ("FAULT", "ESTOP"), now["faults"]
                time.sleep(POLL_S)  # a terminal and a remote daemon offer nothing to await
            pytest.fail(f"never reached {states}; last {now['state']}")

        def confirm(key: str) -> None:
            terminal.keys(key)
            terminal.wait_for("go ahead")
            terminal.keys("y")

        powered_up = status()
        assert (powered_up["state"], [f["name"] for f in powered_up["faults"]]) == (
            "FAULT", ["device.reset"]
        )
        terminal.keys("c")  # the operator's reset takes the just powered-up rig into use
        wait_state("IDLE", limit_s=10.0, leaving="FAULT")
        terminal.wait_for("next    h  home")  # the dashboard refuses keys its own view does not allow yet
        terminal.keys("h")
        terminal.wait_for("I understand")  # the safety caution, once per dashboard session
        terminal.keys("Enter")
        terminal.wait_for("go ahead")
        terminal.keys("y")
        wait_state("HOMING", limit_s=10.0)
        assert wait_state("IDLE")["homed"] is True
        terminal.wait_for("next    a  arm")  # the dashboard's own view has caught up, as an operator's would
        confirm("a")
        wait_state("READY", limit_s=10.0)
        deadline = time.monotonic() + 60.0
        while status()["state"] == "READY" and time.monotonic() < deadline:
            confirm("u")  # refused (and explained) while the pendulum still swings
            time.sleep(1.0)
        wait_state("BALANCE")
        time.sleep(DEMO_BALANCE_S)  # the test is that it holds on the wall clock
        held = status()
        assert held["state"] == "BALANCE" and held["faults"] == []
        loop = held["loop"]
        with capsys.disabled():
            print(
                f"\nreal-time demo: loop lag p99 {loop['lag_ms_p99']:.2f} ms, max "
                f"{loop['lag_ms_max']:.2f} ms (worst {loop['lag_ms_worst']:.2f}); longest wait "
                f"between reads {loop['read_gap_ms_worst']:.2f} ms"
            )
        terminal.keys("q")
        terminal.wait_for("go ahead")
        terminal.keys("y")  # stop, then quit once at rest
        assert wait_for_file(exit_file) == "0"
    finally:
        terminal.close()


async def _status(socket_path) -> dict:
    async with await ApiClient.connect(socket_path, source="cli") as client:
        return await client.request("status")
