"""Run store with several writer processes at once: runs apart, ids unique, a killed one aborted.

Every writer here is a real process recording into one real SQLite file, and
the killed one gets a real SIGKILL, so no clean-up of any kind runs in it.
What survives a killed writer rests on SQLite's WAL guarantees
(sqlite.org/wal.html): committed transactions survive the death of the
process; that a kernel drops a dead process's ``flock`` is flock(2) (Linux
man-pages: "the lock is released ... when all file descriptors are closed",
which process exit does).
"""

from __future__ import annotations

import fcntl
import json
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from test_recording_store import REPO, integrity, metadata, sample_row, stored_rows

from daemon.recording import ABORTED, Recorder, RecordingError
from daemon.recording.schema import APPLICATION_ID, MIGRATIONS
from daemon.recording.store import get_run, list_runs, open_for_reading, run_events
from daemon.recording.writer_files import legacy_lock_path, run_ids_path

WRITER_SCRIPT = textwrap.dedent(
    """
    import json, sys, time
    sys.path.insert(0, sys.argv[2])
    from test_recording_store import metadata, sample_row
    from daemon.recording import Recorder

    db, first, count, runs, hold = sys.argv[1], *map(int, sys.argv[3:6]), sys.argv[6] == "hold"
    recorder = Recorder(db, flush_interval_s=0.01)
    print(json.dumps(recorder.recovered_runs), flush=True)
    sys.stdin.readline()  # go: the test lets every writer start its runs at the same moment
    i = first
    for _ in range(runs):
        print(recorder.start_run(metadata()), flush=True)
        for _ in range(count):
            recorder.put_sample(sample_row(i))
            i += 1
            if i % 100 == 0:
                time.sleep(0.001)  # a brisk but finite producer, so the writers overlap
        if hold:
            recorder.flush()
            print(recorder.stats().written, flush=True)
            sys.stdin.readline()  # keep the run open until told
        recorder.end_run("completed")
    recorder.close()
    """
)


class Writer:
    """One writer process: ``Recorder(db)``, then on "go" ``runs`` runs of ``count`` samples
    each, sample_row(first), sample_row(first + 1), ...; with ``hold`` it keeps each run open,
    committed, until told to go on."""

    def __init__(self, db: Path, first: int, count: int, runs: int = 1, hold: bool = False):
        args = [str(db), str(Path(__file__).parent), str(first), str(count), str(runs)]
        self.process = subprocess.Popen(
            [sys.executable, "-c", WRITER_SCRIPT, *args, "hold" if hold else "go"],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True, cwd=REPO,
        )  # fmt: skip

    def line(self) -> str:
        text = self.process.stdout.readline()
        assert text, f"writer process ended early with status {self.process.wait()}"
        return text.strip()

    def recovered(self) -> list[int]:
        return json.loads(self.line())

    def go(self) -> None:
        self.process.stdin.write("\n")
        self.process.stdin.flush()

    def finish(self) -> int:
        self.process.stdin.close()
        self.process.stdout.read()
        return self.process.wait(timeout=60)

    def stop(self) -> None:
        if self.process.poll() is None:
            self.process.kill()
        self.process.wait()


@pytest.fixture
def writers():
    started: list[Writer] = []

    def start(*args, **kwargs) -> Writer:
        started.append(Writer(*args, **kwargs))
        return started[-1]

    yield start
    for writer in started:
        writer.stop()


def samples_of_others_within(db: Path, run_id: int) -> int:
    """How many samples of other runs lie between this run's first and last sample ids."""
    conn = sqlite3.connect(db)
    try:
        first, last = conn.execute(
            "SELECT first_sample_id, last_sample_id FROM runs WHERE run_id = ?", (run_id,)
        ).fetchone()
        return conn.execute(
            "SELECT COUNT(*) FROM samples WHERE sample_id BETWEEN ? AND ? AND run_id != ?",
            (first, last, run_id),
        ).fetchone()[0]
    finally:
        conn.close()


