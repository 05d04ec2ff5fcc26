"""What every whole session must show, whichever rig it ran against: balanced, no trip, every sample recorded."""

from __future__ import annotations

from daemon.recording.store import get_run, open_for_reading


def assert_balanced_with_every_sample_recorded(summary: dict, balance_s: float) -> None:
    """``poise session --json``'s summary: it balanced ``balance_s`` with no trip, and the run in the
    store holds every sample the rig sent (answered or not), none dropped."""
    assert summary["outcome"] == "balanced", (summary["outcome"], summary["detail"], summary["trips"])
    assert summary["trips"] == []
    assert summary["balance_s"] >= balance_s
    assert summary["samples"] > 0
    assert summary["samples_recorded"] == summary["samples"] + summary["samples_unanswered"]
    assert summary["dropped_samples"] == 0
    conn = open_for_reading(summary["recording"])
    try:
        run = get_run(conn, summary["run_id"], summary["recording"])
        (stored,) = conn.execute(
            "SELECT count(*) FROM samples WHERE run_id = ?", (summary["run_id"],)
        ).fetchone()
    finally:
        conn.close()
    assert run.outcome == "balanced"
    assert stored == run.samples_written == summary["samples_recorded"]
