"""Rig config: the demo rig loads, and bad configs give one line per problem with its field path.

Types are strict (no booleans or strings for numbers, integers for integer
fields), numbers are finite, normal and inside physical ranges, and a bad value
is echoed cut short, so every problem stays one short line.
"""

import subprocess
import sys

import pytest
from test_config_support import REPO, config_dict, toml_text

from daemon.cli import main
from daemon.config import ConfigError, demo_config_path, load_config, parse_config

# The smallest normal IEEE 754 binary64 number is 2**-1022, about 2.2e-308 (IEEE 754-2008, 3.6).
SMALLEST_NORMAL = 2.0**-1022
# CPython reads at most 4300 digits of a decimal integer by default
# (Python docs, "Integer string conversion length limitation", 3.11; CVE-2020-10735).
INT_MAX_STR_DIGITS = 4300


def demo_text() -> str:
    return demo_config_path().read_text()


def edited(old: str, new: str) -> str:
    text = demo_text()
    assert old in text
    return text.replace(old, new, 1)


def problems(text: str) -> list[str]:
    with pytest.raises(ConfigError) as caught:
        parse_config(text, "rig.toml")
    return caught.value.problems


def test_demo_rig_config_loads_and_matches_configs_folder():
    config = load_config(demo_config_path())
    assert config.rig.id == "kestrel-1"
    assert demo_config_path().read_text() == (REPO / "configs" / "kestrel-1.toml").read_text()


@pytest.mark.parametrize("path", sorted((REPO / "configs").glob("*.toml")), ids=lambda p: p.name)
def test_every_shipped_config_is_valid(path):
    load_config(path)


def test_each_problem_is_reported_with_its_field_path():
    text = demo_text().replace("mass_kg = 0.75", "mass_kg = -0.75").replace("rate_hz = 500", "rate_hz = 9")
    text += "\n[bogus]\nx = 1\n"
    found = problems(text)
    assert len(found) == 3
    assert any(p.startswith("cart.mass_kg: ") and "greater than or equal to 0.01" in p for p in found)
    assert any(p.startswith("sampling.rate_hz: ") and "50" in p for p in found)
    assert any(p.startswith("bogus: unknown field") for p in found)


def test_watchdog_shorter_than_three_samples_is_refused():
    text = demo_text().replace("device_watchdog_ms = 50", "device_watchdog_ms = 4")
    with pytest.raises(ConfigError, match="sampling: device_watchdog_ms must be at least 3 sample periods"):
        parse_config(text)


def test_invalid_toml_names_line_and_column():
    with pytest.raises(ConfigError, match=r"not valid TOML: .*line 2"):
        parse_config("[rig]\nid = \n")


