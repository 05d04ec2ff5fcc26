"""`poise design`: JSON and table output, writing the gains back, and clear errors."""

import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from daemon.cli import main
from daemon.commands.design import with_gains
from daemon.config import load_config
from daemon.control.design_report import step_figures, why_unsettled

REPO = Path(__file__).resolve().parents[1]
WREN = REPO / "configs" / "wren-2.toml"
KESTREL = REPO / "configs" / "kestrel-1.toml"


def strict_json(text: str):
    """``text`` parsed as RFC 8259 JSON, which has no Infinity or NaN (Python's json accepts them)."""

    def refuse(constant: str):
        raise ValueError(f"not JSON: {constant}")

    return json.loads(text, parse_constant=refuse)


def test_json_output_has_the_documented_keys(capsys):
    assert main(["design", "--config", str(WREN), "--json"]) == 0
    report = strict_json(capsys.readouterr().out)
    assert {"K", "Nbar", "poles", "sample_rate_hz", "input", "step"} <= report.keys()
    assert report["input"] == "newtons" and report["sample_rate_hz"] == 1000
    assert len(report["K"]) == 4 and report["Nbar"] == pytest.approx(report["K"][0])
    assert all(abs(complex(*p)) < 1.0 for p in report["poles"])
    for model in ("linear", "nonlinear"):
        figures = report["step"][model]
        assert {"rise_time_s", "settling_time_s", "peak_angle_rad", "steady_state_error_pct",
                "saturated_samples"} <= figures.keys()
    assert report["largest_recoverable_angle_deg"] > load_config(WREN).catch.angle_deg


@pytest.mark.parametrize("integral", [False, True])
def test_json_is_strict_and_names_the_weights_why_it_never_settles_and_what_was_derived(
    tmp_path, capsys, integral
):
    # Kestrel-1's plant-model step wanders about the set-point (friction and dead band): its
    # settling time does not exist, and was printed as Infinity, which is not JSON.
    path = tmp_path / "rig.toml"
    path.write_text(KESTREL.read_text() + ("\n[balance]\nintegral_action = true\n" if integral else ""))
    config = load_config(path)
    assert main(["design", "--config", str(path), "--json"]) == 0
    report = strict_json(capsys.readouterr().out)
    assert report["weights"] == {
        "q_diag": list(config.balance.q_diag),
        "r": config.balance.r,
        "integral_weight": config.balance.integral_weight if integral else None,
    }
    if not integral:
        plant = report["step"]["nonlinear"]
        assert plant["settling_time_s"] is None
        assert "Coulomb friction" in plant["unsettled_reason"]
        assert report["step"]["linear"]["unsettled_reason"] is None
    derived = {value["field"]: value for value in report["derived"]}
    assert derived["stop.decel_mps2"]["value"] == config.stop.decel_mps2
    assert derived["stop.decel_mps2"]["from"].startswith("from the drive: ")


def test_table_output_names_the_weights_margins_and_step_figures():
    result = subprocess.run([sys.executable, "-m", "daemon.cli", "design", "--config", str(KESTREL)],
                            capture_output=True, text=True, cwd=REPO, check=True, env={**os.environ, "COLUMNS": "200"})
    for words in ("LQR weights Q (x, v, theta, omega)", "5000, 0, 100, 0", "LQR weight R", "integral of x",
                  "phase margin", "gain margin", "rise time", "settling time", "peak pendulum angle",
                  "saturated samples", "largest recoverable angle", "plant model: never settles: ",
                  "derived: stop.decel_mps2 = ", "derived: swing_up.pump_offset_m = "):
        assert words in result.stdout


DT_S = 0.01
T = np.arange(1000) * DT_S  # a 10 s prediction


@pytest.mark.parametrize(
    ("poles", "x", "theta", "reason"),
    [
        ([1.01, 0.5], 0.1 * T, 0 * T, "the closed loop is unstable (a pole of magnitude 1.0100"),
        ([1.0, 0.5], 0.1 * np.sin(T), 0 * T, "the closed loop is marginal"),
        ([0.9], np.minimum(0.05 * T, 0.4), 0 * T, "the step leaves the soft limits (the cart reaches 0.400 m"),
        ([0.9], 0.1 + 0 * T, np.minimum(0.05 * T, 0.2), "the pendulum falls (it reaches 11.5 deg)"),
    ],
)
def test_why_a_step_never_settles_names_the_first_cause_that_applies(poles, x, theta, reason):
    why = why_unsettled(0.1, DT_S, x, theta, np.array(poles), soft_limit_m=0.36, fall_angle_rad=math.radians(10))
    assert why.startswith(reason)


def test_a_slow_first_order_response_is_still_approaching_when_the_prediction_ends():
    # A first-order lag settles to 2 % after about 4 time constants (ln 50 = 3.9; Ogata, Modern
    # Control Engineering, 5th ed., 2010, section 5-3): with tau = 5 s, not within 10 s.
    tau_s = 5.0
    x = 0.1 * (1.0 - np.exp(-(T + DT_S) / tau_s))
    figures = step_figures(0.1, DT_S, x, 0 * T)
    assert math.isinf(figures.settling_time_s)
    pole = math.exp(-DT_S / tau_s)  # the discrete pole of that lag at this sample period
    why = why_unsettled(0.1, DT_S, x, 0 * T, np.array([pole]), soft_limit_m=0.36, fall_angle_rad=1.0)
    assert why.startswith("it is still approaching the set-point when the 10 s prediction ends")
    assert "time constant is 5.00 s" in why


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


def test_without_a_config_it_designs_for_the_demo_rig(capsys):
    assert main(["design", "--json"]) == 0
    demo = strict_json(capsys.readouterr().out)
    assert main(["design", "--json", "--config", str(KESTREL)]) == 0
    assert demo == strict_json(capsys.readouterr().out)
    assert demo["sample_rate_hz"] == load_config(KESTREL).sampling.rate_hz


def test_write_without_a_config_is_refused_and_the_shipped_demo_config_is_untouched(capsys):
    before = KESTREL.read_bytes()
    assert main(["design", "--write"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["poise: design: --write needs --config FILE (the demo rig's config ships with Poise)"]
    assert KESTREL.read_bytes() == before
