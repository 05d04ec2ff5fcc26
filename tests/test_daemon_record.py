"""The `record` command through the control API: each start opens a new run in the run store, stop ends it.

The daemon runs on the simulated rig over a real pty (lockstep); the client
speaks JSON lines on the control socket as the CLI does, and the runs are read
back from the SQLite run store itself.
"""

from __future__ import annotations

import asyncio
import itertools
import signal
import sys

import numpy as np
import pytest
from test_daemon_support import (
    homed_and_ready,
    recorded_samples,
    run_for,
    running_service,
    write_rig_config,
)

from daemon.api.client import ApiClient, ApiError, wait_for_daemon
from daemon.errors import CommandRefused
from daemon.recording.store import get_run, list_runs, open_for_reading, run_events
from daemon.supervisor import State


def runs(service) -> list:
    service.recorder.flush()
    conn = open_for_reading(service.recorder.db_path)
    try:
        return list_runs(conn, service.recorder.db_path)
    finally:
        conn.close()


def run_record(service, run_id: int):
    service.recorder.flush()
    conn = open_for_reading(service.recorder.db_path)
    try:
        return get_run(conn, run_id, service.recorder.db_path)
    finally:
        conn.close()


async def test_record_on_starts_a_run_with_the_note_and_record_off_ends_it(tmp_path):
    async with running_service(tmp_path, serve_api=True) as service:
        assert runs(service) == []
        async with await ApiClient.connect(service.config.api.socket_path) as client:
            started = await client.request("record", {"on": True, "note": "step response, 0.1 m"})
            run_id = started["run_id"]
            status = await client.request("status")
            assert status["recording"]["active"] and status["recording"]["run_id"] == run_id
            await run_for(service, 0.5)
            open_run = run_record(service, run_id)
            assert open_run.operator_notes == "step response, 0.1 m"
            assert open_run.ended_unix_ns is None and open_run.samples_written > 0
            assert open_run.rig_id == "kestrel-1" and "[drive]" in open_run.config_text

            assert await client.request("record", {"on": False}) == {"run_id": None}
            status = await client.request("status")
            assert not status["recording"]["active"] and status["recording"]["run_id"] is None
        ended = run_record(service, run_id)
        assert ended.ended_unix_ns is not None and ended.outcome == "completed"
        written = ended.samples_written
        await run_for(service, 0.2)
        assert run_record(service, run_id).samples_written == written  # nothing more after the stop
        assert [run.run_id for run in runs(service)] == [run_id]


async def test_record_on_while_recording_ends_the_open_run_and_starts_another(tmp_path):
    async with running_service(tmp_path, serve_api=True) as service:
        async with await ApiClient.connect(service.config.api.socket_path) as client:
            first = (await client.request("record", {"on": True, "note": "first"}))["run_id"]
            await run_for(service, 0.2)
            second = (await client.request("record", {"on": True, "note": "second"}))["run_id"]
            await run_for(service, 0.2)
            assert second != first
            await client.request("record", {"on": False})
        stored = {run.run_id: run for run in runs(service)}
        assert set(stored) == {first, second}
        assert [stored[first].operator_notes, stored[second].operator_notes] == ["first", "second"]
        assert stored[first].ended_unix_ns is not None and stored[second].ended_unix_ns is not None
        assert stored[first].last_sample_id < stored[second].first_sample_id


@pytest.mark.parametrize(
    ("args", "message"),
    [
        ({}, "on"),
        ({"on": "yes"}, "on"),
        ({"on": True, "note": "x" * 201}, "note"),
    ],
)
async def test_bad_record_arguments_are_refused_naming_the_argument_and_change_nothing(
    tmp_path, args, message
):
    async with running_service(tmp_path, serve_api=True) as service:
        async with await ApiClient.connect(service.config.api.socket_path) as client:
            with pytest.raises(ApiError, match=f"record.*{message}"):
                await client.request("record", args)
            assert (await client.request("status"))["recording"]["active"] is False
        assert runs(service) == []