def test_two_writers_record_at_once_and_each_run_holds_exactly_its_own_samples(tmp_path, writers):
    db = tmp_path / "runs.db"
    count = 30_000
    a, b = writers(db, 0, count), writers(db, 1_000_000, count)
    assert a.recovered() == b.recovered() == []
    a.go()
    b.go()
    run_a, run_b = int(a.line()), int(b.line())
    assert a.finish() == b.finish() == 0
    assert {run_a, run_b} == {1, 2}
    assert integrity(db) == "ok"
    assert stored_rows(db, run_a) == [sample_row(i) for i in range(count)]
    assert stored_rows(db, run_b) == [sample_row(1_000_000 + i) for i in range(count)]
    # The two really wrote at the same time: their samples interleave in sample_id.
    assert samples_of_others_within(db, run_a) > 0 and samples_of_others_within(db, run_b) > 0
    conn = open_for_reading(db)
    runs = {run.run_id: run for run in list_runs(conn, db)}
    assert [runs[r].outcome for r in (run_a, run_b)] == ["completed", "completed"]
    assert [runs[r].samples_written for r in (run_a, run_b)] == [count, count]
    assert runs[run_a].first_t_device_us == sample_row(0)[1]
    assert runs[run_b].last_t_device_us == sample_row(1_000_000 + count - 1)[1]


def test_of_two_writers_the_killed_one_s_run_is_aborted_and_only_it_is_recovered(
    tmp_path, writers
):
    db = tmp_path / "runs.db"
    doomed, alive = writers(db, 0, 20_000, hold=True), writers(db, 1_000_000, 20_000, hold=True)
    assert doomed.recovered() == alive.recovered() == []
    doomed.go()
    alive.go()
    doomed_run, alive_run = int(doomed.line()), int(alive.line())
    assert int(doomed.line()) == int(alive.line()) == 20_000  # committed, both runs still open
    doomed.process.send_signal(signal.SIGKILL)
    assert doomed.process.wait() == -signal.SIGKILL

    conn = open_for_reading(db)
    runs = {run.run_id: run for run in list_runs(conn, db)}
    assert (runs[doomed_run].outcome, runs[doomed_run].writer_died) == (ABORTED, True)
    assert runs[doomed_run].samples_written == 20_000
    assert (runs[alive_run].outcome, runs[alive_run].writer_died) == (None, False)
    assert get_run(conn, alive_run, db).outcome is None
    conn.close()

    # Two more writers start at the same moment: between them they mark the dead run once,
    # and the live one's run is left alone.
    third, fourth = writers(db, 0, 0, runs=0), writers(db, 0, 0, runs=0)
    recovered = [third.recovered(), fourth.recovered()]
    assert sorted(recovered) == [[], [doomed_run]]
    assert third.finish() == fourth.finish() == 0
    conn = open_for_reading(db)
    assert [event[1] for event in run_events(conn, doomed_run)] == ["run.aborted"]
    marked = get_run(conn, doomed_run, db)
    assert (marked.outcome, marked.writer_died) == (ABORTED, False)
    assert marked.summary["samples"] == 20_000
    assert get_run(conn, alive_run, db).outcome is None
    conn.close()
    # Only the live writer's lock file is left beside the store.
    assert len(list(tmp_path.glob("runs.db.writer-*.lock"))) == 1

    assert alive.finish() == 0
    conn = open_for_reading(db)
    finished = get_run(conn, alive_run, db)
    assert (finished.outcome, finished.samples_written) == ("completed", 20_000)
    assert run_events(conn, alive_run) == []
    conn.close()
    assert stored_rows(db, alive_run) == [sample_row(1_000_000 + i) for i in range(20_000)]
    assert stored_rows(db, doomed_run) == [sample_row(i) for i in range(20_000)]
    assert list(tmp_path.glob("runs.db.writer-*.lock")) == []


def test_writers_started_at_the_same_moment_get_distinct_run_ids(tmp_path, writers):
    db = tmp_path / "runs.db"
    processes, runs_each, count = 6, 3, 50
    started = [writers(db, 1_000 * k, count, runs=runs_each) for k in range(processes)]
    for writer in started:  # all opened the new store at once; now all start runs at once
        assert writer.recovered() == []
    for writer in started:
        writer.go()
    ids = [[int(writer.line()) for _ in range(runs_each)] for writer in started]
    assert [writer.finish() for writer in started] == [0] * processes
    issued = sorted(run_id for per_writer in ids for run_id in per_writer)
    assert issued == list(range(1, processes * runs_each + 1))
    conn = open_for_reading(db)
    stored = {run.run_id: run for run in list_runs(conn, db)}
    conn.close()
    assert sorted(stored) == issued
    for k, per_writer in enumerate(ids):
        for n, run_id in enumerate(per_writer):
            first = 1_000 * k + count * n
            assert stored_rows(db, run_id) == [sample_row(first + i) for i in range(count)]
    # A writer after them goes on counting.
    with Recorder(db) as recorder:
        assert recorder.start_run(metadata()) == processes * runs_each + 1


