"""`poise runs` and `poise export`: listing, and exports that other tools read back unchanged.

The reference readers are pandas.read_csv, scipy.io.loadmat, numpy.load and
pyarrow.parquet: whatever they read must equal the rows in the store.
"""

from __future__ import annotations

import json
import re
import sqlite3
import sys
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from scipy.io import loadmat
from test_recording_store import MODES, metadata, sample_row

from daemon.cli import main
from daemon.recording import SAMPLE_COLUMN_NAMES, Recorder
from daemon.recording.export import export_column_names

REPO = Path(__file__).resolve().parents[1]
UNITS_NAMES = [
    "seq", "t_device_us", "t_host_ns", "cart_counts", "pendulum_counts", "switches", "faults",
    "x_m", "v_mps", "theta_rad", "omega_radps", "drive_requested_v", "drive_sent_v", "mode",
    "latency_us", "setpoint_m", "drive_applied_v",
]  # fmt: skip
RUN_SAMPLES = 3000


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    """A store with one finished run (with events and a missing latency) and one empty run."""
    db = tmp_path_factory.mktemp("store") / "runs.db"
    with Recorder(db) as recorder:
        recorder.start_run(metadata(notes="export check"))
        for i in range(RUN_SAMPLES):
            row = sample_row(i)
            recorder.put_sample(row[:14] + (None,) + row[15:] if i == 7 else row)
            if i == 1500:
                recorder.put_event("mode", "supervisor", {"from": "HOMING", "to": "SWING_UP"})
        recorder.put_event("operator", "api", {"command": "stop", "client": "cli"})
        recorder.end_run("completed", {"note": "ok"})
        recorder.start_run(metadata())
        recorder.end_run("stopped")
    return db


def stored(db) -> dict[str, np.ndarray]:
    """The run's samples as float64 columns, straight from SQLite (NULL -> NaN)."""
    conn = sqlite3.connect(db)
    rows = conn.execute(
        f"SELECT {', '.join(SAMPLE_COLUMN_NAMES)} FROM samples WHERE run_id = 1 ORDER BY sample_id"
    ).fetchall()
    conn.close()
    table = np.array(rows, dtype=np.float64)
    return {name: table[:, k] for k, name in enumerate(UNITS_NAMES)}


def test_column_names_carry_units_and_the_drive_unit_of_the_rig():
    assert export_column_names("voltage") == UNITS_NAMES
    force = export_column_names("force")
    drive_columns = [force[11], force[12], force[-1]]
    assert drive_columns == ["drive_requested_n", "drive_sent_n", "drive_applied_n"]


def test_runs_json_lists_every_run(store, capsys):
    assert main(["runs", "--db", str(store), "--json"]) == 0
    runs = json.loads(capsys.readouterr().out)
    assert [(r["run_id"], r["outcome"], r["samples"], r["drops"]) for r in runs] == [
        (1, "completed", RUN_SAMPLES, 0),
        (2, "stopped", 0, 0),
    ]
    assert runs[0]["rig_id"] == "kestrel-1" and runs[0]["mode_reached"] == "SWING_UP"
    assert runs[0]["last_mode"] == "SWING_UP"
    assert runs[0]["duration_s"] == (RUN_SAMPLES - 1) * 0.002  # device time, samples 2 ms apart
    assert runs[0]["wall_time_s"] == (runs[0]["ended_unix_ns"] - runs[0]["started_unix_ns"]) / 1e9
    assert runs[1]["mode_reached"] is None and runs[1]["duration_s"] is None


def test_runs_table_names_the_columns(store, capsys):
    assert main(["runs", "--db", str(store)]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"runs of kestrel-1 in {store}")  # one rig: named once
    headings = ("id", "start", "duration", "reached", "ended in", "outcome", "samples", "drops")
    assert all(heading in out for heading in headings)
    assert "SWING_UP" in out and "3,000" in out and "6.0 s" in out  # 3000 samples 2 ms apart


def test_csv_read_back_with_pandas_equals_the_store(store, tmp_path, capsys):
    out = tmp_path / "run1.csv"
    assert main(["export", "1", "--db", str(store), "--format", "csv", "--out", str(out)]) == 0
    assert "csv holds samples only" in capsys.readouterr().err
    frame = pd.read_csv(out)
    assert list(frame.columns) == [*UNITS_NAMES, "mode_name"]
    expected = stored(store)
    assert np.isnan(expected["latency_us"][7])
    for name in UNITS_NAMES:
        np.testing.assert_array_equal(frame[name].to_numpy(dtype=np.float64), expected[name])
    assert frame["t_host_ns"].dtype == np.int64
    assert list(frame["mode_name"]) == [MODES[code] for code in expected["mode"].astype(int)]


