"""Run store: schema versions, one writer per file, run records, drops, errors, crash recovery.

Crash-safety and durability claims are those of SQLite's WAL mode
(sqlite.org/wal.html, "Write-Ahead Logging", and sqlite.org/pragma.html#pragma_synchronous):
committed transactions survive the death of the writing process; ``PRAGMA
integrity_check`` returning the single row "ok" is SQLite's own verdict that a
file is undamaged (sqlite.org/pragma.html#pragma_integrity_check).
"""

from __future__ import annotations

import json
import math
import os
import shlex
import signal
import sqlite3
import subprocess
import sys
import textwrap
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from daemon.cli import main
from daemon.recording import (
    ABORTED,
    SAMPLE_COLUMN_NAMES,
    SCHEMA_VERSION,
    WRITE_FAILED,
    Recorder,
    RecordingError,
    RunMetadata,
)
from daemon.recording.modes import MODE_PROGRESSION
from daemon.recording.schema import APPLICATION_ID, MIGRATIONS, MODE_INDEX
from daemon.recording.store import get_run, list_runs, open_for_reading, run_events, sample_chunks
from daemon.recording.writer_files import DISK_RESERVE_BYTES
from daemon.supervisor import State, state_code_table

REPO = Path(__file__).resolve().parents[1]
MODES = {0: "IDLE", 1: "HOMING", 2: "SWING_UP", 3: "BALANCE", 9: "FAULT"}


