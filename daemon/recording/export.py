"""Write one recorded run to a file other tools read: CSV, MAT (scipy.io.savemat), NPZ or Parquet.

Column names carry units (``t_device_us``, ``x_m``, ``theta_rad``; the drive
columns end in ``_v`` or ``_n`` per the rig's drive kind). ``mode`` holds the
supervisor's mode codes; every format also says which name each code stands for.
What each format holds:

- ``csv``: the samples only, one header line, no comments (events need another
  format), and a last column ``mode_name`` beside the codes.
- ``npz``: one array per sample column, a structured ``events`` array
  (t_host_ns, kind, source, data_json), the mode table ``mode_codes``/``mode_names``
  and ``run_json``.
- ``mat``: structs ``samples`` (a column vector per field), ``events`` (t_host_ns
  vector, cell arrays kind/source/data_json), ``modes`` (the mode table: ``code``
  vector, ``name`` cell array) and ``run`` (the run record).
- ``parquet``: the samples table with a last column ``mode_name``, dictionary
  encoded (pandas reads it as a categorical); the run record and the events are
  JSON in the file's key-value metadata under ``poise.run`` and ``poise.events``.

Integer columns are int64 and real columns float64. A missing value (SQL NULL)
becomes NaN, and an integer column holding one becomes float64.
"""

from __future__ import annotations

import csv
import json
from collections.abc import Callable
from pathlib import Path

import numpy as np

from daemon.errors import OperatorError
from daemon.recording.formats import FORMATS, PARQUET_EXTRA, PARQUET_INSTALL
from daemon.recording.schema import MODE_INDEX, SAMPLE_COLUMNS
from daemon.recording.store import RunRecord, run_events, sample_chunks

DRIVE_UNIT_SUFFIX = {"voltage": "v", "force": "n"}

Progress = Callable[[int], None]
"""Called with the number of samples exported so far."""


MODE_NAME_COLUMN = "mode_name"


def export_column_names(drive_kind: str) -> list[str]:
    """Sample column names with units, as they appear in every export format."""
    suffix = DRIVE_UNIT_SUFFIX.get(drive_kind)
    names = []
    for column in SAMPLE_COLUMNS:
        is_drive = column.name.startswith("drive_")
        names.append(f"{column.name}_{suffix}" if is_drive and suffix else column.name)
    return names


def default_out_path(run: RunRecord, fmt: str) -> Path:
    return Path(f"{run.rig_id}-run{run.run_id}.{fmt}")


def run_info(run: RunRecord) -> dict:
    """The run record as plain JSON-able values (what the exports carry besides samples)."""
    return {
        "run_id": run.run_id,
        "rig_id": run.rig_id,
        "started_unix_ns": run.started_unix_ns,
        "ended_unix_ns": run.ended_unix_ns,
        "outcome": run.outcome,
        "summary": run.summary,
        "software_version": run.software_version,
        "protocol_version": run.protocol_version,
        "firmware_version": run.firmware_version,
        "operator_notes": run.operator_notes,
        "drive_kind": run.drive_kind,
        "mode_names": {str(code): name for code, name in run.mode_names.items()},
        "mode_reached": run.mode_reached,
        "last_mode": run.last_mode,
        "first_t_device_us": run.first_t_device_us,
        "last_t_device_us": run.last_t_device_us,
        "sample_time_s": run.sample_time_s,
        "samples_written": run.samples_written,
        "samples_dropped": run.samples_dropped,
        "events_written": run.events_written,
        "events_dropped": run.events_dropped,
        "config_format": run.config_format,
        "config_text": run.config_text,
    }


def export_run(conn, run: RunRecord, fmt: str, out: Path, progress: Progress | None = None) -> int:
    """Write ``run`` to ``out`` in ``fmt``; returns the number of samples written."""
    writers = {"csv": _write_csv, "npz": _write_npz, "mat": _write_mat, "parquet": _write_parquet}
    if fmt not in writers:
        raise OperatorError(f"export --format: {fmt!r} is not one of {', '.join(FORMATS)}")
    if fmt == "parquet":
        _check_pyarrow()
    try:
        return writers[fmt](conn, run, out, progress or (lambda done: None))
    except OSError as exc:
        raise OperatorError(f"export: cannot write {out}: {exc.strerror or exc}") from None


def _mode_labels(run: RunRecord) -> dict[int, str]:
    """Code -> name of every code in the run's mode table or its samples ("mode 12" if unnamed)."""
    labels = dict(run.mode_names)
    for code in sorted(set(run.modes_seen) - labels.keys()):
        labels[code] = f"mode {code}"
    return labels


def _write_csv(conn, run: RunRecord, out: Path, progress: Progress) -> int:
    done = 0
    with out.open("w", newline="", encoding="utf-8") as stream:
        writer = csv.writer(stream)
        writer.writerow([*export_column_names(run.drive_kind), MODE_NAME_COLUMN])
        label = _mode_labels(run).get
        for chunk in sample_chunks(conn, run):
            writer.writerows(row + (label(row[MODE_INDEX], ""),) for row in chunk)
            done += len(chunk)
            progress(done)
    return done


def _column_array(values: tuple, sql_type: str) -> np.ndarray:
    if sql_type == "INTEGER":
        try:
            return np.array(values, dtype=np.int64)
        except TypeError:  # a NULL among the integers
            pass
    return np.array(values, dtype=np.float64)


