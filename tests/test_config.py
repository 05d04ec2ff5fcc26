"""Rig config: the demo rig loads, and bad configs give one line per problem with its field path."""

import subprocess
import sys
from pathlib import Path

import pytest

from daemon.config import ConfigError, demo_config_path, load_config, parse_config

REPO = Path(__file__).resolve().parents[1]


def test_demo_rig_config_loads_and_matches_configs_folder():
    config = load_config(demo_config_path())
    assert config.rig.id == "kestrel-1"
    assert demo_config_path().read_text() == (REPO / "configs" / "kestrel-1.toml").read_text()


@pytest.mark.parametrize("path", sorted((REPO / "configs").glob("*.toml")), ids=lambda p: p.name)
def test_every_shipped_config_is_valid(path):
    load_config(path)


def test_each_problem_is_reported_with_its_field_path():
    text = demo_config_path().read_text()
    text = text.replace("mass_kg = 0.75", "mass_kg = -0.75").replace("rate_hz = 500", "rate_hz = 9")
    text += "\n[bogus]\nx = 1\n"
    with pytest.raises(ConfigError) as caught:
        parse_config(text, "rig.toml")
    problems = caught.value.problems
    assert len(problems) == 3
    assert any(p.startswith("cart.mass_kg: ") and "greater than 0" in p for p in problems)
    assert any(p.startswith("sampling.rate_hz: ") and "50" in p for p in problems)
    assert any(p.startswith("bogus: unknown field") for p in problems)


def test_watchdog_shorter_than_three_samples_is_refused():
    text = demo_config_path().read_text().replace("device_watchdog_ms = 50", "device_watchdog_ms = 4")
    with pytest.raises(ConfigError, match="sampling: device_watchdog_ms must be at least 3 sample periods"):
        parse_config(text)


def test_invalid_toml_names_line_and_column():
    with pytest.raises(ConfigError, match=r"not valid TOML: .*line 2"):
        parse_config("[rig]\nid = \n")


def test_cli_prints_one_line_per_problem_exit_2_no_traceback(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(demo_config_path().read_text().replace("limit = 12.0", "limit = -3"))
    result = subprocess.run(
        [sys.executable, "-m", "daemon.cli", "check-config", str(bad)], capture_output=True, text=True, check=False
    )
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    lines = result.stderr.strip().splitlines()
    assert lines == [f"poise: {bad}: drive.limit: Input should be greater than 0 (got -3)"]


@pytest.mark.parametrize(("length_m", "refused"), [(0.1, True), (0.17, True), (0.2, False)])
def test_a_track_too_short_for_its_insets_is_refused_naming_the_inset(length_m, refused):
    # Kestrel-1's insets: switches 0.03 m inside each end, soft limits 0.06 m inside the switches,
    # so the soft limits meet at the centre on a 0.18 m track.
    text = demo_config_path().read_text().replace("length_m = 0.90", f"length_m = {length_m}", 1)
    assert f"length_m = {length_m}" in text
    if not refused:
        assert parse_config(text).soft_limit_m == pytest.approx(length_m / 2 - 0.09)
        return
    with pytest.raises(ConfigError) as caught:
        parse_config(text)
    assert caught.value.problems[0].startswith("interlocks.soft_limit_inset_m: the soft limits come out ")