def test_cli_prints_one_line_per_problem_exit_2_no_traceback(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(demo_text().replace("limit = 12.0", "limit = -3"))
    result = subprocess.run(
        [sys.executable, "-m", "daemon.cli", "check-config", str(bad)], capture_output=True, text=True, check=False
    )
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    lines = result.stderr.strip().splitlines()
    assert lines == [
        (
            f"poise: {bad}: drive.limit: Input should be greater than or equal to 0.1: "
            "largest |command|, volts or newtons: 0.1 (less moves no cart) to 1000 (got -3)"
        )
    ]


@pytest.mark.parametrize(("length_m", "refused"), [(0.1, True), (0.17, True), (0.2, False)])
def test_a_track_too_short_for_its_insets_is_refused_naming_the_inset(length_m, refused):
    # Kestrel-1's insets: switches 0.03 m inside each end, soft limits 0.06 m inside the switches,
    # so the soft limits meet at the centre on a 0.18 m track.
    text = demo_text().replace("length_m = 0.90", f"length_m = {length_m}", 1)
    assert f"length_m = {length_m}" in text
    if not refused:
        assert parse_config(text).soft_limit_m == pytest.approx(length_m / 2 - 0.09)
        return
    assert problems(text)[0].startswith("interlocks.soft_limit_inset_m: the soft limits come out ")


@pytest.mark.parametrize(
    ("old", "new", "problem"),
    [
        ("length_m = 0.90", "length_m = true", "track.length_m: Input should be a valid number (got true)"),
        ("com_distance_m = 0.25", "com_distance_m = true",
         "pendulum.com_distance_m: Input should be a valid number (got true)"),
        ("mass_kg = 0.75", 'mass_kg = "0.75"', "cart.mass_kg: Input should be a valid number (got '0.75')"),
        ("limit = 12.0", 'limit = "nan"', "drive.limit: Input should be a valid number (got 'nan')"),
        ("limit = 12.0", "limit = nan", "drive.limit: Input should be a finite number (got nan)"),
        ("limit = 12.0", "limit = -inf", "drive.limit: Input should be a finite number (got -inf)"),
        ("pendulum_counts_per_rev = 4096", "pendulum_counts_per_rev = 4096.0",
         "encoders.pendulum_counts_per_rev: Input should be a valid integer (got 4096.0)"),
        ("rate_hz = 500", "rate_hz = true", "sampling.rate_hz: Input should be a valid integer (got true)"),
        ("has_limit_switches = true", "has_limit_switches = 1",
         "track.has_limit_switches: Input should be a valid boolean (got 1)"),
        ('kind = "voltage"', "kind = 0", "drive.kind: Input should be 'voltage' or 'force' (got 0)"),
    ],
)
def test_a_value_of_the_wrong_type_is_refused_with_its_path(old, new, problem):
    assert problems(edited(old, new)) == [problem]


@pytest.mark.parametrize(
    ("section", "problem"),
    [
        ("[stop]\ncategory = true", "stop.category: Input should be 0 or 1 (got true)"),
        ("[stop]\ncategory = 1.0", "stop.category: Input should be 0 or 1 (got 1.0)"),
        ("[balance]\nq_diag = [5000.0, 0.0, true, 0.0]", "balance.q_diag.2: Input should be a valid number (got true)"),
        ("[interlocks]\nlink_error_burst = 10.0",
         "interlocks.link_error_burst: Input should be a valid integer (got 10.0)"),
        ("[catch]\nfollow_approach = 1", "catch.follow_approach: Input should be a valid boolean (got 1)"),
    ],
)
def test_controller_and_safety_fields_are_as_strict(section, problem):
    assert problems(demo_text() + "\n" + section + "\n") == [problem]


def test_a_float_field_takes_an_integer_and_tuples_take_arrays():
    config = parse_config(edited("length_m = 0.90", "length_m = 1") + "\n[balance]\nq_diag = [5000, 0, 100, 0]\n")
    assert type(config.track.length_m) is float and config.track.length_m == 1.0
    assert config.balance.q_diag == (5000.0, 0.0, 100.0, 0.0)


@pytest.mark.parametrize(
    ("counts_per_m", "refused"), [("1e-320", True), ("5e-324", True), ("1000.0", True), ("1000.001", False),
                                  ("1e9", False), ("1.000001e9", True)]
)
def test_cart_counts_per_metre_must_resolve_under_a_millimetre(counts_per_m, refused):
    # 1000 counts per metre is one count per millimetre; the bound is our choice (common practice, no source).
    text = edited("cart_counts_per_m = 173852.0", f"cart_counts_per_m = {counts_per_m}")
    if not refused:
        assert parse_config(text).encoders.cart_counts_per_m == float(counts_per_m)
        return
    [problem] = problems(text)
    assert problem.startswith("encoders.cart_counts_per_m: Input should be ")
    assert ": one count must be under a millimetre, and no finer than a nanometre (got " in problem


def test_a_subnormal_number_is_refused_even_where_zero_is_allowed():
    tiny = SMALLEST_NORMAL / 2
    text = edited("coulomb_n = 0.35", f"coulomb_n = {tiny!r}")
    assert problems(text) == [
        f"cart.coulomb_n: a subnormal number (magnitude below 2.2e-308) is no physical value (got {tiny!r})"
    ]
    assert parse_config(edited("coulomb_n = 0.35", f"coulomb_n = {SMALLEST_NORMAL!r}")).cart.coulomb_n > 0


def test_a_dead_band_as_wide_as_the_drive_limit_is_refused():
    [problem] = problems(edited("dead_band = 0.15", "dead_band = 12.0"))
    assert problem.startswith("drive: dead_band (12) must be below limit (12): no command would give any force")


def test_a_long_string_is_echoed_as_a_prefix_and_its_length():
    name = "x" * 100_000
    [problem] = problems(edited('name = "Kestrel-1 belt-drive pendulum"', f'name = "{name}"'))
    assert problem == (
        f"rig.name: String should have at most 200 characters (got '{'x' * 40}' …, 100000 characters)"
    )
    [problem] = problems(edited("length_m = 0.90", f'length_m = "{name}"'))
    assert problem == f"track.length_m: Input should be a valid number (got '{'x' * 40}' …, 100000 characters)"


def test_a_long_unknown_key_is_cut_in_the_path():
    [problem] = problems(demo_text() + "\n[stop]\n" + "k" * 100_000 + " = 1\n")
    assert problem.startswith(f"stop.{'k' * 40}… (100000 characters): unknown field")
    assert len(problem) < 200


def test_a_quoted_key_with_a_newline_stays_on_one_line():
    [problem] = problems(demo_text() + '\n[stop]\n"a\\nb" = 1\n')
    assert problem.startswith("stop.a\\nb: unknown field")


def test_a_huge_integer_is_echoed_by_its_size_and_one_past_the_reader_limit_is_one_line():
    [problem] = problems(edited("rate_hz = 500", "rate_hz = 1" + "0" * 100))
    assert problem == "sampling.rate_hz: Input should be less than or equal to 5000 (got an integer of about 101 digits)"
    assert problems(edited("rate_hz = 500", "rate_hz = " + "9" * (INT_MAX_STR_DIGITS + 1))) == [
        f"not readable TOML: an integer of more than {INT_MAX_STR_DIGITS} digits"
    ]


def test_nested_arrays_are_echoed_a_few_levels_deep():
    depth = 300  # deep, but within what the TOML reader takes
    [problem] = problems(edited("length_m = 0.90", "length_m = " + "[" * depth + "]" * depth))
    assert problem == "track.length_m: Input should be a valid number (got [[[[...]]]])"


def test_check_config_reports_an_array_nested_5000_deep_in_one_line(tmp_path, capsys):
    path = tmp_path / "deep.toml"
    path.write_text(demo_text() + "\n[stop]\nx = " + "[" * 5000 + "]" * 5000 + "\n")
    assert main(["check-config", str(path)]) == 2
    assert capsys.readouterr().err.splitlines() == [
        f"poise: {path}: not readable TOML: arrays or inline tables nested too deeply"
    ]


def test_check_config_reports_every_problem_in_every_file(tmp_path, capsys):
    two_problems = tmp_path / "a.toml"
    doc = config_dict(demo_config_path())
    doc["track"]["length_m"] = True
    del doc["drive"]["kind"]
    two_problems.write_text(toml_text(doc))
    good = demo_config_path()
    not_toml = tmp_path / "b.toml"
    not_toml.write_text("[rig\n")
    missing = tmp_path / "none.toml"
    weak_drive = tmp_path / "c.toml"
    weak_drive.write_text(demo_text() + "\n[stop]\ndecel_mps2 = 90.0\n")

    assert main(["check-config", str(two_problems), str(good), str(not_toml), str(missing), str(weak_drive)]) == 2
    out, err = capsys.readouterr()
    ok, *derived = out.splitlines()
    assert ok == f"{good}: ok (rig kestrel-1, 500 Hz, voltage drive)"
    assert [line.split(" = ")[0] for line in derived] == ["  stop.decel_mps2", "  swing_up.pump_offset_m"]
    lines = err.splitlines()
    assert lines[:2] == [
        f"poise: {two_problems}: track.length_m: Input should be a valid number (got true)",
        f"poise: {two_problems}: drive.kind: required field is missing",
    ]
    assert lines[2].startswith(f"poise: {not_toml}: not valid TOML: ")
    assert lines[3] == f"poise: {missing}: cannot read file: No such file or directory"
    assert lines[4].startswith(f"poise: {weak_drive}: stop.decel_mps2: ")
    assert len(lines) == 5
