"""The recorder: a bounded in-memory queue and one writer thread that commits it to the run store.

Use from the daemon::

    recorder = Recorder("kestrel-1-runs.db", on_error=supervisor.recording_failed)
    run_id = recorder.start_run(RunMetadata(rig_id="kestrel-1", config_text=toml_text, ...))
    recorder.put_sample(row)          # every control cycle; never blocks, never raises
    recorder.put_event("mode", "supervisor", {"from": "IDLE", "to": "HOMING"})
    recorder.end_run("completed")    # or end_run("completed", {"max_abs_theta_rad": 0.04})
    recorder.close()

``Recorder(db_path, ...)`` takes a writer lock of its own beside the store,
opens (creates or migrates) the store, marks runs left open by processes that
have died as ``aborted`` (their ids are in ``recovered_runs``; runs of other
writers still recording are left alone) and starts the writer thread. Any
number of processes may record into one store at once
(daemon/recording/writer_files.py). It raises :class:`RecordingError` (one line
naming the file) if any of that fails. Setting up may wait for other writers
starting at the same moment and for another writer's commit (milliseconds).

``put_sample(row) -> bool``
    ``row`` is a plain tuple in ``schema.SAMPLE_COLUMN_NAMES`` order: seq,
    t_device_us, t_host_ns, cart_counts, pendulum_counts, switches, faults,
    x_m, v_mps, theta_rad, omega_radps, drive_requested, drive_sent, mode,
    latency_us, setpoint_m, drive_applied. ``t_host_ns`` must come from ``host_clock_ns`` (default
    ``time.monotonic_ns``). Appends to the queue and returns True; if the queue
    holds ``queue_capacity`` items the row is counted as dropped and False is
    returned. Meant for one producer thread (the control cycle).
``put_event(kind, source, data, t_host_ns=None) -> bool``
    An event (mode change, operator command, interlock trip, link statistics,
    fault) for the open run, or with no run if none is open. ``t_host_ns``
    defaults to ``host_clock_ns()``. ``data`` is serialised by the writer
    thread, so hand over a dict you no longer change; it must be
    JSON-serialisable (other values are stored as their ``str``). Safe from any
    thread; dropped and counted when the queue is full.
``start_run(metadata) -> int`` / ``end_run(outcome, extra=None) -> None``
    Queue the start or end of a run, in order with the samples and events put
    before and after; neither waits for the disk, the writer thread or another
    process. The run id is issued here, from the file beside the store that
    hands each id out once (:class:`daemon.recording.writer_files.RunIds`: two
    system calls), so concurrent writers never share one; a writer that records
    alone counts up from ``MAX(run_id) + 1``. Samples put while no run is open are
    discarded and counted as ``unassigned``. When the end is written, the
    writer computes the run's summary from the store
    (:func:`daemon.recording.summary.run_summary`: samples, time span, modes,
    trips, drops) and stores it; a non-empty ``extra`` (figures only the
    caller knows, e.g. a session's own result) is stored in it as ``reported``.
``close(timeout_s=10.0)``
    Write everything queued, end a still-open run as ``aborted``, stop the
    thread, close the file and release the lock. Idempotent.
``stats() -> RecorderStats``
    Counters for the daemon's status: queued, written, dropped, lost, last
    commit time, commit-time p99, writer CPU time, error.

The writer thread sleeps on an Event for at most ``flush_interval_s`` (50 ms)
and is woken early when ``batch_rows`` items are queued. Each wake-up drains
up to ``batch_rows`` items into one transaction (samples via executemany, the
run's counters updated in the same transaction), so a transaction holds at
most about two flush intervals of samples and a crash loses at most the
transaction in flight. Queue-full drops are stored in the run record.

Another writer's transaction: SQLite lets one transaction write at a time, so
``BEGIN IMMEDIATE`` may find the store busy. The writer thread then waits in
SQLite's busy handler, up to ``busy_timeout_s`` at a time, and if the other
transaction is still not committed it leaves the queue as it is and tries again
(``stats().busy_waits`` counts these): nothing is taken from the queue before
the write lock is held, so waiting loses nothing and raises nothing, and the
producer goes on queueing (a queue that fills meanwhile drops and counts, as
always). Each transaction of the run's samples gets consecutive ``sample_id``s
(the write lock is held from BEGIN to COMMIT, so no other writer inserts in
between), which is what makes ``last_insert_rowid() - len(rows) + 1`` the first
id of the batch.

If a write fails (disk full, the file became unwritable, I/O error), the
transaction is rolled back (the file stays consistent), and in one more
small transaction the writer stores the failure: a ``recorder.error`` event
with the reason, and the end of the open run, outcome ``write_failed``, with
its summary of what was committed. That last transaction finds room where
there is any: under a size cap (``max_db_bytes``) the writer keeps
``FAILURE_RESERVE_BYTES`` free for it and gives them up now; on a full disk
it frees the disk reserve its lock file holds (``writer_files.py``) and the
last transaction is written into that room. If even that fails, the reason
says so, and it still
reaches ``stats().error`` and ``on_error(reason)`` (called from the writer
thread; the daemon trips on it and logs it). From then on nothing more is
written: queued and later samples are counted as ``lost``, ``stats().active``
is False, and ``start_run`` raises RecordingError ("recording failed: ...").
The daemon must stop the rig; recording resumes only with a new Recorder.
A run started in the moment the write fails may be refused only by the
writer: its id is then in no run of the store, and the error says why.
"""

