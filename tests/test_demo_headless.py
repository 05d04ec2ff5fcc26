"""`poise demo --headless`: the scripted session of `poise session --sim`, with its summary printed."""

from __future__ import annotations

from test_daemon_support import write_rig_config

from daemon.cli import main
from daemon.recording.store import get_run, open_for_reading


def test_headless_demo_runs_the_scripted_session_and_prints_its_summary(tmp_path, capsys):
    config = write_rig_config(tmp_path)
    assert main(["demo", "--headless", "--config", str(config)]) == 0
    out = capsys.readouterr().out
    assert "session: balanced" in out
    assert "trips" in out and "none" in out
    conn = open_for_reading(str(tmp_path / "runs.db"))  # the session recorded its run
    try:
        run = get_run(conn, 1, str(tmp_path / "runs.db"))
    finally:
        conn.close()
    assert run.outcome == "balanced"
    assert run.samples_written > 0
