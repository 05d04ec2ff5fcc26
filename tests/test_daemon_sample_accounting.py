"""Every Telemetry frame the rig sent during a run is in the store, or counted as lost.

Real processes on the real serial path: `poise sim --pty` counts the Telemetry
frames it hands to its pty (``stream_telemetry_sent``: since the Configure of
the one link in the test), and `poise run --port` records from its start. The
rig is then stopped (SIGTERM: it lets the host read everything it sent, then
says its counts), the daemon records the lost link's counters and is stopped.
The run must hold one stored sample for each frame that arrived, answered or
not, and its summary's ``link.lost_frames`` must count the rest: stored plus
lost equals what the rig says it sent, exactly.

In lockstep the wire drops and garbles frames (``--drop-rate``,
``--corrupt-rate``), so some are lost and must be counted. A frame lost after
the last one that arrived is the one loss no host can see (no later sequence
number shows the gap): a lockstep rig waits on its unanswered sample, so when
it is stopped it may be waiting on the one the wire just dropped. That tail is
read off the rig's count and the last stored sequence number, and may be at
most that one frame. In real time the
machine is loaded with two busy processes beside the daemon and the rig, so
two frames often wait in one read (each must still be stored).
"""

from __future__ import annotations

import asyncio
import contextlib
import re
import signal
import sys
from pathlib import Path

import pytest
from rig_processes import RigProcess, rig_process, simulator_command
from test_daemon_restart import connect, first_status, start_daemon
from test_daemon_support import KESTREL, write_rig_config

from daemon.recording.store import get_run, open_for_reading

STREAM_S = 6.0  # rig time streamed (and, in lockstep, homed through) before the rig is stopped
SENT = re.compile(r"(\d+) since its last Configure")
BUSY_LOOP = "while True: pass"


async def rig_stopped_and_counted(sim: RigProcess) -> int:
    """SIGTERM the rig; the Telemetry frames it sent on the test's one link."""
    line = await sim.stop("simulated rig stopped")
    match = SENT.search(line)
    assert match, line
    return int(match[1])


@contextlib.asynccontextmanager
async def busy_cores(count: int):
    """``count`` processes spinning on the CPU for the duration."""
    spinners = [
        await asyncio.create_subprocess_exec(sys.executable, "-c", BUSY_LOOP) for _ in range(count)
    ]
    try:
        yield
    finally:
        for spinner in spinners:
            spinner.kill()
            await spinner.wait()


async def stream_then_stop(tmp_path: Path, *sim_options: str, home: bool) -> tuple[int, dict, int]:
    """(frames the rig sent, the run's summary, its last stored seq) for one daemon life on one link."""
    config = write_rig_config(tmp_path, KESTREL)
    socket_path, db_path, log = tmp_path / "poise.sock", tmp_path / "runs.db", tmp_path / "daemon.log"
    async with rig_process(simulator_command(config, *sim_options)) as sim:
        daemon = await start_daemon(config, sim, log)
        try:
            async with await connect(daemon, socket_path, log) as client:
                up = await first_status(client, lambda s: s["link"]["connected"], "link up", True)
                if home:
                    await client.request("reset")  # the rig's power-up flag
                    await client.request("home")
                await first_status(
                    client, lambda s: s["t_s"] >= up["t_s"] + STREAM_S, "the stream", True
                )
                sent = await rig_stopped_and_counted(sim)
                await first_status(client, lambda s: not s["link"]["connected"], "link lost", True)
        finally:
            daemon.send_signal(signal.SIGTERM)
            await daemon.wait()
    assert daemon.returncode == 0, log.read_text()[-2000:]
    conn = open_for_reading(db_path)
    try:
        run = get_run(conn, 1, db_path)
        (last_seq,) = conn.execute(
            "SELECT seq FROM samples WHERE run_id = 1 ORDER BY sample_id DESC LIMIT 1"
        ).fetchone()
    finally:
        conn.close()
    assert run.outcome == "completed"
    assert sent < 65_536  # seq has not wrapped: it is the sample's index in the stream
    return sent, run.summary, last_seq


async def test_in_lockstep_on_a_lossy_wire_every_frame_sent_is_stored_or_counted_lost(tmp_path):
    sent, summary, last_seq = await stream_then_stop(
        tmp_path, "--lockstep", "--drop-rate", "0.002", "--corrupt-rate", "0.002", "--seed", "7",
        home=True,
    )
    lost = summary["link"]["lost_frames"]
    assert lost > 0 and summary["link"]["crc_failures"] > 0  # the wire really lost some
    tail = sent - (last_seq + 1)
    assert tail in (0, 1)
    assert summary["samples"] + lost + tail == sent, (summary["samples"], lost, tail, sent)
    assert summary["samples_dropped"] == 0


@pytest.mark.realtime
async def test_in_real_time_on_a_loaded_machine_every_frame_sent_is_stored(tmp_path):
    async with busy_cores(2):
        sent, summary, last_seq = await stream_then_stop(tmp_path, home=False)
    assert summary["link"]["lost_frames"] == 0, summary["link"]
    assert last_seq == sent - 1
    assert summary["samples"] == sent, (summary["samples"], sent)
    assert summary["samples_dropped"] == 0
