"""Opening the run store for writing (by any number of processes at once) or reading, and
reading runs back.

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

Several writers: each writer process holds a lock of its own and stores its
token in every run it starts; run ids come from a file beside the store that
hands out each id once (daemon/recording/writer_files.py says how, and what the
edge cases are). SQLite lets one transaction write at a time: a writer that
finds another's transaction in progress waits for its commit inside SQLite's
busy handler (``busy_timeout_s``, on the writer's own thread), and the WAL
lets readers go on meanwhile.

Telling a crashed run from one being written: a run whose ``outcome`` is still
NULL is either being recorded now or was left open by a writer that died
(``kill -9``, a crash, a power cut). Readers (:func:`list_runs`, :func:`get_run`)
ask, for each open run, whether its writer's lock is held
(:func:`daemon.recording.writer_files.writer_alive`). If it is, the run is shown as
being recorded, outcome None. If not, the writer is gone for good, and the
row is read once more (the writer may have ended the run just before it
exited): a run still open then is one whose writer died. It is shown as
``aborted``, ending at its last committed sample, exactly as the next writer to
start will mark it in the file (:func:`recover_unfinished_runs`;
``RunRecord.writer_died`` says it is not marked yet). A starting writer marks
only the runs whose writers are dead, so runs of writers still recording are
left alone.
"""

from __future__ import annotations

import dataclasses
import json
import os
import sqlite3
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import quote

from daemon.recording.errors import RecordingError
from daemon.recording.modes import most_advanced
from daemon.recording.schema import SAMPLE_COLUMN_NAMES, SCHEMA_VERSION, check_version, migrate
from daemon.recording.summary import run_summary
from daemon.recording.writer_files import writer_alive

ABORTED = "aborted"  # outcome of a run whose writer ended without closing it
WRITE_FAILED = "write_failed"  # outcome of a run cut short because the store could not be written
FAILURE_RESERVE_BYTES = 64 * 1024
"""Kept free under a size cap (recording.max_db_mb) to store the failure once the cap is hit."""
BUSY_TIMEOUT_S = 5.0
"""How long one wait for another writer's commit may last before SQLite reports the store busy."""


def limit_size(conn: sqlite3.Connection, max_db_bytes: int, *, keep_reserve: bool) -> None:
    """Cap the store at ``max_db_bytes``, less FAILURE_RESERVE_BYTES while ``keep_reserve``.

    SQLite then refuses a write that would grow the file beyond the cap with
    SQLITE_FULL, exactly as for a full disk (sqlite.org/pragma.html#pragma_max_page_count).
    """
    page_size = conn.execute("PRAGMA page_size").fetchone()[0]
    budget = max_db_bytes - (FAILURE_RESERVE_BYTES if keep_reserve else 0)
    conn.execute(f"PRAGMA max_page_count = {max(1, budget // page_size)}")


def open_for_writing(
    db_path: str | Path, max_db_bytes: int | None = None, busy_timeout_s: float = BUSY_TIMEOUT_S
) -> sqlite3.Connection:
    """Open (creating or migrating) a store; call it inside ``RunIds.setup()`` (writer_files.py).

    With ``max_db_bytes`` the store is capped below it by the failure reserve
    (:func:`limit_size`). A statement that finds another writer's transaction
    in progress waits up to ``busy_timeout_s`` for it, then raises
    ``sqlite3.OperationalError`` (SQLITE_BUSY). The connection is in autocommit
    mode (explicit BEGIN/COMMIT) and may be handed to one other thread (the
    writer thread) after set-up.
    """
    path = str(db_path)
    try:
        conn = sqlite3.connect(
            path, timeout=busy_timeout_s, isolation_level=None, check_same_thread=False
        )
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


def recover_unfinished_runs(conn: sqlite3.Connection, db_path: str | Path) -> list[int]:
    """Mark the open runs whose writers are dead as aborted; returns the ids this call marked.

    The end time is the run's last committed sample (start time if none), and
    the run gets its summary (daemon.recording.summary) and a ``run.aborted``
    event. Runs whose writers are alive are left alone. If another process
    marks a run first, the ``outcome IS NULL`` condition leaves it to that one,
    so each dead run gets its event once. ``conn`` is a writer's connection.
    """
    rows = conn.execute(
        "SELECT run_id, writer_token FROM runs WHERE outcome IS NULL ORDER BY run_id"
    ).fetchall()
    marked = []
    for run_id, token in rows:
        if writer_alive(db_path, token):
            continue
        run = _as_aborted(conn, _fetch_run(conn, run_id))  # its writer is dead: nothing changes it
        data = {
            "reason": "the recording process ended without ending the run",
            "samples_committed": run.samples_written,
            "marked_by_pid": os.getpid(),
        }
        elapsed_ns = run.ended_unix_ns - run.started_unix_ns
        conn.execute("BEGIN IMMEDIATE")
        try:
            updated = conn.execute(
                "UPDATE runs SET outcome = ?, ended_unix_ns = ?, summary_json = ? "
                "WHERE run_id = ? AND outcome IS NULL",
                (run.outcome, run.ended_unix_ns, json.dumps(run.summary), run_id),
            ).rowcount
            if updated:
                conn.execute(
                    "INSERT INTO events (run_id, t_host_ns, kind, source, data_json) "
                    "VALUES (?, ?, ?, ?, ?)",
                    (run_id, run.started_host_ns + elapsed_ns, "run.aborted", "recorder",
                     json.dumps(data)),
                )  # fmt: skip
            conn.execute("COMMIT")
        except BaseException:
            conn.rollback()
            raise
        if updated:
            marked.append(run_id)
    return marked


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
    writer_token: str | None
    """Names the lock of the process recording the run (None for runs of schema version 2)."""
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
    "samples_dropped", "events_written", "events_dropped", "writer_token",
)  # fmt: skip
# The first and last samples are found by primary key, so this costs two lookups per run.
_SELECT_RUNS = (
    f"SELECT {', '.join(f'r.{name}' for name in _RUN_FIELDS)}, "
    "first_sample.t_device_us, last_sample.t_device_us, last_sample.mode FROM runs AS r "
    "LEFT JOIN samples AS first_sample ON first_sample.sample_id = r.first_sample_id "
    "LEFT JOIN samples AS last_sample ON last_sample.sample_id = r.last_sample_id"
)