def sample_values(i):
    """A distinct, exactly representable sample for index i (invented demo data).

    Works for a Python int and, element-wise, for a numpy integer array with the
    same float64 arithmetic, so large runs can be checked column by column.
    """
    return (
        i & 0xFFFF,
        2000 * i,
        1_000_000_000 + 2_000_000 * i,
        17 * i - 5000,
        -3 * i,
        i & 0x0F,
        (i >> 4) & 0x1F,
        i * 1e-5,
        0.5 - i * 3e-7,
        math.pi - i * 1e-6,
        -0.25 * (i % 7),
        12.0 - i * 2.4e-5,
        11.5 - i * 2.3e-5,
        (i // 1000) % 4,
        20.0 + (i % 100) * 0.125,
        ((i // 500) % 3 - 1) * 0.05,
        11.25 - i * 2.25e-5,
    )


def sample_row(i: int) -> tuple:
    return sample_values(i)


def metadata(rig_id: str = "kestrel-1", notes: str = "") -> RunMetadata:
    return RunMetadata(
        rig_id=rig_id,
        config_text='[rig]\nid = "kestrel-1"\n',
        software_version="0.1.0",
        protocol_version="1",
        firmware_version="1.4.2",
        drive_kind="voltage",
        mode_names=MODES,
        operator_notes=notes,
    )


def stored_rows(db: Path, run_id: int) -> list[tuple]:
    conn = open_for_reading(db)
    try:
        run = get_run(conn, run_id, db)
        return [row for chunk in sample_chunks(conn, run) for row in chunk]
    finally:
        conn.close()


def integrity(db: Path) -> str:
    conn = sqlite3.connect(db)
    try:
        return conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()


def test_new_store_is_created_in_wal_mode_at_the_current_schema_version(tmp_path):
    db = tmp_path / "runs.db"
    Recorder(db).close()
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    columns = [row[1] for row in conn.execute("PRAGMA table_info(samples)")]
    assert columns == ["sample_id", "run_id", *SAMPLE_COLUMN_NAMES]


def test_a_version_1_store_is_migrated_and_keeps_its_runs(tmp_path):
    db = tmp_path / "runs.db"
    conn = sqlite3.connect(db, isolation_level=None)
    conn.executescript(MIGRATIONS[0].sql)  # version 1 exactly as it was released
    conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 1")
    conn.execute(
        "INSERT INTO runs (run_id, rig_id, started_unix_ns, started_host_ns, outcome, config_text, "
        "config_format, software_version, protocol_version, firmware_version, operator_notes, "
        "drive_kind, mode_names_json, first_sample_id, last_sample_id, samples_written) "
        "VALUES (1, 'kestrel-1', 0, 0, 'completed', '', 'toml', '0.1.0', '1', '1.4.2', '', "
        "'voltage', '[[0, \"IDLE\"]]', 1, 2, 2)"
    )
    old_rows = [sample_row(i)[:15] for i in range(2)]  # the 15 columns of version 1
    conn.executemany(f"INSERT INTO samples VALUES (NULL, 1, {', '.join('?' * 15)})", old_rows)
    conn.close()
    with Recorder(db) as recorder:
        second = recorder.start_run(metadata())
        recorder.put_sample(sample_row(2))
        recorder.end_run("completed")
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION == 3
    columns = [row[1] for row in conn.execute("PRAGMA table_info(samples)")]
    assert columns[-2:] == ["setpoint_m", "drive_applied"]
    conn.close()
    assert stored_rows(db, 1) == [row + (None, None) for row in old_rows]
    assert stored_rows(db, second) == [sample_row(2)]


def test_store_from_a_newer_poise_is_refused_with_one_line(tmp_path):
    db = tmp_path / "runs.db"
    Recorder(db).close()
    conn = sqlite3.connect(db)
    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 5}")
    conn.close()
    for opener in (Recorder, open_for_reading):
        with pytest.raises(RecordingError) as caught:
            opener(db)
        message = str(caught.value)
        assert "\n" not in message and str(db) in message
        assert f"schema version {SCHEMA_VERSION + 5} is newer" in message


def test_store_marked_as_poise_but_with_an_unknown_old_version_is_refused(tmp_path):
    db = tmp_path / "runs.db"
    conn = sqlite3.connect(db)
    conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    conn.execute("CREATE TABLE samples (x)")
    conn.commit()
    conn.close()
    with pytest.raises(RecordingError, match="schema version is 0; no migration exists"):
        Recorder(db)


def test_someone_elses_sqlite_file_is_left_alone(tmp_path):
    db = tmp_path / "other.db"
    conn = sqlite3.connect(db)
    conn.execute("CREATE TABLE photos (name TEXT)")
    conn.commit()
    conn.close()
    with pytest.raises(RecordingError, match=r"not a Poise run store .*tables: photos"):
        Recorder(db)
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 0
    assert [r[0] for r in conn.execute("SELECT name FROM sqlite_schema")] == ["photos"]


def test_unwritable_path_gives_one_line_naming_the_file(tmp_path):
    not_a_dir = tmp_path / "plain-file"
    not_a_dir.write_text("")
    db = not_a_dir / "runs.db"
    with pytest.raises(RecordingError) as caught:
        Recorder(db)
    assert str(db) in str(caught.value) and "\n" not in str(caught.value)


def test_two_recorders_of_one_process_record_into_one_store_side_by_side(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as first, Recorder(db) as second:
        one, two = first.start_run(metadata()), second.start_run(metadata())
        for i in range(300):
            (first if i % 3 else second).put_sample(sample_row(i))
            if i % 50 == 0:  # commits alternate, so the runs interleave
                assert first.flush() and second.flush()
        first.end_run("completed")
        second.end_run("completed")
    assert (one, two) == (1, 2)
    assert stored_rows(db, one) == [sample_row(i) for i in range(300) if i % 3]
    assert stored_rows(db, two) == [sample_row(i) for i in range(300) if not i % 3]


def test_run_record_holds_metadata_counts_and_mode_reached(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as recorder:
        run_id = recorder.start_run(metadata(notes="new belt"))
        for i in range(2500):  # modes 0, 1, 2 (sample_row changes mode every 1000)
            recorder.put_sample(sample_row(i))
        recorder.put_event("mode", "supervisor", {"from": "IDLE", "to": "HOMING"})
        recorder.end_run("completed", {"max_abs_x_m": 0.31})
    conn = open_for_reading(db)
    run = get_run(conn, run_id, db)
    assert (run.rig_id, run.outcome, run.operator_notes) == ("kestrel-1", "completed", "new belt")
    assert (run.software_version, run.protocol_version, run.firmware_version) == ("0.1.0", "1", "1.4.2")
    assert run.config_text == '[rig]\nid = "kestrel-1"\n'
    assert run.summary["reported"] == {"max_abs_x_m": 0.31}  # beside the summary of the store
    assert run.summary["samples"] == 2500
    assert (run.samples_written, run.samples_dropped, run.events_written) == (2500, 0, 1)
    assert run.modes_seen == [0, 1, 2] and run.mode_reached == "SWING_UP"
    assert run.mode_names == MODES
    assert run.ended_unix_ns >= run.started_unix_ns
    assert stored_rows(db, run_id) == [sample_row(i) for i in range(2500)]


def modes_run(db: Path, codes: list[State]) -> int:
    """A run with the supervisor's mode table whose samples go through ``codes``, one each."""
    with Recorder(db) as recorder:
        run_id = recorder.start_run(replace(metadata(), mode_names=state_code_table()))
        for i, code in enumerate(codes):
            row = sample_row(i)
            recorder.put_sample(row[:MODE_INDEX] + (int(code),) + row[MODE_INDEX + 1 :])
        recorder.end_run("completed")
    return run_id


def test_mode_progression_names_supervisor_states():
    assert set(MODE_PROGRESSION) <= {state.name for state in State}
    assert MODE_PROGRESSION[-1] == State.BALANCE.name


def test_mode_reached_is_the_most_advanced_mode_and_the_run_ends_in_its_last(tmp_path):
    db = tmp_path / "runs.db"
    path = [State.IDLE, State.HOMING, State.IDLE, State.READY, State.SWING_UP, State.BALANCE,
            State.STOPPING, State.ESTOP]  # fmt: skip
    balanced = modes_run(db, path)
    excited = modes_run(db, [State.IDLE, State.READY, State.EXCITE, State.FAULT])
    faulted = modes_run(db, [State.DISCONNECTED, State.FAULT])
    conn = open_for_reading(db)
    runs = {run.run_id: run for run in list_runs(conn, db)}
    assert (runs[balanced].mode_reached, runs[balanced].last_mode) == ("BALANCE", "ESTOP")
    assert (runs[excited].mode_reached, runs[excited].last_mode) == ("EXCITE", "FAULT")
    assert (runs[faulted].mode_reached, runs[faulted].last_mode) == (None, "FAULT")


def test_a_run_s_duration_is_its_device_sample_time(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as recorder:
        run_id = recorder.start_run(metadata())
        for i in range(1, 1001):
            recorder.put_sample(sample_row(i))  # t_device_us = 2000 i: 2 ms apart
        recorder.end_run("completed")
        empty = recorder.start_run(metadata())
        recorder.end_run("completed")
    conn = open_for_reading(db)
    run = get_run(conn, run_id, db)
    assert (run.first_t_device_us, run.last_t_device_us) == (2000, 2_000_000)
    assert run.sample_time_s == 999 * 0.002
    assert run.wall_time_s == (run.ended_unix_ns - run.started_unix_ns) / 1e9
    assert get_run(conn, empty, db).sample_time_s is None


def test_the_end_of_a_run_stores_a_summary_computed_from_the_store(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as recorder:
        run_id = recorder.start_run(metadata())
        # The link's counters where the run starts, where the link is lost, and (on a new link,
        # counting from zero) at the end: the run's link figures are the two stretches added up.
        link_counters = [("run start", 100, 2), ("link lost", 1100, 5), ("run end", 50, 1)]
        for i in range(1, 2501):  # modes 0, 1, 2 (IDLE, HOMING, SWING_UP), 2 ms apart
            recorder.put_sample(sample_row(i))
            if i in (700, 1800):
                recorder.put_event("interlock.trip", "interlock", {"name": "track.soft_limit"})
            if i in (1, 2000, 2500):
                at, frames_in, lost = link_counters.pop(0)
                counters = {"frames_in": frames_in, "lost_frames": lost}
                recorder.put_event("link.counters", "link", {"at": at, "counters": counters})
        recorder.put_event("interlock.trip", "interlock", {"name": "link.lost", "reason": "gone"})
        recorder.put_event("device.fault_report", "device", {"faults": 4, "code": 2, "detail": 0})
        recorder.put_event("supervisor.transition", "api", {"text": "IDLE -> HOMING on home"})
        recorder.end_run("completed")
    run = get_run(open_for_reading(db), run_id, db)
    assert run.summary == {
        "samples": 2500,
        "samples_dropped": 0,
        "events": 5 + 3,
        "events_dropped": 0,
        "first_t_device_us": 2000,
        "last_t_device_us": 5_000_000,
        "sample_time_s": 2499 * 0.002,
        "wall_time_s": (run.ended_unix_ns - run.started_unix_ns) / 1e9,
        "modes_seen": ["IDLE", "HOMING", "SWING_UP"],
        "mode_reached": "SWING_UP",
        "last_mode": "SWING_UP",
        "trips": {"track.soft_limit": 2, "link.lost": 1},
        "device_fault_reports": 1,
        "link": {"frames_in": 1000 + 50, "lost_frames": 3 + 1},
    }


def test_a_run_still_open_when_the_recorder_closes_gets_its_summary(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as recorder:
        closed = recorder.start_run(metadata())
        recorder.put_sample(sample_row(1))
    run = get_run(open_for_reading(db), closed, db)
    assert run.outcome == ABORTED and run.summary["samples"] == 1
    assert run.summary["last_t_device_us"] == sample_row(1)[1]


def test_samples_and_events_land_in_the_run_open_when_they_were_put(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as recorder:
        recorder.put_sample(sample_row(0))  # no run open: counted, not stored
        recorder.put_event("link", "link", {"state": "up"}, t_host_ns=5)
        first = recorder.start_run(metadata())
        for i in range(1, 101):
            recorder.put_sample(sample_row(i))
        recorder.put_event("interlock", "interlocks", {"trip": "x_limit", "x_m": 0.41}, t_host_ns=7)
        recorder.end_run("fault")
        second = recorder.start_run(metadata())
        for i in range(101, 151):
            recorder.put_sample(sample_row(i))
        recorder.end_run("completed")
    stats = recorder.stats()
    assert (stats.written, stats.unassigned, stats.events_written) == (150, 1, 2)
    assert stored_rows(db, first) == [sample_row(i) for i in range(1, 101)]
    assert stored_rows(db, second) == [sample_row(i) for i in range(101, 151)]
    conn = open_for_reading(db)
    assert run_events(conn, first) == [(7, "interlock", "interlocks", '{"trip": "x_limit", "x_m": 0.41}')]
    assert run_events(conn, second) == []
    assert conn.execute("SELECT kind FROM events WHERE run_id IS NULL").fetchall() == [("link",)]


def test_full_queue_drops_are_counted_returned_and_stored_in_the_run(tmp_path):
    db = tmp_path / "runs.db"
    recorder = Recorder(db, queue_capacity=1000, batch_rows=500)
    run_id = recorder.start_run(metadata())
    blocker = sqlite3.connect(db, isolation_level=None)
    blocker.execute("BEGIN IMMEDIATE")  # the writer cannot commit until we let go
    accepted = [recorder.put_sample(sample_row(i)) for i in range(3000)]
    blocker.execute("COMMIT")
    recorder.end_run("completed")
    recorder.close()
    refused = accepted.count(False)
    assert refused >= 3000 - 1000 - 500  # at most one batch left the queue while blocked
    stats = recorder.stats()
    assert (stats.dropped, stats.written) == (refused, 3000 - refused)
    run = get_run(open_for_reading(db), run_id, db)
    assert (run.samples_dropped, run.samples_written) == (refused, 3000 - refused)
    kept = [sample_row(i) for i, ok in enumerate(accepted) if ok]
    assert stored_rows(db, run_id) == kept


def test_disk_full_stops_recording_stores_the_failure_and_leaves_a_sound_file(tmp_path):
    db = tmp_path / "runs.db"
    errors: list[str] = []
    # max_page_count makes SQLite report SQLITE_FULL exactly as for a full disk
    # (sqlite.org/pragma.html#pragma_max_page_count).
    recorder = Recorder(db, max_db_bytes=300_000, batch_rows=1000, on_error=errors.append)
    run_id = recorder.start_run(metadata())
    for i in range(20_000):  # about 2 MB of samples
        recorder.put_sample(sample_row(i))
    assert recorder.flush()
    stats = recorder.stats()
    assert stats.error is not None and "database or disk is full" in stats.error
    assert str(db) in stats.error and "\n" not in stats.error
    assert errors == [stats.error]
    assert (stats.active, stats.run_id) == (False, run_id)  # the run is open, nothing is written
    assert stats.written > 0 and stats.written + stats.lost == 20_000
    with pytest.raises(RecordingError) as refused:
        recorder.start_run(metadata())
    assert str(refused.value).startswith(f"recording failed: {stats.error}; ")
    recorder.end_run("completed")
    recorder.close()
    assert integrity(db) == "ok"
    # Every committed batch is whole: the run's counters match the rows present.
    rows = stored_rows(db, run_id)
    assert rows == [sample_row(i) for i in range(stats.written)]
    conn = open_for_reading(db)
    run = get_run(conn, run_id, db)
    assert run.samples_written == run.summary["samples"] == stats.written
    # The failure itself is stored, in the room kept for it, and it ended the run.
    assert run.outcome == WRITE_FAILED and run.ended_unix_ns is not None
    ((_t, kind, source, data),) = run_events(conn, run_id)
    assert (kind, source, json.loads(data)["reason"]) == ("recorder.error", "recorder", stats.error)
    assert [r.run_id for r in list_runs(conn, db)] == [run_id]  # the refused start left no run
    conn.close()
    with Recorder(db) as reopened:
        assert reopened.recovered_runs == []


def test_a_size_cap_keeps_room_to_store_its_own_failure(tmp_path):
    db = tmp_path / "runs.db"
    recorder = Recorder(db, max_db_bytes=200_000)
    run_id = recorder.start_run(metadata())
    # Events of almost a page each (4096-byte pages), one transaction per sample: when the cap
    # is hit the file is full to the last page, and the error event needs a page of its own.
    i = 0
    while recorder.stats().error is None:
        recorder.put_sample(sample_row(i))
        recorder.put_event("note", "test", {"text": "x" * 3900})
        assert recorder.flush()
        i += 1
    recorder.close()
    assert "could not be stored" not in recorder.stats().error
    conn = open_for_reading(db)
    assert get_run(conn, run_id, db).outcome == WRITE_FAILED
    assert run_events(conn, run_id)[-1][1] == "recorder.error"


FULL_DISK_WRITER = textwrap.dedent(
    """
    import sys
    sys.path.insert(0, sys.argv[2])
    from test_recording_store import metadata, sample_row
    from daemon.recording import Recorder

    recorder = Recorder(sys.argv[1])
    recorder.start_run(metadata())
    for i in range(5_000_000):  # far more than the 1 MB file system holds
        recorder.put_sample(sample_row(i))
        if i % 500 == 0 and (recorder.flush() and recorder.stats().error is not None):
            break
    recorder.close()
    print(recorder.stats().error)
    """
)


def in_small_file_system(folder: Path, command: str) -> subprocess.CompletedProcess:
    """Run ``command`` with a 1 MB tmpfs mounted on ``folder``: a disk that really fills up.

    The mount lives in a private mount namespace of an unprivileged user namespace
    (unshare(1)), so the test needs no root; it is skipped where the kernel forbids that.
    """
    where = shlex.quote(str(folder))
    probe = subprocess.run(
        ["unshare", "-rm", "sh", "-c", f"mount -t tmpfs -o size=64k poise-probe {where}"],
        capture_output=True, check=False,
    )
    if probe.returncode != 0:
        pytest.skip(f"no tmpfs in a user namespace here: {probe.stderr.decode().strip()}")
    script = f"mount -t tmpfs -o size=1m poise-test {where} && {command}"
    return subprocess.run(
        ["unshare", "-rm", "sh", "-c", script], capture_output=True, text=True, cwd=REPO,
        check=False,
    )


def test_a_really_full_disk_still_gets_the_failure_stored(tmp_path):
    disk, kept = tmp_path / "disk", tmp_path / "kept"
    disk.mkdir()
    kept.mkdir()
    writer = tmp_path / "writer.py"
    writer.write_text(FULL_DISK_WRITER)
    db = disk / "runs.db"
    write = shlex.join(map(str, [sys.executable, writer, db, Path(__file__).parent]))
    keep = f"cp {shlex.quote(str(disk))}/runs.db* {shlex.quote(str(kept))}/"
    done = in_small_file_system(disk, f"{write} && {keep}")
    assert done.returncode == 0, done.stderr[-2000:]
    error = done.stdout.strip()
    assert "database or disk is full" in error and "could not be stored" not in error
    copy = kept / "runs.db"
    assert integrity(copy) == "ok"
    conn = open_for_reading(copy)
    run = get_run(conn, 1, copy)
    assert run.outcome == WRITE_FAILED and run.samples_written > 0
    assert [kind for _t, kind, _s, _d in run_events(conn, 1)] == ["recorder.error"]
    assert stored_rows(copy, 1) == [sample_row(i) for i in range(run.samples_written)]


FULL_DISK_STARTER = textwrap.dedent(
    """
    import sys
    sys.path.insert(0, sys.argv[2])
    from daemon.recording import Recorder, RecordingError

    with open(sys.argv[1] + ".filler", "wb", buffering=0) as filler:  # fill the disk to its end
        try:
            while True:
                filler.write(bytes(4096))
        except OSError:
            pass
    try:
        Recorder(sys.argv[1])
    except RecordingError as exc:
        print(exc)
    """
)


def test_a_writer_holds_its_disk_reserve_in_allocated_blocks_and_frees_them_on_a_failure(tmp_path):
    recorder = Recorder(tmp_path / "runs.db")
    [lock] = tmp_path.glob("runs.db.writer-*.lock")
    # st_blocks counts 512-byte units allocated (POSIX stat, sys/stat.h): a hole would count none.
    assert lock.stat().st_blocks * 512 >= DISK_RESERVE_BYTES
    pid_line = f"{os.getpid()}\n".encode()
    recorder._locks.give_up_reserve()  # what a failed write does first
    assert lock.read_bytes() == pid_line and lock.stat().st_blocks * 512 < DISK_RESERVE_BYTES
    recorder.close()


def test_a_disk_too_full_for_the_reserve_refuses_to_start_recording_and_says_so(tmp_path):
    disk = tmp_path / "disk"
    disk.mkdir()
    starter = tmp_path / "starter.py"
    starter.write_text(FULL_DISK_STARTER)
    start = shlex.join(map(str, [sys.executable, starter, disk / "runs.db", Path(__file__).parent]))
    done = in_small_file_system(disk, start)
    assert done.returncode == 0, done.stderr[-2000:]
    error = done.stdout.strip()
    assert "no room for the writer's 128 KiB failure reserve" in error, error
    assert "No space left on device" in error


def test_closing_with_a_run_open_ends_it_as_aborted(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as recorder:
        run_id = recorder.start_run(metadata())
        recorder.put_sample(sample_row(0))
    conn = open_for_reading(db)
    assert get_run(conn, run_id, db).outcome == ABORTED
    assert [event[1] for event in run_events(conn, run_id)] == ["run.not_ended"]


def test_a_million_samples_at_full_speed_are_all_stored_in_order(tmp_path):
    db = tmp_path / "runs.db"
    count = 1_000_000
    recorder = Recorder(db, queue_capacity=count + 10)  # room for the whole burst
    run_id = recorder.start_run(metadata())
    put = recorder.put_sample
    refused = sum(1 for i in range(count) if not put(sample_row(i)))
    recorder.end_run("completed")
    recorder.close()
    assert refused == 0
    stats = recorder.stats()
    assert (stats.written, stats.dropped, stats.lost, stats.error) == (count, 0, 0, None)
    conn = open_for_reading(db)
    run = get_run(conn, run_id, db)
    assert (run.samples_written, run.samples_dropped) == (count, 0)
    checked = 0
    for chunk in sample_chunks(conn, run, chunk_rows=100_000):
        # Every column is an int below 2**53 or a float, so float64 compares them exactly.
        expected = np.column_stack(sample_values(np.arange(checked, checked + len(chunk))))
        np.testing.assert_array_equal(np.array(chunk, dtype=np.float64), expected)
        checked += len(chunk)
    assert checked == count


WRITER_SCRIPT = textwrap.dedent(
    """
    import sys, time
    sys.path.insert(0, sys.argv[2])
    from test_recording_store import metadata, sample_row
    from daemon.recording import Recorder

    recorder = Recorder(sys.argv[1], flush_interval_s=0.01, host_clock_ns=lambda: sample_row(0)[2])
    recorder.start_run(metadata())
    reported = 0
    i = 0
    while True:
        recorder.put_sample(sample_row(i))
        i += 1
        if i % 200 == 0:
            time.sleep(0.001)  # a brisk but finite producer, about 150 kHz
            written = recorder.stats().written
            if written != reported:
                print(written, flush=True)
                reported = written
    """
)


def test_kill_9_mid_stream_keeps_every_committed_sample_and_the_run_is_marked_aborted(
    tmp_path, capsys
):
    db = tmp_path / "runs.db"
    child = subprocess.Popen(
        [sys.executable, "-c", WRITER_SCRIPT, str(db), str(Path(__file__).parent)],
        stdout=subprocess.PIPE,
        text=True,
        cwd=REPO,
    )
    try:
        committed = 0
        while committed < 30_000:
            line = child.stdout.readline()
            assert line, f"writer process ended early with status {child.wait()}"
            committed = int(line)
        child.send_signal(signal.SIGKILL)  # no clean-up of any kind runs
    finally:
        child.kill()
        child.wait()
    assert child.returncode == -signal.SIGKILL

    assert integrity(db) == "ok"
    rows = stored_rows(db, 1)
    assert len(rows) >= committed
    assert rows == [sample_row(i) for i in range(len(rows))]
    last_sample_offset_ns = rows[-1][2] - sample_row(0)[2]
    # Read before any writer runs again: the dead writer's lock is gone, so the run reads as aborted
    # at its last committed sample, though the file still holds it open.
    conn = open_for_reading(db)
    (crashed,) = list_runs(conn, db)
    assert (crashed.outcome, crashed.writer_died) == (ABORTED, True)
    assert crashed == get_run(conn, 1, db)
    assert crashed.samples_written == len(rows)
    assert crashed.ended_unix_ns - crashed.started_unix_ns == last_sample_offset_ns
    assert crashed.last_t_device_us == rows[-1][1]
    assert crashed.sample_time_s == (rows[-1][1] - rows[0][1]) / 1e6
    assert conn.execute("SELECT outcome FROM runs").fetchall() == [(None,)]  # read, not written
    conn.close()
    assert main(["runs", "--db", str(db), "--json"]) == 0
    (listed,) = json.loads(capsys.readouterr().out)
    assert (listed["outcome"], listed["samples"]) == (ABORTED, len(rows))

    with Recorder(db) as recorder:
        assert recorder.recovered_runs == [1]
    conn = open_for_reading(db)
    run = get_run(conn, 1, db)
    assert (run.outcome, run.writer_died) == (ABORTED, False)
    assert run.ended_unix_ns == crashed.ended_unix_ns
    assert run.summary == crashed.summary and run.summary["samples"] == len(rows)
    assert [event[1] for event in run_events(conn, 1)] == ["run.aborted"]
