"""Excitation amplitudes sized from the rig: the linear prediction against scipy and against the plant model.

The prediction (daemon/control/excitation_sizing.py) is checked three ways: its
convolution against scipy.signal.lsim on the same linear model; its shortcuts
(a coarser step for long chirps, whole PRBS periods left out) against the full
computation; and its amplitudes against the nonlinear plant model with its
encoders, the configured estimator, the one-sample command delay and the hold
loop (the harness of daemon/control/simulate.py), judged the way the interlocks
judge a sample: the estimated position plus the stopping distance toward the
limit ahead.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.signal import lsim
from test_daemon_support import KESTREL, WREN

from daemon.config import load_config
from daemon.control.cart_loops import CartHold
from daemon.control.excitation import Excitation, unit_waveform
from daemon.control.excitation_sizing import PREDICTION_STEP_S, ExcitationSizing
from daemon.control.rig_setup import build_control_set
from daemon.control.simulate import ClosedLoop
from daemon.supervisor.interlocks import stopping_distance_m
from sim_device.sensors import SensorParams

RIGS = [KESTREL, WREN]
RIG_IDS = ["kestrel-1", "wren-2"]


def plant_model_run(config, kind: str, amplitude: float, duration_s: float, tail_s: float) -> dict:
    """The excitation on the plant model with the hold loop under it, from hanging at rest, and after it.

    Returns the largest reach (estimated position plus the stopping distance toward the limit
    ahead) and speed, as shares of the soft limit and of the overspeed limit, and the largest
    acceleration the hold loop asked for.
    """
    controls = build_control_set(config)
    sensors = SensorParams(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev, 0.5, 0.5)
    loop = ClosedLoop(controls.params, sensors, controls.estimator, config.sampling.rate_hz, seed=1)
    hold, signal = CartHold(controls.params), Excitation(kind, amplitude, duration_s)
    lag_s = config.interlocks.reaction_latency_s + 0.05  # plus the stop loop's time constant
    reach = speed = accel = 0.0
    for k in range(round((duration_s + tail_s) / loop.dt_s)):
        t_s = k * loop.dt_s
        accel = max(accel, abs(hold.accel_command(*loop.measured)))
        loop.advance(hold.update(*loop.measured) + (signal.value(t_s) if t_s < duration_s else 0.0))
        x, v = loop.measured[0], loop.measured[1]
        ahead = x if v >= 0.0 else -x
        reach = max(reach, abs(x), ahead + stopping_distance_m(v, config.stop.decel_mps2, lag_s))
        speed = max(speed, abs(v))
    return {"reach": reach / config.soft_limit_m, "speed": speed / config.interlocks.max_cart_speed_mps,
            "accel_mps2": accel}


@pytest.mark.parametrize("rig", RIGS, ids=RIG_IDS)
@pytest.mark.parametrize("kind", ["chirp", "prbs", "step"])
def test_the_prediction_is_the_linear_models_response_as_scipy_computes_it(rig, kind):
    sizing = ExcitationSizing.from_config(load_config(rig))
    duration_s = 6.0
    x, v, accel = sizing.unit_response(kind, duration_s)
    t = np.arange(len(x)) * PREDICTION_STEP_S
    held = np.where(t < duration_s, unit_waveform(kind, duration_s, np.minimum(t, duration_s)), 0.0)
    # scipy.signal.lsim with the input held over each step (interp=False) integrates the same
    # continuous model exactly between samples. Ours cuts the impulse response after ten of the
    # slowest time constants (e^-10, 5e-5 of it): that much may differ.
    _t, outputs, _states = lsim((sizing.closed, sizing.drive_in.reshape(-1, 1), sizing.outputs, np.zeros((3, 1))),
                                held, t, interp=False)
    for ours, theirs in zip((x, v, accel), outputs.T, strict=True):
        assert np.max(np.abs(ours - theirs)) < 1e-3 * np.max(np.abs(theirs))


class WholeRun(ExcitationSizing):
    """The same prediction without its shortcuts: every run whole, at the fine step."""

    def predicted_run(self, kind: str, duration_s: float) -> tuple[float, float]:
        return duration_s, PREDICTION_STEP_S


@pytest.mark.parametrize("rig", RIGS, ids=RIG_IDS)
def test_the_shortcuts_give_the_extremes_of_the_whole_run(rig):
    short = ExcitationSizing.from_config(load_config(rig))
    full = WholeRun(**{f.name: getattr(short, f.name) for f in dataclasses.fields(short)})
    for kind, duration_s in (("chirp", 600.0), ("prbs", 60.0), ("step", 60.0)):
        assert short.predicted_run(kind, duration_s) != (duration_s, PREDICTION_STEP_S)
        ours = short.largest_amplitude(kind, duration_s, 0.05, 1.0)
        whole = full.largest_amplitude(kind, duration_s, 0.05, 1.0)
        assert ours[1] == whole[1] and ours[0] == pytest.approx(whole[0], rel=1e-3)


@pytest.mark.parametrize("rig", RIGS, ids=RIG_IDS)
@pytest.mark.parametrize(("kind", "duration_s"), [("chirp", 3.0), ("chirp", 10.0), ("prbs", 10.0), ("step", 10.0)])
def test_on_the_plant_model_the_largest_safe_amplitude_stays_inside_and_the_default_well_inside(
    rig, kind, duration_s
):
    config = load_config(rig)
    sizing = ExcitationSizing.from_config(config)
    largest, _limit = sizing.largest_amplitude(kind, duration_s, 0.0, 1.0)
    at_largest = plant_model_run(config, kind, largest, duration_s, sizing.settle_s)
    assert at_largest["reach"] < 1.0 and at_largest["speed"] < 1.0
    default = sizing.default_amplitude(kind, duration_s, 0.0)
    at_default = plant_model_run(config, kind, default, duration_s, sizing.settle_s)
    assert at_default["reach"] < 0.6 and at_default["speed"] < 0.6


@pytest.mark.parametrize("rig", RIGS, ids=RIG_IDS)
@pytest.mark.parametrize("kind", ["chirp", "prbs", "step"])
def test_on_the_plant_model_a_larger_amplitude_does_what_the_refusal_says(rig, kind):
    # Not needlessly cautious: a third more than the largest safe amplitude does, on the plant
    # model, what the refusal names (past the soft limits, or the hold loop past its limit).
    config = load_config(rig)
    sizing = ExcitationSizing.from_config(config)
    largest, limit = sizing.largest_amplitude(kind, 10.0, 0.0, 1.0)
    run = plant_model_run(config, kind, 1.33 * largest, 10.0, sizing.settle_s)
    if limit.startswith("take the cart past the soft limits"):
        assert run["reach"] > 1.0
    else:
        assert limit.startswith("ask the hold loop for more than")
        assert run["accel_mps2"] > sizing.hold_max_accel_mps2


def test_an_offset_set_point_leaves_less_room_toward_the_near_limit():
    sizing = ExcitationSizing.from_config(load_config(KESTREL))
    centred, _ = sizing.largest_amplitude("step", 10.0, 0.0, 1.0)
    # a positive step drives the cart toward +x: from 0.2 m there is 0.16 m of room instead of 0.36
    offset, _ = sizing.largest_amplitude("step", 10.0, 0.2, 1.0)
    assert offset == pytest.approx(centred * 0.16 / 0.36, rel=0.1) and offset < centred
    assert sizing.problem("step", 0.9 * centred, 10.0, 0.0) is None
    assert sizing.problem("step", 0.9 * centred, 10.0, 0.2).startswith("excite: a 10 s step of amplitude ")


def test_the_default_never_exceeds_the_drive_limit():
    config = load_config(KESTREL)
    weak = dataclasses.replace(ExcitationSizing.from_config(config), drive_limit=0.05)
    assert weak.default_amplitude("prbs", 10.0, 0.0) == 0.05