async def test_each_sample_records_the_set_point_in_force_and_the_drive_the_rig_applied(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("set-point step")
        await homed_and_ready(service)
        service.execute("setpoint", {"x_m": 0.1}, "api")
        await run_for(service, 0.3)
        rows = recorded_samples(service)
    ready = [row for row in rows if row["mode"] == State.READY]
    assert {row["setpoint_m"] for row in ready} == {0.0, 0.1}
    assert ready[-1]["setpoint_m"] == 0.1
    # protocol/PROTOCOL.md: a Drive answering sample k is in effect from sample k + 1, and the
    # Telemetry's drive_applied reports it (sent on the wire as float32).
    pairs = [(a, b) for a, b in itertools.pairwise(ready) if b["seq"] == (a["seq"] + 1) & 0xFFFF]
    assert len(pairs) > 100
    for before, after in pairs:
        assert after["drive_applied"] == float(np.float32(before["drive_sent"]))


async def test_sigterm_of_poise_run_ends_its_run_with_a_summary_of_the_store(tmp_path):
    config = write_rig_config(tmp_path)
    daemon = await asyncio.create_subprocess_exec(
        sys.executable, "-m", "daemon.cli", "run", "--config", str(config), "--lockstep",
        stdout=asyncio.subprocess.DEVNULL, stderr=asyncio.subprocess.PIPE,
    )  # fmt: skip
    try:
        async with asyncio.timeout(60.0):
            async with await wait_for_daemon(tmp_path / "poise.sock", retry_s=0.1) as client:
                await client.request("reset")  # the rig's power-up flag: taken into use
                while (await client.request("status"))["recording"]["samples"] < 500:
                    await asyncio.sleep(0.05)  # polling a remote daemon, as a CLI user would
        daemon.send_signal(signal.SIGTERM)
        async with asyncio.timeout(60.0):
            _out, err = await daemon.communicate()
    finally:
        if daemon.returncode is None:
            daemon.kill()
            await daemon.wait()
    assert daemon.returncode == 0, err.decode()[-2000:]
    conn = open_for_reading(tmp_path / "runs.db")
    try:
        (run,) = list_runs(conn, tmp_path / "runs.db")
    finally:
        conn.close()
    assert run.outcome == "completed"
    summary = run.summary
    assert summary["samples"] == run.samples_written >= 500
    assert summary["sample_time_s"] == run.sample_time_s > 0
    assert summary["last_mode"] == "IDLE" and summary["mode_reached"] == "IDLE"
    # The run holds the rig's stream from its first sample, so the power-up latch is in it.
    assert summary["trips"] == {"device.reset": 1} and summary["samples_dropped"] == 0


async def test_after_the_store_fills_up_record_on_is_refused_and_status_says_it_failed(tmp_path):
    # A 0.2 MB cap on the run store: SQLite fails writes beyond it as for a full disk.
    capped = {"db_path": f'"{tmp_path / "runs.db"}"\nmax_db_mb = 0.2'}
    async with running_service(tmp_path, serve_api=True, edits=capped) as service:
        async with await ApiClient.connect(service.config.api.socket_path) as client:
            run_id = (await client.request("record", {"on": True}))["run_id"]
            for _ in range(120):  # 0.2 MB is a few seconds of samples
                if service.recorder.stats().error is not None:
                    break
                await run_for(service, 1.0)
            recording = (await client.request("status"))["recording"]
            assert recording["active"] is False and recording["run_id"] == run_id
            assert "database or disk is full" in recording["error"]
            refused = "^recording failed: cannot write run store .*; "
            with pytest.raises(CommandRefused, match=refused):
                await client.request("record", {"on": True})
        assert "recording.failed" in [name for name, _t_s, _seq in service.trips]
        (stored,) = runs(service)
        assert (stored.run_id, stored.outcome) == (run_id, "write_failed")
        conn = open_for_reading(service.recorder.db_path)
        try:
            kinds = [kind for _t, kind, _source, _data in run_events(conn, run_id)]
        finally:
            conn.close()
        assert kinds[-1] == "recorder.error"