def test_run_ids_go_on_from_the_store_when_the_id_file_is_lost(tmp_path):
    db = tmp_path / "runs.db"
    with Recorder(db) as recorder:
        for _ in range(3):
            recorder.start_run(metadata())
            recorder.end_run("completed")
    run_ids_path(db).unlink()
    with Recorder(db) as recorder:
        assert recorder.start_run(metadata()) == 4


def version_2_store_with_an_open_run(db: Path) -> None:
    """A store exactly as Poise before schema version 3 left it when killed mid-run."""
    conn = sqlite3.connect(db, isolation_level=None)
    conn.executescript(MIGRATIONS[0].sql + MIGRATIONS[1].sql)
    conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 2")
    conn.execute(
        "INSERT INTO runs (run_id, rig_id, started_unix_ns, started_host_ns, config_text, "
        "config_format, software_version, protocol_version, firmware_version, operator_notes, "
        "drive_kind, mode_names_json, first_sample_id, last_sample_id, last_sample_host_ns, "
        "samples_written) VALUES (1, 'kestrel-1', 0, ?, '', 'toml', '0.1.0', '1', '1.4.2', '', "
        "'voltage', '[[0, \"IDLE\"]]', 1, 2, ?, 2)",
        (sample_row(0)[2], sample_row(1)[2]),
    )
    rows = [sample_row(0), sample_row(1)]
    conn.executemany(f"INSERT INTO samples VALUES (NULL, 1, {', '.join('?' * 17)})", rows)
    conn.close()


def test_a_version_2_run_left_open_is_recovered_when_no_older_poise_holds_the_store(tmp_path):
    db = tmp_path / "runs.db"
    version_2_store_with_an_open_run(db)
    with Recorder(db) as recorder:
        assert recorder.recovered_runs == [1]
        assert recorder.start_run(metadata()) == 2
    conn = open_for_reading(db)
    run = get_run(conn, 1, db)
    assert (run.outcome, run.writer_token, run.samples_written) == (ABORTED, None, 2)
    assert run.ended_unix_ns == sample_row(1)[2] - sample_row(0)[2]  # at its last sample


def test_a_running_older_poise_keeps_the_store_to_itself(tmp_path):
    db = tmp_path / "runs.db"
    version_2_store_with_an_open_run(db)
    # What Poise before schema version 3 holds while recording: <db>.lock, exclusive, its pid in it.
    fd = os.open(legacy_lock_path(db), os.O_RDWR | os.O_CREAT, 0o644)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        os.write(fd, b"4242\n")
        with pytest.raises(RecordingError) as refused:
            Recorder(db)
        message = str(refused.value)
        assert "process 4242" in message and str(db) in message and "\n" not in message
        conn = sqlite3.connect(db)  # untouched: neither migrated nor recovered
        assert conn.execute("PRAGMA user_version").fetchone()[0] == 2
        assert conn.execute("SELECT outcome FROM runs").fetchall() == [(None,)]
        conn.close()
        assert list(tmp_path.glob("runs.db.writer-*.lock")) == []
    finally:
        os.close(fd)
    with Recorder(db) as recorder:
        assert recorder.recovered_runs == [1]


def test_a_writer_waits_out_another_s_long_transaction_and_loses_nothing(tmp_path):
    db = tmp_path / "runs.db"
    recorder = Recorder(db, busy_timeout_s=0.05, flush_interval_s=0.01)
    run_id = recorder.start_run(metadata())
    blocker = sqlite3.connect(db, isolation_level=None)
    blocker.execute("BEGIN IMMEDIATE")  # another writer's transaction, far longer than the timeout
    for i in range(2000):
        recorder.put_sample(sample_row(i))
    while recorder.stats().busy_waits < 3:
        assert not recorder.flush(timeout_s=0.2)  # nothing can be committed meanwhile
    assert (recorder.stats().error, recorder.stats().written) == (None, 0)
    blocker.execute("COMMIT")
    assert recorder.flush(timeout_s=10)
    recorder.end_run("completed")
    recorder.close()
    stats = recorder.stats()
    assert (stats.error, stats.written, stats.dropped, stats.lost) == (None, 2000, 0, 0)
    assert stored_rows(db, run_id) == [sample_row(i) for i in range(2000)]
