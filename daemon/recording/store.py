"""Opening the run store for writing (one writer per file) or reading, and reading runs back.

Durability: the store runs in WAL mode with ``synchronous=NORMAL``. A commit then
appends the transaction to the ``-wal`` file with write() and returns without
fsync; the WAL is fsynced only at checkpoints. That is crash-safe for the
failure this store must survive most often, a killed or crashed process
(``kill -9``, segfault, OOM kill): the written pages are already in the
operating system's page cache, so every committed transaction survives, and an
uncommitted one is rolled back on the next open. A power cut or kernel crash
can lose the transactions committed since the last checkpoint (at most about
one WAL's worth, ~4 MB by default), but never corrupts the file: SQLite
ignores WAL frames after the last valid commit. ``synchronous=FULL`` would
close that window at the price of one fsync per commit, which breaks the
commit-time budget on ordinary disks.

One writer per file: the writer holds an exclusive ``flock`` on ``<db>.lock``
for its lifetime (the kernel drops it when the process dies, however it dies).
Holding it is what makes it safe to mark runs still open at start-up as
aborted: no other live process can be recording them.

Telling a crashed run from one being written, when reading: a run whose
``outcome`` is still NULL is either being recorded now or was left open by a
writer that died (``kill -9``, a crash, a power cut). Readers (:func:`list_runs`,
:func:`get_run`) try to take the same lock *shared* while they read the run
rows. If they cannot, a live writer holds it and the open run is its run
(it cleaned up any older open run when it started): it is shown as being
recorded, outcome None. If they can, no writer is alive, and none can start
while they hold it (a starting writer waits up to ``LOCK_WAIT_S`` for readers),
so an open run is one whose writer died: it is shown as ``aborted``, ending at
its last committed sample, exactly as the next writer will mark it in the file
(``RunRecord.writer_died`` says it is not marked yet). The lock is a kernel
lock on a local file; a store on a network file system shared between machines
is not supported.
"""

from __future__ import annotations

import contextlib
import dataclasses
import fcntl
import json
import os
import sqlite3
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import quote

from daemon.recording.errors import RecordingError
from daemon.recording.modes import most_advanced
from daemon.recording.schema import SAMPLE_COLUMN_NAMES, SCHEMA_VERSION, check_version, migrate
from daemon.recording.summary import run_summary

ABORTED = "aborted"  # outcome of a run whose writer ended without closing it
WRITE_FAILED = "write_failed"  # outcome of a run cut short because the store could not be written
FAILURE_RESERVE_BYTES = 64 * 1024
"""Kept free under a size cap (recording.max_db_mb) to store the failure once the cap is hit."""
LOCK_WAIT_S = 1.0  # a reader probing the lock holds it for microseconds; ride that out


def lock_path(db_path: str | Path) -> Path:
    return Path(f"{db_path}.lock")


def _describe_os_error(exc: OSError) -> str:
    return exc.strerror or str(exc)


class WriterLock:
    """Exclusive ownership of one run store by one process, via flock on ``<db>.lock``."""

    def __init__(self, db_path: str | Path):
        path = lock_path(db_path)
        try:
            self._fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise RecordingError(
                f"run store {db_path}: cannot create lock file {path}: {_describe_os_error(exc)}"
            ) from None
        deadline = time.monotonic() + LOCK_WAIT_S
        while True:
            try:
                fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    holder = os.pread(self._fd, 32, 0).decode(errors="replace").strip() or "?"
                    os.close(self._fd)
                    raise RecordingError(
                        f"run store {db_path}: already being recorded into by process {holder}"
                    ) from None
                time.sleep(0.01)
        os.ftruncate(self._fd, 0)
        os.pwrite(self._fd, f"{os.getpid()}\n".encode(), 0)

    def release(self) -> None:
        if self._fd >= 0:
            os.close(self._fd)  # closing drops the flock
            self._fd = -1


@contextlib.contextmanager
def _writer_alive(db_path: str | Path) -> Iterator[bool]:
    """Whether a live process holds the store's writer lock; if none does, keep one from
    starting (the lock held shared) until the block ends. See the module docstring."""
    try:
        fd = os.open(lock_path(db_path), os.O_RDONLY)
    except FileNotFoundError:
        yield False  # no writer has ever run here
        return
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except BlockingIOError:
            yield True
            return
        yield False
    finally:
        os.close(fd)  # closing drops the shared lock


def writer_active(db_path: str | Path) -> bool:
    """True if some process holds the writer lock of this store (is recording into it now)."""
    with _writer_alive(db_path) as alive:
        return alive


def limit_size(conn: sqlite3.Connection, max_db_bytes: int, *, keep_reserve: bool) -> None:
    """Cap the store at ``max_db_bytes``, less FAILURE_RESERVE_BYTES while ``keep_reserve``.

    SQLite then refuses a write that would grow the file beyond the cap with
    SQLITE_FULL, exactly as for a full disk (sqlite.org/pragma.html#pragma_max_page_count).
    """
    page_size = conn.execute("PRAGMA page_size").fetchone()[0]
    budget = max_db_bytes - (FAILURE_RESERVE_BYTES if keep_reserve else 0)
    conn.execute(f"PRAGMA max_page_count = {max(1, budget // page_size)}")


