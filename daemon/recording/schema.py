"""Layout of the run store (one SQLite file per rig) and the steps that bring a file up to date.

The schema version lives in ``PRAGMA user_version`` and the file is marked as a
Poise run store by ``PRAGMA application_id``. ``MIGRATIONS[v]`` takes a store
from version ``v`` to ``v + 1``; version 0 is an empty file. A file written by a
newer Poise (higher version) or by another program is refused with one line.

Several processes may record into one file at once (daemon/recording/writer_files.py),
so the samples of runs recorded at the same time interleave in ``sample_id``:
each writer's transaction appends a block of consecutive ids, and the blocks
of two writers alternate. ``runs.first_sample_id`` and ``runs.last_sample_id``
are the run's own first and last samples, and every sample of the run lies
between them, but so may samples of other runs. Reading a run is therefore a
primary-key range scan over that span filtered on ``run_id``
(``WHERE sample_id BETWEEN ? AND ? AND run_id = ?``): it reads the rows of the
runs recorded beside it and no others, and inserting needs no secondary index,
which would cost every sample. A run recorded alone is still one contiguous
range, and ad-hoc SQL (``WHERE run_id = 3``) works with any SQLite tool.

``runs.writer_token`` (version 3) names the lock file of the process recording
the run, which is how a reader tells a run being recorded from one whose writer
died; runs stored before version 3 have none.
"""

from __future__ import annotations

import sqlite3
from typing import NamedTuple

from daemon.recording.errors import RecordingError

APPLICATION_ID = 0x506F6973  # ASCII "Pois": marks the file as a Poise run store


class SampleColumn(NamedTuple):
    name: str
    sql_type: str
    meaning: str


# The sample columns of schema version 1, in table order. Frozen: later versions only append.
_SAMPLE_COLUMNS_V1: tuple[SampleColumn, ...] = (
    SampleColumn("seq", "INTEGER", "telemetry header sequence number (wraps at 65536)"),
    SampleColumn("t_device_us", "INTEGER", "device sample time, microseconds"),
    SampleColumn("t_host_ns", "INTEGER", "host receive time, nanoseconds (monotonic clock)"),
    SampleColumn("cart_counts", "INTEGER", "raw cart encoder counts"),
    SampleColumn("pendulum_counts", "INTEGER", "raw pendulum encoder counts"),
    SampleColumn("switches", "INTEGER", "switch flag bits"),
    SampleColumn("faults", "INTEGER", "device fault flag bits"),
    SampleColumn("x_m", "REAL", "estimated cart position from track centre"),
    SampleColumn("v_mps", "REAL", "estimated cart velocity"),
    SampleColumn("theta_rad", "REAL", "estimated pendulum angle, 0 upright, CCW positive"),
    SampleColumn("omega_radps", "REAL", "estimated pendulum angular velocity"),
    SampleColumn("drive_requested", "REAL", "drive computed by the controller"),
    SampleColumn("drive_sent", "REAL", "drive sent after interlocks"),
    SampleColumn("mode", "INTEGER", "supervisor mode code (runs.mode_names_json names it)"),
    SampleColumn("latency_us", "REAL", "host latency, frame in to command out"),
)
# Appended by schema version 2 (NULL in samples recorded before it).
_SAMPLE_COLUMNS_V2: tuple[SampleColumn, ...] = (
    SampleColumn("setpoint_m", "REAL", "cart set-point in force for this sample"),
    SampleColumn("drive_applied", "REAL", "drive the device reports it applied (Telemetry)"),
)

# Order of the sample row tuple handed to Recorder.put_sample (and of the table columns
# after sample_id and run_id). Drive values are volts or newtons per runs.drive_kind.
SAMPLE_COLUMNS: tuple[SampleColumn, ...] = _SAMPLE_COLUMNS_V1 + _SAMPLE_COLUMNS_V2
SAMPLE_COLUMN_NAMES: tuple[str, ...] = tuple(column.name for column in SAMPLE_COLUMNS)
MODE_INDEX = SAMPLE_COLUMN_NAMES.index("mode")
T_HOST_INDEX = SAMPLE_COLUMN_NAMES.index("t_host_ns")

_SAMPLE_COLUMNS_DDL = ",\n    ".join(f"{c.name} {c.sql_type}" for c in _SAMPLE_COLUMNS_V1)

