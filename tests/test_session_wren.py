"""A whole session on the short-track rig (Wren-2: 0.5 m track, force drive, 1 kHz, pumping swing-up)."""

from __future__ import annotations

import json

from session_checks import assert_balanced_with_every_sample_recorded
from test_daemon_support import WREN, write_rig_config

from daemon.cli import main


def test_short_track_rig_session_balances_with_every_sample_recorded(tmp_path, capsys):
    config = write_rig_config(tmp_path, WREN)
    status = main(["session", "--config", str(config), "--sim", "--duration", "6", "--json"])
    summary = json.loads(capsys.readouterr().out)
    assert status == 0, summary
    assert_balanced_with_every_sample_recorded(summary, 6.0)
    assert summary["max_abs_x_m"] < 0.17  # the soft limits: 0.25 - 0.02 - 0.06 m