def _sample_arrays(conn, run: RunRecord, progress: Progress) -> dict[str, np.ndarray]:
    names = export_column_names(run.drive_kind)
    parts: list[list[np.ndarray]] = [[] for _ in names]
    done = 0
    for chunk in sample_chunks(conn, run):
        for part, column, values in zip(parts, SAMPLE_COLUMNS, zip(*chunk), strict=True):
            part.append(_column_array(values, column.sql_type))
        done += len(chunk)
        progress(done)
    arrays = {}
    for name, part, column in zip(names, parts, SAMPLE_COLUMNS, strict=True):
        empty_dtype = np.int64 if column.sql_type == "INTEGER" else np.float64
        arrays[name] = np.concatenate(part) if part else np.zeros(0, dtype=empty_dtype)
    return arrays


def _events_table(conn, run: RunRecord) -> np.ndarray:
    events = run_events(conn, run.run_id)
    width = max([1] + [max(len(kind), len(source), len(data)) for _, kind, source, data in events])
    dtype = [
        ("t_host_ns", np.int64),
        ("kind", f"U{width}"),
        ("source", f"U{width}"),
        ("data_json", f"U{width}"),
    ]
    return np.array(events, dtype=dtype)


def _write_npz(conn, run: RunRecord, out: Path, progress: Progress) -> int:
    arrays = _sample_arrays(conn, run, progress)
    with out.open("wb") as stream:
        np.savez(
            stream,
            **arrays,
            events=_events_table(conn, run),
            mode_codes=np.array(list(run.mode_names), dtype=np.int64),
            mode_names=np.array(list(run.mode_names.values()), dtype=str),
            run_json=np.array(json.dumps(run_info(run))),
        )
    return len(next(iter(arrays.values())))


def _write_mat(conn, run: RunRecord, out: Path, progress: Progress) -> int:
    from scipy.io import savemat

    arrays = _sample_arrays(conn, run, progress)
    events = _events_table(conn, run)
    info = run_info(run)
    info["summary"] = json.dumps(info["summary"])
    info["mode_names"] = json.dumps(info["mode_names"])
    mat_run = {key: ("" if value is None else value) for key, value in info.items()}
    mat_events = {
        "t_host_ns": events["t_host_ns"].reshape(-1, 1),
        "kind": np.array(events["kind"].tolist(), dtype=object).reshape(-1, 1),
        "source": np.array(events["source"].tolist(), dtype=object).reshape(-1, 1),
        "data_json": np.array(events["data_json"].tolist(), dtype=object).reshape(-1, 1),
    }
    mat_modes = {
        "code": np.array(list(run.mode_names), dtype=np.int64).reshape(-1, 1),
        "name": np.array(list(run.mode_names.values()), dtype=object).reshape(-1, 1),
    }
    samples = {name: values.reshape(-1, 1) for name, values in arrays.items()}
    with out.open("wb") as stream:
        savemat(
            stream,
            {"samples": samples, "events": mat_events, "modes": mat_modes, "run": mat_run},
            do_compression=True,
        )
    return len(next(iter(arrays.values())))


def _check_pyarrow() -> None:
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        raise OperatorError(
            f"export --format parquet: needs pyarrow, which is not installed; install Poise's "
            f"{PARQUET_EXTRA} extra ({PARQUET_INSTALL}, or pip install -e '.[{PARQUET_EXTRA}]' "
            "in a checkout); csv, mat and npz need nothing more"
        ) from None


def _write_parquet(conn, run: RunRecord, out: Path, progress: Progress) -> int:
    import pyarrow as pa
    import pyarrow.parquet as pq

    types = {"INTEGER": pa.int64(), "REAL": pa.float64()}
    names = export_column_names(run.drive_kind)
    events = [
        {"t_host_ns": t, "kind": kind, "source": source, "data": json.loads(data)}
        for t, kind, source, data in run_events(conn, run.run_id)
    ]
    labels = _mode_labels(run)  # one dictionary for the whole file
    position = {code: k for k, code in enumerate(labels)}
    mode_dictionary = pa.array(list(labels.values()), type=pa.string())
    sample_types = [types[column.sql_type] for column in SAMPLE_COLUMNS]
    schema = pa.schema(
        [
            *(pa.field(name, kind) for name, kind in zip(names, sample_types, strict=True)),
            pa.field(MODE_NAME_COLUMN, pa.dictionary(pa.int32(), pa.string())),
        ],
        metadata={"poise.run": json.dumps(run_info(run)), "poise.events": json.dumps(events)},
    )
    done = 0
    with pq.ParquetWriter(out, schema) as writer:
        for chunk in sample_chunks(conn, run):
            values = list(zip(*chunk))
            mode_names = pa.DictionaryArray.from_arrays(
                pa.array([position.get(code) for code in values[MODE_INDEX]], type=pa.int32()),
                mode_dictionary,
            )
            columns = [
                pa.array(column, type=kind)
                for column, kind in zip(values, sample_types, strict=True)
            ]
            columns.append(mode_names)
            writer.write_batch(pa.record_batch(columns, schema=schema))
            done += len(chunk)
            progress(done)
    return done
