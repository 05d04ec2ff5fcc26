"""`poise design`: JSON and table output, writing the gains back, and clear errors."""

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from daemon.cli import main
from daemon.commands.design import with_gains
from daemon.config import load_config

REPO = Path(__file__).resolve().parents[1]
WREN = REPO / "configs" / "wren-2.toml"


def test_json_output_has_the_documented_keys(capsys):
    assert main(["design", "--config", str(WREN), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert {"K", "Nbar", "poles", "sample_rate_hz", "input", "step"} <= report.keys()
    assert report["input"] == "newtons" and report["sample_rate_hz"] == 1000
    assert len(report["K"]) == 4 and report["Nbar"] == pytest.approx(report["K"][0])
    assert all(abs(complex(*p)) < 1.0 for p in report["poles"])
    for model in ("linear", "nonlinear"):
        figures = report["step"][model]
        assert {"rise_time_s", "settling_time_s", "peak_angle_rad", "steady_state_error_pct",
                "saturated_samples"} <= figures.keys()
    assert report["largest_recoverable_angle_deg"] > load_config(WREN).catch.angle_deg


def test_table_output_names_the_margins_and_step_figures():
    result = subprocess.run([sys.executable, "-m", "daemon.cli", "design", "--config", str(WREN)],
                            capture_output=True, text=True, cwd=REPO, check=True)
    for words in ("phase margin", "gain margin", "rise time", "settling time", "peak pendulum angle",
                  "saturated samples", "largest recoverable angle"):
        assert words in result.stdout


def test_write_replaces_only_the_gains_line(tmp_path, capsys):
    path = tmp_path / "rig.toml"
    shutil.copy(WREN, path)
    original = path.read_text()
    assert main(["design", "--config", str(path), "--write", "--json"]) == 0
    k = json.loads(capsys.readouterr().out)["K"]
    first = path.read_text()
    assert load_config(path).balance.gains == pytest.approx(k, rel=1e-7)
    added = [line for line in first.splitlines() if line not in original.splitlines()]
    assert len(added) == 1 and added[0].startswith("gains = [")
    assert main(["design", "--config", str(path), "--write", "--json"]) == 0
    assert path.read_text() == first  # written again: the same single line, replaced in place


def test_with_gains_appends_a_balance_section_when_there_is_none():
    text = '[rig]\nid = "x"\n# trailing comment'
    assert with_gains(text, [1.0, 2.0, 3.0, 4.0]) == (
        '[rig]\nid = "x"\n# trailing comment\n\n[balance]\ngains = [1, 2, 3, 4]  # written by poise design\n'
    )


def test_with_gains_inserts_into_an_existing_section_before_the_next_one():
    text = "[balance]\nr = 1.0\n\n[catch]\nangle_deg = 10.0\n"
    assert with_gains(text, [1.5, 2, 3, 4]) == (
        "[balance]\nr = 1.0\ngains = [1.5, 2, 3, 4]  # written by poise design\n\n[catch]\nangle_deg = 10.0\n"
    )


def test_a_step_past_the_soft_limit_is_a_one_line_error(capsys):
    assert main(["design", "--config", str(WREN), "--step-m", "0.5"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "0.5 m set-point step would pass the soft limit ±0.170 m" in err[0]


def test_a_missing_config_file_is_a_one_line_error(tmp_path, capsys):
    assert main(["design", "--config", str(tmp_path / "nope.toml")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "cannot read file" in err[0]