from __future__ import annotations

import json
import sqlite3
import threading
import time
from collections import deque
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from operator import itemgetter
from pathlib import Path
from typing import Literal, Self

from daemon.config.service import RecordingSettings
from daemon.recording.errors import RecordingError
from daemon.recording.schema import MODE_INDEX, SAMPLE_COLUMN_NAMES, T_HOST_INDEX
from daemon.recording.store import (
    ABORTED,
    BUSY_TIMEOUT_S,
    WRITE_FAILED,
    limit_size,
    open_for_writing,
    recover_unfinished_runs,
    written_run,
)
from daemon.recording.summary import run_summary
from daemon.recording.writer_files import RunIds, WriterLocks, remove_dead_writer_locks

DEFAULT_QUEUE_CAPACITY = 65_536  # about 2 minutes at 500 Hz
DEFAULT_BATCH_ROWS = 5_000
DEFAULT_FLUSH_INTERVAL_S = 0.05
COMMIT_TIMES_KEPT = 1024


@dataclass(frozen=True)
class RunMetadata:
    """What a run records about itself when it starts."""

    rig_id: str
    config_text: str
    software_version: str
    protocol_version: str
    firmware_version: str
    drive_kind: Literal["voltage", "force"]
    mode_names: Mapping[int, str] = field(default_factory=dict)
    """Supervisor mode code -> name, listed in order of progression ("mode reached" uses it)."""
    config_format: Literal["toml", "json"] = "toml"
    operator_notes: str = ""


@dataclass(frozen=True, slots=True)
class RecorderStats:
    queued: int
    """Items (samples, events, run starts/ends) waiting for the writer."""
    written: int
    """Samples committed since the recorder opened."""
    dropped: int
    """Samples refused because the queue was full."""
    events_written: int
    events_dropped: int
    lost: int
    """Samples accepted but not written because a write failed (see error)."""
    unassigned: int
    """Samples put while no run was open (discarded)."""
    commits: int
    last_commit_unix_ns: int | None
    commit_p99_s: float | None
    """99th percentile of the last 1024 transactions, BEGIN to COMMIT."""
    writer_cpu_s: float
    busy_waits: int
    """Times the store stayed busy (another writer's transaction) for a whole busy_timeout_s."""
    run_id: int | None
    active: bool
    """A run is open and being written (False after a write failure)."""
    error: str | None


@dataclass(frozen=True, slots=True)
class _Event:
    t_host_ns: int
    kind: str
    source: str
    data: dict


@dataclass(frozen=True, slots=True)
class _StartRun:
    run_id: int
    metadata: RunMetadata
    started_unix_ns: int
    started_host_ns: int
    dropped_before: int
    events_dropped_before: int


@dataclass(frozen=True, slots=True)
class _EndRun:
    outcome: str
    extra: dict
    ended_unix_ns: int
    dropped_total: int
    events_dropped_total: int


@dataclass(frozen=True, slots=True)
class _Flush:
    done: threading.Event


