"""Where the run store is: recording.db_path from a config file is taken from that file's folder.

Every command that opens the store (run, runs, export, session) gets the path
from the loaded config, so it finds the same file whatever the working directory.
"""

from __future__ import annotations

import json
import os

from test_daemon_support import KESTREL, rig_config_text
from test_recording_store import metadata, sample_row

from daemon.cli import main
from daemon.config import demo_config_path, load_config, parse_config
from daemon.recording import Recorder


def rig_folder(tmp_path, db_path: str = "k1-runs.db"):
    """``tmp_path/cfg/k1.toml`` naming a relative run store, and an empty ``tmp_path/work``."""
    moved = f'db_path = "{tmp_path / "runs.db"}"'
    text = rig_config_text(tmp_path).replace(moved, f'db_path = "{db_path}"')
    (tmp_path / "cfg").mkdir()
    (tmp_path / "cfg" / "k1.toml").write_text(text)
    (tmp_path / "work").mkdir()
    return tmp_path / "cfg" / "k1.toml", tmp_path / "work"


def test_relative_db_path_in_a_config_file_is_from_the_file_s_folder(tmp_path, monkeypatch):
    config_file, work = rig_folder(tmp_path)
    monkeypatch.chdir(work)
    assert load_config("../cfg/k1.toml").recording.db_path == str(tmp_path / "cfg" / "k1-runs.db")
    config_file.write_text(config_file.read_text().replace('"k1-runs.db"', '"stores/k1.db"'))
    assert load_config(config_file).recording.db_path == str(tmp_path / "cfg" / "stores" / "k1.db")


def test_absolute_and_home_db_paths_are_kept(tmp_path, monkeypatch):
    config_file, _work = rig_folder(tmp_path, db_path=str(tmp_path / "elsewhere.db"))
    assert load_config(config_file).recording.db_path == str(tmp_path / "elsewhere.db")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    text = config_file.read_text()
    config_file.write_text(text.replace(str(tmp_path / "elsewhere.db"), "~/k1.db"))
    assert load_config(config_file).recording.db_path == str(tmp_path / "home" / "k1.db")


def test_config_text_and_the_built_in_demo_rig_keep_the_working_directory():
    text = KESTREL.read_text()
    assert parse_config(text).recording.db_path == "kestrel-1-runs.db"
    assert load_config(demo_config_path()).recording.db_path == "kestrel-1-runs.db"


def test_runs_and_export_find_the_store_of_a_config_in_another_folder(
    tmp_path, monkeypatch, capsys
):
    config_file, work = rig_folder(tmp_path)
    with Recorder(config_file.parent / "k1-runs.db") as recorder:
        recorder.start_run(metadata())
        for i in range(10):
            recorder.put_sample(sample_row(i))
        recorder.end_run("completed")
    monkeypatch.chdir(work)
    assert main(["runs", "--config", "../cfg/k1.toml", "--json"]) == 0
    (listed,) = json.loads(capsys.readouterr().out)
    assert listed["samples"] == 10
    exported = ["export", "1", "--config", "../cfg/k1.toml", "--format", "csv", "--out", "r.csv"]
    assert main(exported) == 0
    assert len((work / "r.csv").read_text().splitlines()) == 1 + 10
    assert not (work / "k1-runs.db").exists()


def test_session_records_into_and_summarises_the_store_next_to_its_config(
    tmp_path, monkeypatch, capsys
):
    _config_file, work = rig_folder(tmp_path)
    monkeypatch.chdir(work)
    main(["session", "--config", "../cfg/k1.toml", "--sim", "--duration", "0.5", "--json"])
    summary = json.loads(capsys.readouterr().out)
    assert summary["recording"] == str(tmp_path / "cfg" / "k1-runs.db")
    assert (tmp_path / "cfg" / "k1-runs.db").is_file() and os.listdir(work) == []
