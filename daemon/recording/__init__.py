"""The run store: every sample, event and config snapshot of a run, in one SQLite file per rig.

``Recorder`` (writer.py) is what the daemon uses while running, and any number
of processes may record into one store at once (``writer_files`` holds the lock and
run-id files that allow it); ``store`` reads runs back; ``export`` writes one
run to CSV, MAT, NPZ or Parquet.
"""

from daemon.recording.errors import RecordingError
from daemon.recording.schema import SAMPLE_COLUMN_NAMES, SCHEMA_VERSION
from daemon.recording.store import ABORTED, WRITE_FAILED, RunRecord
from daemon.recording.writer import Recorder, RecorderStats, RunMetadata

__all__ = [
    "ABORTED",
    "SAMPLE_COLUMN_NAMES",
    "SCHEMA_VERSION",
    "WRITE_FAILED",
    "Recorder",
    "RecorderStats",
    "RecordingError",
    "RunMetadata",
    "RunRecord",
]
