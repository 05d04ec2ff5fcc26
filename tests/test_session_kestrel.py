"""Whole sessions on the demo rig (Kestrel-1) over a real pty, the simulated rig in lockstep."""

from __future__ import annotations

import json
import math

from session_checks import assert_balanced_with_every_sample_recorded
from test_daemon_support import KESTREL, write_rig_config

from daemon.cli import main
from daemon.recording.store import open_for_reading, run_events


def run_cli(capsys, *argv: str) -> tuple[int, dict]:
    status = main(list(argv))
    return status, json.loads(capsys.readouterr().out)


def test_demo_rig_session_balances_with_every_sample_recorded(tmp_path, capsys):
    config = write_rig_config(tmp_path, KESTREL)
    status, summary = run_cli(
        capsys, "session", "--config", str(config), "--sim", "--duration", "8",
        "--disturb", "3:0.02", "--encoder-noise-counts", "0", "--json",
    )
    assert status == 0, summary
    assert_balanced_with_every_sample_recorded(summary, 8.0)
    # The catch window is 20 deg and the fall window 35 deg: a balance that stayed up is far inside.
    assert summary["balance_rms_angle_deg"] < 5.0
    assert summary["max_abs_x_m"] < 0.36  # inside the soft limits (0.45 - 0.03 - 0.06 m)
    assert 0.0 < summary["swing_up_s"] < 60.0
    latency = summary["latency_us"]
    assert 0.0 < latency["p50"] <= latency["p99"] <= latency["max"]
    conn = open_for_reading(summary["recording"])
    try:
        events = run_events(conn, summary["run_id"])
        counts = dict(conn.execute(
            "SELECT t_device_us, pendulum_counts FROM samples WHERE run_id = ?", (summary["run_id"],)
        ).fetchall())
    finally:
        conn.close()
    kinds = [kind for _, kind, _, _ in events]
    assert "supervisor.transition" in kinds
    # The disturbance is recorded at its rig time, the time base of the samples (and of trips),
    # and it acts right there: the same seeded run without it reads the same pendulum counts up to
    # that sample, and differs within five samples after it (0.02 N s turns the pendulum by about
    # two-thirds of a count per sample: the first whole count comes a few samples on).
    [disturbance] = [json.loads(data) for _, kind, _, data in events if kind == "disturbance.scheduled"]
    assert disturbance["after_balance_s"] == 3.0 and disturbance["impulse_ns"] == 0.02
    at_us = round(disturbance["t_s"] * 1e6)
    (tmp_path / "calm").mkdir()
    calm_config = write_rig_config(tmp_path / "calm", KESTREL)
    status, calm = run_cli(
        capsys, "session", "--config", str(calm_config), "--sim", "--duration", "4",
        "--encoder-noise-counts", "0", "--json",
    )
    assert status == 0, calm
    conn = open_for_reading(calm["recording"])
    try:
        calm_counts = dict(conn.execute(
            "SELECT t_device_us, pendulum_counts FROM samples WHERE run_id = ?", (calm["run_id"],)
        ).fetchall())
    finally:
        conn.close()
    differ = sorted(t for t in counts.keys() & calm_counts.keys() if counts[t] != calm_counts[t])
    assert at_us <= differ[0] <= at_us + 10_000


def test_session_json_is_strict_json_with_the_documented_fields(tmp_path, capsys):
    config = write_rig_config(tmp_path, KESTREL)
    _status, summary = run_cli(
        capsys, "session", "--config", str(config), "--sim", "--duration", "1", "--json"
    )
    for key in ("outcome", "swing_up_s", "balance_s", "balance_rms_angle_deg", "balance_rms_x_m",
                "max_abs_x_m", "samples", "samples_unanswered", "samples_recorded", "dropped_samples", "trips",
                "latency_us", "run_id", "recording"):
        assert key in summary
    assert set(summary["latency_us"]) == {"p50", "p99", "max"}
    assert all(math.isfinite(v) for v in summary["latency_us"].values())


def test_a_bad_disturbance_is_one_line_naming_the_option(tmp_path, capsys):
    config = write_rig_config(tmp_path, KESTREL)
    assert main(["session", "--config", str(config), "--sim", "--disturb", "soon:lots"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "--disturb 'soon:lots'" in err


def test_the_seed_chooses_the_simulated_encoders_noise(tmp_path, capsys):
    def balance_rms(seed: int, folder: str) -> float:
        (tmp_path / folder).mkdir()
        config = write_rig_config(tmp_path / folder, KESTREL)
        status, summary = run_cli(
            capsys, "session", "--config", str(config), "--sim", "--duration", "2",
            "--seed", str(seed), "--json",
        )
        assert status == 0, summary
        return summary["balance_rms_angle_deg"]

    first, again, other = balance_rms(1, "a"), balance_rms(1, "b"), balance_rms(2, "c")
    assert first == again  # lockstep and seeded: the same run twice
    assert other != first