def open_for_writing(db_path: str | Path, max_db_bytes: int | None = None) -> sqlite3.Connection:
    """Open (creating or migrating) a store; the caller must already hold its WriterLock.

    With ``max_db_bytes`` the store is capped below it by the failure reserve
    (:func:`limit_size`). The connection is in autocommit mode (explicit
    BEGIN/COMMIT) and may be handed to one other thread (the writer thread)
    after set-up.
    """
    path = str(db_path)
    try:
        conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if mode != "wal":
            raise RecordingError(f"run store {path}: cannot switch to WAL mode (got {mode})")
        conn.execute("PRAGMA synchronous = NORMAL")  # see the module docstring for why this is safe
        migrate(conn, path)
        if max_db_bytes is not None:
            limit_size(conn, max_db_bytes, keep_reserve=True)
    except sqlite3.Error as exc:
        raise RecordingError(f"run store {path}: cannot open for writing: {exc}") from None
    return conn


def open_for_reading(db_path: str | Path) -> sqlite3.Connection:
    """A read-only connection to an existing store of this schema version."""
    path = str(db_path)
    if not Path(path).is_file():
        raise RecordingError(f"run store {path}: no such file")
    try:
        conn = sqlite3.connect(f"file:{quote(path)}?mode=ro", uri=True)
        version = check_version(conn, path)
    except sqlite3.Error as exc:
        raise RecordingError(f"run store {path}: cannot open for reading: {exc}") from None
    if version < SCHEMA_VERSION:
        raise RecordingError(
            f"run store {path}: schema version {version} predates this Poise ({SCHEMA_VERSION}); "
            "start the daemon on it once to migrate it"
        )
    return conn


def recover_unfinished_runs(conn: sqlite3.Connection) -> list[int]:
    """Mark runs left open by a writer that died as aborted; returns their ids.

    The end time is the run's last committed sample (start time if none), and
    the run gets its summary (daemon.recording.summary). Only call this while
    holding the store's WriterLock.
    """
    rows = conn.execute("SELECT run_id FROM runs WHERE outcome IS NULL ORDER BY run_id")
    open_ids = [run_id for (run_id,) in rows]
    for run_id in open_ids:
        run = _fetch_run(conn, run_id, writer_alive=False)  # read as aborted: what to store
        data = {
            "reason": "the recording process ended without ending the run",
            "samples_committed": run.samples_written,
            "marked_by_pid": os.getpid(),
        }
        elapsed_ns = run.ended_unix_ns - run.started_unix_ns
        conn.execute("BEGIN IMMEDIATE")
        conn.execute(
            "UPDATE runs SET outcome = ?, ended_unix_ns = ?, summary_json = ? WHERE run_id = ?",
            (run.outcome, run.ended_unix_ns, json.dumps(run.summary), run_id),
        )
        conn.execute(
            "INSERT INTO events (run_id, t_host_ns, kind, source, data_json) VALUES (?, ?, ?, ?, ?)",
            (run_id, run.started_host_ns + elapsed_ns, "run.aborted", "recorder", json.dumps(data)),
        )
        conn.execute("COMMIT")
    return open_ids


def _elapsed_to_last_sample_ns(started_host_ns: int, last_sample_host_ns: int | None) -> int:
    """Host time from the start of a run to its last committed sample (0 if it has none)."""
    return 0 if last_sample_host_ns is None else max(0, last_sample_host_ns - started_host_ns)


@dataclass(frozen=True, slots=True)
class RunRecord:
    """One row of ``runs`` as stored, its first and last samples' times and mode, and what a
    listing derives from them. A run left open by a writer that died is shown as aborted
    (``writer_died``; see the module docstring)."""

    run_id: int
    rig_id: str
    started_unix_ns: int
    started_host_ns: int
    ended_unix_ns: int | None
    outcome: str | None
    summary: dict | None
    config_text: str
    config_format: str
    software_version: str
    protocol_version: str
    firmware_version: str
    operator_notes: str
    drive_kind: str
    mode_names: dict[int, str]
    modes_seen: list[int]
    first_sample_id: int | None
    last_sample_id: int | None
    last_sample_host_ns: int | None
    samples_written: int
    samples_dropped: int
    events_written: int
    events_dropped: int
    first_t_device_us: int | None
    """Device time of the first committed sample (None without samples)."""
    last_t_device_us: int | None
    """Device time of the last committed sample."""
    last_mode_code: int | None
    """Supervisor mode of the last committed sample."""
    writer_died: bool = False
    """Still open in the file, but no process is writing it: shown as aborted, not yet marked."""

    @property
    def mode_reached(self) -> str | None:
        """The most advanced mode of the run's samples (daemon.recording.modes), or None."""
        names = self.mode_names
        return most_advanced(names[code] for code in self.modes_seen if code in names)

    @property
    def last_mode(self) -> str | None:
        """The mode the run ended in (its last committed sample's), by name."""
        if self.last_mode_code is None:
            return None
        return self.mode_names.get(self.last_mode_code, f"mode {self.last_mode_code}")

    @property
    def sample_time_s(self) -> float | None:
        """Device time from the first committed sample to the last (None without samples)."""
        if self.first_t_device_us is None or self.last_t_device_us is None:
            return None
        return (self.last_t_device_us - self.first_t_device_us) / 1e6

    @property
    def wall_time_s(self) -> float:
        """Start to end on the host's clock; for a run being recorded, start to its last sample."""
        if self.ended_unix_ns is not None:
            return (self.ended_unix_ns - self.started_unix_ns) / 1e9
        return _elapsed_to_last_sample_ns(self.started_host_ns, self.last_sample_host_ns) / 1e9