@dataclass(slots=True)
class _OpenRun:
    """The writer's running totals for the run being recorded."""

    start: _StartRun
    insert_sql: str
    first_sample_id: int | None = None
    last_sample_id: int | None = None
    last_sample_host_ns: int | None = None
    samples_written: int = 0
    events_written: int = 0
    modes_seen: set[int] = field(default_factory=set)


class Recorder:
    """Bounded queue + writer thread in front of one run store. See the module docstring."""

    def __init__(
        self,
        db_path: str | Path,
        *,
        queue_capacity: int = DEFAULT_QUEUE_CAPACITY,
        batch_rows: int = DEFAULT_BATCH_ROWS,
        flush_interval_s: float = DEFAULT_FLUSH_INTERVAL_S,
        max_db_bytes: int | None = None,
        busy_timeout_s: float = BUSY_TIMEOUT_S,
        host_clock_ns: Callable[[], int] = time.monotonic_ns,
        on_error: Callable[[str], None] | None = None,
    ):
        self.db_path = str(db_path)
        self._capacity = queue_capacity
        self._batch_rows = batch_rows
        self._flush_interval_s = flush_interval_s
        self._host_clock_ns = host_clock_ns
        self._on_error = on_error
        self._max_db_bytes = max_db_bytes

        self._set_up(busy_timeout_s)

        # Producer side (control cycle thread; events from any thread under _special_lock).
        self._queue: deque = deque()
        self._samples_dropped = 0
        self._events_dropped = 0
        self._specials_put = 0  # events and run starts/ends appended so far
        self._special_lock = threading.Lock()
        self._open_run_id: int | None = None

        # Writer side (read by stats(); ints and references are read atomically).
        self._specials_taken = 0
        self._run: _OpenRun | None = None
        self._written = 0
        self._events_written = 0
        self._lost = 0
        self._unassigned = 0
        self._commits = 0
        self._last_commit_unix_ns: int | None = None
        self._commit_times_s: deque[float] = deque(maxlen=COMMIT_TIMES_KEPT)
        self._writer_cpu_s = 0.0
        self._busy_waits = 0
        self._error: str | None = None
        self._batch_samples = 0  # counted into the totals above only once the batch commits
        self._batch_events = 0
        self._batch_unassigned = 0
        self._batch_flushes: list[threading.Event] = []

        self._wake = threading.Event()
        self._closing = False
        self._closed = False
        self._thread = threading.Thread(target=self._write_loop, name="poise-recorder", daemon=True)
        self._thread.start()

    def _set_up(self, busy_timeout_s: float) -> None:
        """Lock, open, migrate and recover, one starting writer at a time (writer_files.py)."""
        self._run_ids = RunIds(self.db_path)
        locks = conn = None
        try:
            with self._run_ids.setup():
                locks = WriterLocks(self.db_path)
                conn = open_for_writing(self.db_path, self._max_db_bytes, busy_timeout_s)
                self.recovered_runs = recover_unfinished_runs(conn, self.db_path)
                remove_dead_writer_locks(self.db_path)
                (last_run_id,) = conn.execute("SELECT MAX(run_id) FROM runs").fetchone()
                self._run_ids.at_least(last_run_id or 0)
        except (sqlite3.Error, RecordingError) as exc:
            if conn is not None:
                conn.close()
            if locks is not None:
                locks.release()
            self._run_ids.close()
            if isinstance(exc, RecordingError):
                raise
            raise RecordingError(f"run store {self.db_path}: {exc}") from None
        self._locks, self._conn = locks, conn

    @classmethod
    def from_settings(
        cls,
        settings: RecordingSettings,
        *,
        host_clock_ns: Callable[[], int] = time.monotonic_ns,
        on_error: Callable[[str], None] | None = None,
    ) -> Recorder:
        """A recorder as the rig config's ``[recording]`` section describes it."""
        return cls(
            settings.db_path,
            queue_capacity=settings.queue_capacity,
            flush_interval_s=settings.flush_interval_ms / 1000.0,
            max_db_bytes=None if settings.max_db_mb is None else int(settings.max_db_mb * 1e6),
            host_clock_ns=host_clock_ns,
            on_error=on_error,
        )

    # ----------------------------------------------------------------- producer side

    def put_sample(self, row: tuple) -> bool:
        queue = self._queue
        size = len(queue)
        if size < self._capacity:
            queue.append(row)
            if size == self._batch_rows:
                self._wake.set()
            return True
        self._samples_dropped += 1
        return False

    def put_event(self, kind: str, source: str, data: dict, t_host_ns: int | None = None) -> bool:
        if t_host_ns is None:
            t_host_ns = self._host_clock_ns()
        with self._special_lock:
            if len(self._queue) >= self._capacity:
                self._events_dropped += 1
                return False
            self._put_special(_Event(t_host_ns, kind, source, data))
        return True

    def start_run(self, metadata: RunMetadata) -> int:
        if self._error is not None:
            raise RecordingError(
                f"recording failed: {self._error}; make room for the run store and restart "
                "the daemon to record again"
            )
        if self._open_run_id is not None:
            raise RecordingError(
                f"run store {self.db_path}: run {self._open_run_id} is still open; end it first"
            )
        if metadata.drive_kind not in ("voltage", "force"):
            raise RecordingError(
                f"run metadata drive_kind: must be 'voltage' or 'force' (got {metadata.drive_kind!r})"
            )
        run_id = self._run_ids.issue()
        with self._special_lock:
            self._put_special(
                _StartRun(
                    run_id,
                    metadata,
                    time.time_ns(),
                    self._host_clock_ns(),
                    self._samples_dropped,
                    self._events_dropped,
                )
            )
        self._open_run_id = run_id
        return run_id

    def end_run(self, outcome: str, extra: dict | None = None) -> None:
        if self._open_run_id is None:
            raise RecordingError(f"run store {self.db_path}: end_run({outcome!r}) with no run open")
        with self._special_lock:
            self._put_special(
                _EndRun(
                    outcome,
                    extra or {},
                    time.time_ns(),
                    self._samples_dropped,
                    self._events_dropped,
                )
            )
        self._open_run_id = None

    def flush(self, timeout_s: float | None = None) -> bool:
        if self._closed:
            return True
        done = threading.Event()
        with self._special_lock:
            self._put_special(_Flush(done))
        return done.wait(timeout_s)

    def _put_special(self, item: _Event | _StartRun | _EndRun | _Flush) -> None:
        # The count goes up before the append: the writer scans a batch for these
        # items only when it sees more put than it has taken.
        self._specials_put += 1
        self._queue.append(item)
        self._wake.set()

    def close(self, timeout_s: float | None = None) -> None:
        if self._closed:
            return
        if self._open_run_id is not None:
            self.put_event(
                "run.not_ended", "recorder", {"reason": "recorder closed with the run open"}
            )
            self.end_run(ABORTED)
        self._closing = True
        self._wake.set()
        self._thread.join(timeout_s)
        if self._thread.is_alive():
            raise RecordingError(
                f"run store {self.db_path}: writer did not finish within {timeout_s} s "
                f"({len(self._queue)} items still queued)"
            )
        self._conn.close()
        self._locks.release()
        self._run_ids.close()
        self._closed = True

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def stats(self) -> RecorderStats:
        times = sorted(self._commit_times_s)
        p99 = times[min(len(times) - 1, int(0.99 * len(times)))] if times else None
        return RecorderStats(
            queued=len(self._queue),
            written=self._written,
            dropped=self._samples_dropped,
            events_written=self._events_written,
            events_dropped=self._events_dropped,
            lost=self._lost,
            unassigned=self._unassigned,
            commits=self._commits,
            last_commit_unix_ns=self._last_commit_unix_ns,
            commit_p99_s=p99,
            writer_cpu_s=self._writer_cpu_s,
            busy_waits=self._busy_waits,
            run_id=self._open_run_id,
            active=self._open_run_id is not None and self._error is None,
            error=self._error,
        )

    # ------------------------------------------------------------------- writer side

    def _write_loop(self) -> None:
        queue = self._queue
        while True:
            if len(queue) < self._batch_rows and not self._closing:
                self._wake.wait(self._flush_interval_s)
                self._wake.clear()
            closing = self._closing
            if queue:
                if self._error is None:
                    self._write_batch()
                else:
                    self._discard(self._take_batch())
            self._writer_cpu_s = time.thread_time()
            if closing and not queue:
                return

    def _take_batch(self) -> list:
        popleft = self._queue.popleft
        return [popleft() for _ in range(min(len(self._queue), self._batch_rows))]

    def _write_batch(self) -> None:
        """Write one batch as one transaction; on failure roll it back and stop recording.

        The batch leaves the queue only once this writer holds the write lock: while
        another writer's transaction keeps the store busy, everything stays queued.
        """
        conn = self._conn
        started_s = time.perf_counter()
        try:
            conn.execute("BEGIN IMMEDIATE")  # waits up to busy_timeout_s for another writer
        except sqlite3.OperationalError as exc:
            if exc.sqlite_errorcode & 0xFF == sqlite3.SQLITE_BUSY:
                self._busy_waits += 1
                return
            self._fail(exc, self._take_batch())
            return
        items = self._take_batch()
        has_specials = self._specials_put != self._specials_taken
        self._batch_samples = 0
        self._batch_events = 0
        self._batch_unassigned = 0
        self._batch_flushes: list[threading.Event] = []
        try:
            if has_specials:
                self._write_mixed(items)
            else:
                self._insert_samples(items)
            if self._run is not None:
                self._store_progress(self._run)
            conn.execute("COMMIT")
        except sqlite3.Error as exc:
            self._fail(exc, items)
            return
        finally:
            for done in self._batch_flushes:
                done.set()
        self._commit_times_s.append(time.perf_counter() - started_s)
        self._commits += 1
        self._last_commit_unix_ns = time.time_ns()
        self._written += self._batch_samples
        self._events_written += self._batch_events
        self._unassigned += self._batch_unassigned

    def _write_mixed(self, items: list) -> None:
        samples: list[tuple] = []
        for item in items:
            if type(item) is tuple:
                samples.append(item)
                continue
            if samples:
                self._insert_samples(samples)
                samples = []
            self._specials_taken += 1
            if type(item) is _Event:
                self._insert_event(item)
            elif type(item) is _StartRun:
                self._begin_run(item)
            elif type(item) is _Flush:
                self._batch_flushes.append(item.done)
            else:
                self._finish_run(item)
        if samples:
            self._insert_samples(samples)

    def _insert_samples(self, rows: list[tuple]) -> None:
        run = self._run
        if run is None:
            self._batch_unassigned += len(rows)
            return
        conn = self._conn
        conn.executemany(run.insert_sql, rows)
        (last_id,) = conn.execute("SELECT last_insert_rowid()").fetchone()
        if run.first_sample_id is None:
            run.first_sample_id = last_id - len(rows) + 1
        run.last_sample_id = last_id
        run.last_sample_host_ns = rows[-1][T_HOST_INDEX]
        run.samples_written += len(rows)
        run.modes_seen.update(map(_mode_of, rows))
        self._batch_samples += len(rows)

    def _insert_event(self, event: _Event) -> None:
        run_id = None
        if self._run is not None:
            run_id = self._run.start.run_id
            self._run.events_written += 1
        self._conn.execute(
            "INSERT INTO events (run_id, t_host_ns, kind, source, data_json) VALUES (?, ?, ?, ?, ?)",
            (
                run_id,
                event.t_host_ns,
                event.kind,
                event.source,
                json.dumps(event.data, default=str),
            ),
        )
        self._batch_events += 1

    def _begin_run(self, start: _StartRun) -> None:
        meta = start.metadata
        self._conn.execute(
            "INSERT INTO runs (run_id, rig_id, started_unix_ns, started_host_ns, config_text, "
            "config_format, software_version, protocol_version, firmware_version, operator_notes, "
            "drive_kind, mode_names_json, writer_token) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                start.run_id,
                meta.rig_id,
                start.started_unix_ns,
                start.started_host_ns,
                meta.config_text,
                meta.config_format,
                meta.software_version,
                meta.protocol_version,
                meta.firmware_version,
                meta.operator_notes,
                meta.drive_kind,
                json.dumps([[int(code), str(name)] for code, name in meta.mode_names.items()]),
                self._locks.token,
            ),
        )
        placeholders = ", ".join("?" * len(SAMPLE_COLUMN_NAMES))
        # run_id is our own integer, so writing it into the statement is safe and saves
        # binding one parameter per row.
        insert_sql = f"INSERT INTO samples VALUES (NULL, {int(start.run_id)}, {placeholders})"
        self._run = _OpenRun(start, insert_sql)

    def _finish_run(self, end: _EndRun) -> None:
        run = self._run
        if run is None:
            return
        self._store_progress(run, end)
        self._close_run(run.start.run_id, end.outcome, end.ended_unix_ns, end.extra)
        self._run = None

    def _close_run(self, run_id: int, outcome: str, ended_unix_ns: int, extra: dict) -> None:
        """Store the run's outcome and end, then its summary computed from what is now stored."""
        conn = self._conn
        conn.execute(
            "UPDATE runs SET outcome = ?, ended_unix_ns = ? WHERE run_id = ?",
            (outcome, ended_unix_ns, run_id),
        )
        summary = run_summary(conn, written_run(conn, run_id))
        if extra:
            summary["reported"] = extra
        conn.execute(
            "UPDATE runs SET summary_json = ? WHERE run_id = ?",
            (json.dumps(summary, default=str), run_id),
        )

    def _store_progress(self, run: _OpenRun, end: _EndRun | None = None) -> None:
        """The run's counters, in the same transaction as the rows they count."""
        dropped_total = self._samples_dropped if end is None else end.dropped_total
        events_dropped_total = self._events_dropped if end is None else end.events_dropped_total
        self._conn.execute(
            "UPDATE runs SET first_sample_id = ?, last_sample_id = ?, last_sample_host_ns = ?, "
            "samples_written = ?, samples_dropped = ?, events_written = ?, events_dropped = ?, "
            "modes_seen_json = ? WHERE run_id = ?",
            (
                run.first_sample_id,
                run.last_sample_id,
                run.last_sample_host_ns,
                run.samples_written,
                dropped_total - run.start.dropped_before,
                run.events_written,
                events_dropped_total - run.start.events_dropped_before,
                json.dumps(sorted(run.modes_seen)),
                run.start.run_id,
            ),
        )

    def _fail(self, exc: sqlite3.Error, items: list) -> None:
        """Roll back, store the failure if the store still takes it, stop, and tell the daemon."""
        conn = self._conn
        if conn.in_transaction:
            conn.rollback()
        reason = f"cannot write run store {self.db_path}: {exc}"
        try:
            self._store_failure(reason, rolled_back=sum(1 for i in items if type(i) is tuple))
        except sqlite3.Error as second:
            if conn.in_transaction:
                conn.rollback()
            reason += f" (the failure could not be stored either: {second})"
        self._error = reason
        self._run = None
        self._discard(items)
        if self._on_error is not None:
            self._on_error(reason)

    def _store_failure(self, reason: str, rolled_back: int) -> None:
        """One last transaction: the error event, and the open run ended as WRITE_FAILED."""
        conn = self._conn
        self._locks.give_up_reserve()  # room on a full disk
        if self._max_db_bytes is not None:
            limit_size(conn, self._max_db_bytes, keep_reserve=False)  # the reserve is for this
        run = self._run
        conn.execute("BEGIN IMMEDIATE")
        conn.execute(
            "INSERT INTO events (run_id, t_host_ns, kind, source, data_json) "
            "VALUES (?, ?, 'recorder.error', 'recorder', ?)",
            (
                None if run is None else run.start.run_id,
                self._host_clock_ns(),
                json.dumps({"reason": reason, "samples_rolled_back": rolled_back}),
            ),
        )
        if run is not None:
            # The run's counters stay those of its last committed batch; only the event is new.
            conn.execute(
                "UPDATE runs SET events_written = events_written + 1 WHERE run_id = ?",
                (run.start.run_id,),
            )
            self._close_run(run.start.run_id, WRITE_FAILED, time.time_ns(), {})
        conn.execute("COMMIT")

    def _discard(self, items: list) -> None:
        """After a failure: count what will never be written, and release anyone flushing."""
        self._lost += sum(1 for item in items if type(item) is tuple)
        for item in items:
            if type(item) is _Flush:
                item.done.set()


_mode_of = itemgetter(MODE_INDEX)