def _run_record(row: tuple) -> RunRecord:
    values = list(row)
    values[6] = None if row[6] is None else json.loads(row[6])
    values[14] = {int(code): name for code, name in json.loads(row[14])}
    values[15] = json.loads(row[15])
    return RunRecord(*values)


def _as_aborted(conn: sqlite3.Connection, run: RunRecord) -> RunRecord:
    """An open run whose writer died, as the next writer will mark it (recover_unfinished_runs)."""
    elapsed_ns = _elapsed_to_last_sample_ns(run.started_host_ns, run.last_sample_host_ns)
    run = dataclasses.replace(
        run, outcome=ABORTED, ended_unix_ns=run.started_unix_ns + elapsed_ns, writer_died=True
    )
    return dataclasses.replace(run, summary=run_summary(conn, run))


def _fetch_run(conn: sqlite3.Connection, run_id: int) -> RunRecord | None:
    """The run as stored (an open run stays open: see _as_read)."""
    row = conn.execute(f"{_SELECT_RUNS} WHERE r.run_id = ?", (run_id,)).fetchone()
    return None if row is None else _run_record(row)


def _as_read(conn: sqlite3.Connection, run: RunRecord, db_path: str | Path) -> RunRecord:
    """The run as a reader shows it: an open run whose writer is dead as aborted."""
    if run.outcome is not None or writer_alive(db_path, run.writer_token):
        return run
    # The writer is gone for good, but it may have ended the run after the row was read.
    again = _fetch_run(conn, run.run_id)
    assert again is not None, f"run {run.run_id} left the store {db_path}"
    return again if again.outcome is not None else _as_aborted(conn, again)


def list_runs(conn: sqlite3.Connection, db_path: str | Path) -> list[RunRecord]:
    """Every run in the store at ``db_path`` (``conn`` opened on it), in order of run id."""
    rows = conn.execute(f"{_SELECT_RUNS} ORDER BY r.run_id").fetchall()
    return [_as_read(conn, _run_record(row), db_path) for row in rows]


def get_run(conn: sqlite3.Connection, run_id: int, db_path: str | Path) -> RunRecord:
    run = _fetch_run(conn, run_id)
    if run is None:
        raise RecordingError(f"run {run_id}: no such run in run store {db_path}")
    return _as_read(conn, run, db_path)


def written_run(conn: sqlite3.Connection, run_id: int) -> RunRecord:
    """The run as its writer's connection sees it, mid-transaction."""
    run = _fetch_run(conn, run_id)
    assert run is not None, f"run {run_id} is not in the store its writer is writing"
    return run


def sample_chunks(
    conn: sqlite3.Connection, run: RunRecord, chunk_rows: int = 50_000
) -> Iterator[list[tuple]]:
    """The run's sample rows (SAMPLE_COLUMN_NAMES order) in recording order, a chunk at a time.

    A primary-key range scan over the run's span, filtered on ``run_id``: runs
    recorded at the same time interleave there (see daemon/recording/schema.py).
    """
    if run.first_sample_id is None:
        return
    cursor = conn.execute(
        f"SELECT {', '.join(SAMPLE_COLUMN_NAMES)} FROM samples "
        "WHERE sample_id BETWEEN ? AND ? AND run_id = ? ORDER BY sample_id",
        (run.first_sample_id, run.last_sample_id, run.run_id),
    )
    while chunk := cursor.fetchmany(chunk_rows):
        yield chunk


def run_events(conn: sqlite3.Connection, run_id: int) -> list[tuple[int, str, str, str]]:
    """The run's events as (t_host_ns, kind, source, data_json), in recording order."""
    return conn.execute(
        "SELECT t_host_ns, kind, source, data_json FROM events WHERE run_id = ? ORDER BY event_id",
        (run_id,),
    ).fetchall()
