"""Two unattended sessions started at once in one folder, on one rig config, both recorded.

Each is a real `python -m daemon.cli session --sim` process with the demo rig's
config copied into a temporary folder; its ``recording.db_path`` is relative to
that folder, so both record into the same run store.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

from daemon.recording.store import list_runs, open_for_reading, sample_chunks

REPO = Path(__file__).resolve().parents[1]


def test_two_sessions_started_at_once_with_one_config_both_complete_and_are_both_recorded(
    tmp_path,
):
    shutil.copy(REPO / "configs" / "kestrel-1.toml", tmp_path / "rig.toml")
    sessions = [
        subprocess.Popen(
            [sys.executable, "-m", "daemon.cli", "session", "--sim", "--duration", "2",
             "--seed", str(seed), "--config", "rig.toml", "--json"],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=tmp_path,
        )
        for seed in (1, 2)
    ]
    finished = [session.communicate(timeout=300) for session in sessions]
    for session, (out, err) in zip(sessions, finished):
        assert session.returncode == 0, err[-2000:]
    sockets = [re.search(r"control API on (\S+)", err).group(1) for _out, err in finished]
    assert sockets[0] != sockets[1]
    summaries = [json.loads(out) for out, _err in finished]
    store = tmp_path / "kestrel-1-runs.db"
    assert [Path(summary["recording"]) for summary in summaries] == [store, store]
    assert [summary["outcome"] for summary in summaries] == ["balanced", "balanced"]

    conn = open_for_reading(store)
    try:
        runs = {run.run_id: run for run in list_runs(conn, store)}
        assert sorted(runs) == sorted(summary["run_id"] for summary in summaries) == [1, 2]
        for summary in summaries:
            run = runs[summary["run_id"]]
            rows = [row for chunk in sample_chunks(conn, run) for row in chunk]
            assert run.outcome == "balanced"
            assert len(rows) == run.samples_written == summary["samples_recorded"] > 1000
    finally:
        conn.close()