_SCHEMA_V1 = f"""
CREATE TABLE runs (
    run_id INTEGER PRIMARY KEY,
    rig_id TEXT NOT NULL,
    started_unix_ns INTEGER NOT NULL,
    started_host_ns INTEGER NOT NULL,
    ended_unix_ns INTEGER,
    outcome TEXT,
    summary_json TEXT,
    config_text TEXT NOT NULL,
    config_format TEXT NOT NULL,
    software_version TEXT NOT NULL,
    protocol_version TEXT NOT NULL,
    firmware_version TEXT NOT NULL,
    operator_notes TEXT NOT NULL,
    drive_kind TEXT NOT NULL,
    mode_names_json TEXT NOT NULL,
    modes_seen_json TEXT NOT NULL DEFAULT '[]',
    first_sample_id INTEGER,
    last_sample_id INTEGER,
    last_sample_host_ns INTEGER,
    samples_written INTEGER NOT NULL DEFAULT 0,
    samples_dropped INTEGER NOT NULL DEFAULT 0,
    events_written INTEGER NOT NULL DEFAULT 0,
    events_dropped INTEGER NOT NULL DEFAULT 0
);
CREATE TABLE samples (
    sample_id INTEGER PRIMARY KEY,
    run_id INTEGER NOT NULL REFERENCES runs(run_id),
    {_SAMPLE_COLUMNS_DDL}
);
CREATE TABLE events (
    event_id INTEGER PRIMARY KEY,
    run_id INTEGER REFERENCES runs(run_id),
    t_host_ns INTEGER NOT NULL,
    kind TEXT NOT NULL,
    source TEXT NOT NULL,
    data_json TEXT NOT NULL
);
CREATE INDEX events_by_run ON events(run_id, event_id);
"""


class Migration(NamedTuple):
    from_version: int
    description: str
    sql: str


_SCHEMA_V2 = "\n".join(
    f"ALTER TABLE samples ADD COLUMN {c.name} {c.sql_type};" for c in _SAMPLE_COLUMNS_V2
)

_SCHEMA_V3 = "ALTER TABLE runs ADD COLUMN writer_token TEXT;"

MIGRATIONS: tuple[Migration, ...] = (
    Migration(0, "create runs, samples and events", _SCHEMA_V1),
    Migration(1, "samples: add setpoint_m and drive_applied", _SCHEMA_V2),
    Migration(2, "runs: add writer_token (several writers per store)", _SCHEMA_V3),
)
SCHEMA_VERSION = len(MIGRATIONS)


def _user_tables(conn: sqlite3.Connection) -> list[str]:
    rows = conn.execute(
        "SELECT name FROM sqlite_schema WHERE type = 'table' AND name NOT LIKE 'sqlite_%' ORDER BY name"
    ).fetchall()
    return [name for (name,) in rows]


def check_version(conn: sqlite3.Connection, path: str) -> int:
    """The file's schema version, or RecordingError if it is not a store this Poise can use."""
    try:
        application_id = conn.execute("PRAGMA application_id").fetchone()[0]
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        tables = _user_tables(conn)
    except sqlite3.DatabaseError as exc:
        raise RecordingError(f"run store {path}: cannot read it as SQLite: {exc}") from None
    if version == 0 and not tables and application_id == 0:
        return 0
    if application_id != APPLICATION_ID:
        raise RecordingError(
            f"run store {path}: not a Poise run store (application_id {application_id:#x}, "
            f"tables: {', '.join(tables) or 'none'}); choose another recording.db_path"
        )
    if version > SCHEMA_VERSION:
        raise RecordingError(
            f"run store {path}: schema version {version} is newer than this Poise reads "
            f"(up to {SCHEMA_VERSION}); upgrade Poise"
        )
    if version < 1:
        raise RecordingError(
            f"run store {path}: marked as a Poise run store but its schema version is {version}; "
            "no migration exists from it"
        )
    return version


def migrate(conn: sqlite3.Connection, path: str) -> int:
    """Bring the store up to SCHEMA_VERSION, one transaction per step; returns the version found.

    ``conn`` must be in autocommit mode (``isolation_level=None``). Writers call it
    one at a time (``RunIds.setup`` in daemon/recording/writer_files.py), so no two
    processes migrate at once.
    """
    found = check_version(conn, path)
    for step in MIGRATIONS[found:]:
        target = step.from_version + 1
        try:
            conn.executescript(
                f"BEGIN IMMEDIATE;\n{step.sql}\n"
                f"PRAGMA application_id = {APPLICATION_ID};\n"
                f"PRAGMA user_version = {target};\nCOMMIT;"
            )
        except sqlite3.Error as exc:
            if conn.in_transaction:
                conn.rollback()
            raise RecordingError(
                f"run store {path}: migration to schema version {target} "
                f"({step.description}) failed: {exc}"
            ) from None
    return found