def test_mat_read_back_with_scipy_equals_the_store(store, tmp_path):
    out = tmp_path / "run1.mat"
    assert main(["export", "1", "--db", str(store), "--format", "mat", "--out", str(out)]) == 0
    mat = loadmat(out, simplify_cells=True)
    expected = stored(store)
    for name in UNITS_NAMES:
        values = np.asarray(mat["samples"][name], dtype=np.float64)
        np.testing.assert_array_equal(values, expected[name])
    assert mat["samples"]["t_host_ns"].dtype == np.int64
    assert list(mat["events"]["kind"]) == ["mode", "operator"]
    assert json.loads(mat["events"]["data_json"][1]) == {"command": "stop", "client": "cli"}
    assert mat["run"]["rig_id"] == "kestrel-1" and mat["run"]["operator_notes"] == "export check"
    codes = np.atleast_1d(mat["modes"]["code"]).tolist()
    assert dict(zip(codes, mat["modes"]["name"], strict=True)) == MODES


def test_npz_holds_samples_events_and_the_run_record(store, tmp_path):
    out = tmp_path / "run1.npz"
    assert main(["export", "1", "--db", str(store), "--format", "npz", "--out", str(out)]) == 0
    with np.load(out, allow_pickle=False) as npz:
        expected = stored(store)
        for name in UNITS_NAMES:
            np.testing.assert_array_equal(npz[name].astype(np.float64), expected[name])
        assert list(npz["events"]["source"]) == ["supervisor", "api"]
        modes = dict(zip(npz["mode_codes"].tolist(), npz["mode_names"].tolist(), strict=True))
        assert modes == metadata().mode_names
        assert json.loads(str(npz["run_json"]))["samples_written"] == RUN_SAMPLES


def test_parquet_round_trip_with_pyarrow(store, tmp_path):
    out = tmp_path / "run1.parquet"
    assert main(["export", "1", "--db", str(store), "--format", "parquet", "--out", str(out)]) == 0
    table = pq.read_table(out)
    assert table.column_names == [*UNITS_NAMES, "mode_name"]
    expected = stored(store)
    for name in UNITS_NAMES:
        values = table.column(name).to_numpy(zero_copy_only=False)
        np.testing.assert_array_equal(values.astype(np.float64), expected[name])
    assert table.column("latency_us").null_count == 1  # SQL NULL stays a null
    events = json.loads(table.schema.metadata[b"poise.events"])
    assert [event["kind"] for event in events] == ["mode", "operator"]
    modes = pd.read_parquet(out, columns=["mode_name"])["mode_name"]
    assert isinstance(modes.dtype, pd.CategoricalDtype)  # a dictionary column
    assert list(modes) == [MODES[code] for code in expected["mode"].astype(int)]


def test_parquet_without_pyarrow_is_one_line_naming_the_extra_to_install(
    store, tmp_path, monkeypatch, capsys
):
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # as if pyarrow were not installed
    out = tmp_path / "run1.parquet"
    assert main(["export", "1", "--db", str(store), "--format", "parquet", "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "needs pyarrow, which is not installed" in err
    assert "pip install 'poise[parquet]'" in err
    assert not out.exists()


def test_pyarrow_comes_with_the_parquet_and_test_extras_not_the_plain_install():
    project = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]
    requirement_names = {
        group: {re.split(r"[<>=\[ ]", req)[0] for req in reqs}
        for group, reqs in [("install", project["dependencies"]),
                            *project["optional-dependencies"].items()]
    }  # fmt: skip
    assert "pyarrow" not in requirement_names["install"]  # README: pip install -e .
    assert "pyarrow" in requirement_names["parquet"] and "pyarrow" in requirement_names["test"]
    assert "pandas" not in requirement_names["parquet"]  # only the tests read with pandas


def test_export_help_lists_each_format_with_what_it_needs(capsys):
    with pytest.raises(SystemExit):
        main(["export", "--help"])
    help_text = capsys.readouterr().out
    listed = help_text.split("formats:\n", 1)[1].splitlines()
    names = [line.split()[0] for line in listed[0::2]]
    assert names == ["csv", "mat", "npz", "parquet"]
    needs = [line.strip() for line in listed[1::2]]
    assert needs[:3] == ["needs: nothing beyond Poise itself"] * 3
    assert needs[3] == "needs: pyarrow, from the parquet extra: pip install 'poise[parquet]'"


def test_unknown_run_names_the_run_and_the_store(store, tmp_path, capsys):
    out = tmp_path / "x.csv"
    assert main(["export", "42", "--db", str(store), "--format", "csv", "--out", str(out)]) == 2
    assert capsys.readouterr().err == f"poise: run 42: no such run in run store {store}\n"


def test_missing_store_from_the_config_is_one_line(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["runs"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "kestrel-1-runs.db: no such file (recording.db_path in" in err


def test_empty_run_exports_empty_columns(store, tmp_path):
    out = tmp_path / "run2.npz"
    assert main(["export", "2", "--db", str(store), "--format", "npz", "--out", str(out)]) == 0
    with np.load(out) as npz:
        assert npz["x_m"].shape == (0,) and npz["events"].shape == (0,)


def test_runs_tells_a_run_being_recorded_from_one_left_unfinished(tmp_path, capsys):
    db = tmp_path / "live.db"
    with Recorder(db) as recorder:
        recorder.start_run(metadata())
        recorder.put_event("link", "link", {"state": "up"})
        recorder.put_sample(sample_row(0))
        assert recorder.flush()
        assert main(["runs", "--db", str(db), "--json"]) == 0
        (live,) = json.loads(capsys.readouterr().out)
        assert (live["outcome"], live["samples"]) == ("recording", 1)