_RUN_FIELDS = (
    "run_id", "rig_id", "started_unix_ns", "started_host_ns", "ended_unix_ns", "outcome",
    "summary_json", "config_text", "config_format", "software_version", "protocol_version",
    "firmware_version", "operator_notes", "drive_kind", "mode_names_json", "modes_seen_json",
    "first_sample_id", "last_sample_id", "last_sample_host_ns", "samples_written",
    "samples_dropped", "events_written", "events_dropped",
)  # fmt: skip
# The first and last samples are found by primary key, so this costs two lookups per run.
_SELECT_RUNS = (
    f"SELECT {', '.join(f'r.{name}' for name in _RUN_FIELDS)}, "
    "first_sample.t_device_us, last_sample.t_device_us, last_sample.mode FROM runs AS r "
    "LEFT JOIN samples AS first_sample ON first_sample.sample_id = r.first_sample_id "
    "LEFT JOIN samples AS last_sample ON last_sample.sample_id = r.last_sample_id"
)


def _run_record(conn: sqlite3.Connection, row: tuple, writer_alive: bool) -> RunRecord:
    values = list(row)
    values[6] = None if row[6] is None else json.loads(row[6])
    values[14] = {int(code): name for code, name in json.loads(row[14])}
    values[15] = json.loads(row[15])
    run = RunRecord(*values)
    if run.outcome is None and not writer_alive:
        return _as_aborted(conn, run)
    return run


def _as_aborted(conn: sqlite3.Connection, run: RunRecord) -> RunRecord:
    """An open run whose writer died, as the next writer will mark it (recover_unfinished_runs)."""
    elapsed_ns = _elapsed_to_last_sample_ns(run.started_host_ns, run.last_sample_host_ns)
    run = dataclasses.replace(
        run, outcome=ABORTED, ended_unix_ns=run.started_unix_ns + elapsed_ns, writer_died=True
    )
    return dataclasses.replace(run, summary=run_summary(conn, run))


def _fetch_run(conn: sqlite3.Connection, run_id: int, writer_alive: bool) -> RunRecord | None:
    row = conn.execute(f"{_SELECT_RUNS} WHERE r.run_id = ?", (run_id,)).fetchone()
    return None if row is None else _run_record(conn, row, writer_alive)


def list_runs(conn: sqlite3.Connection, db_path: str | Path) -> list[RunRecord]:
    """Every run in the store at ``db_path`` (``conn`` opened on it), in order of run id."""
    with _writer_alive(db_path) as writer_alive:
        rows = conn.execute(f"{_SELECT_RUNS} ORDER BY r.run_id").fetchall()
        return [_run_record(conn, row, writer_alive) for row in rows]


def get_run(conn: sqlite3.Connection, run_id: int, db_path: str | Path) -> RunRecord:
    with _writer_alive(db_path) as writer_alive:
        run = _fetch_run(conn, run_id, writer_alive)
    if run is None:
        raise RecordingError(f"run {run_id}: no such run in run store {db_path}")
    return run


def written_run(conn: sqlite3.Connection, run_id: int) -> RunRecord:
    """The run as the writer's connection sees it, mid-transaction (the writer holds the lock)."""
    run = _fetch_run(conn, run_id, writer_alive=True)
    assert run is not None, f"run {run_id} is not in the store its writer is writing"
    return run


def sample_chunks(
    conn: sqlite3.Connection, run: RunRecord, chunk_rows: int = 50_000
) -> Iterator[list[tuple]]:
    """The run's sample rows (SAMPLE_COLUMN_NAMES order) in recording order, a chunk at a time."""
    if run.first_sample_id is None:
        return
    cursor = conn.execute(
        f"SELECT {', '.join(SAMPLE_COLUMN_NAMES)} FROM samples "
        "WHERE sample_id BETWEEN ? AND ? ORDER BY sample_id",
        (run.first_sample_id, run.last_sample_id),
    )
    while chunk := cursor.fetchmany(chunk_rows):
        yield chunk


def run_events(conn: sqlite3.Connection, run_id: int) -> list[tuple[int, str, str, str]]:
    """The run's events as (t_host_ns, kind, source, data_json), in recording order."""
    return conn.execute(
        "SELECT t_host_ns, kind, source, data_json FROM events WHERE run_id = ? ORDER BY event_id",
        (run_id,),
    ).fetchall()
