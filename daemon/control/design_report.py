"""What `poise design` reports: gains, poles, margins, predicted step response, recoverable angle.

Step-response figures for a cart set-point step ``r`` (the figures the
Control Tutorials for MATLAB and Simulink inverted-pendulum pages use):
rise time from 10 % to 90 % of ``r``; settling time, the last time the cart is
outside ±2 % of ``r``; the largest |theta|; the steady-state error, |mean x
over the last second - r| as a percentage of ``r``.

Two predictions: the linear model (the discrete closed loop ``Ad - Bd K`` with
``Bd Nbar r``, no saturation), and the nonlinear plant model
(sim_device/plant.py) with encoder quantisation, the configured estimator,
one sample of command delay, friction, dead band and the drive limit, which
also counts how many samples the command saturated.

The largest recoverable angle is found by bisection: the largest initial
angle, pendulum and cart at rest at the centre, from which the saturated
balance controller brings the pendulum within 3 degrees of upright in 5 s
without the cart passing the soft limits.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from daemon.config import PoiseConfig
from daemon.control.balance import BalanceController, BalanceDesign
from daemon.control.lqr import augment_with_integrator
from daemon.control.margins import LoopMargins, loop_margins
from daemon.control.rig_setup import ControlSet, build_control_set
from daemon.control.simulate import ClosedLoop
from sim_device.sensors import SensorParams

__all__ = [
    "DesignReport",
    "StepFigures",
    "design_report",
    "largest_recoverable_angle",
    "linear_step",
    "nonlinear_step",
    "step_figures",
]

_STEP_DURATION_S = 10.0


@dataclass(frozen=True)
class StepFigures:
    step_m: float
    rise_time_s: float
    settling_time_s: float
    peak_angle_rad: float
    steady_state_error_pct: float
    saturated_samples: int
    samples: int


def step_figures(step_m: float, dt_s: float, x: np.ndarray, theta: np.ndarray,
                 saturated_samples: int = 0) -> StepFigures:
    """Figures of a recorded response (``x[k]``, ``theta[k]`` at ``k dt``) to a step of ``step_m``."""
    t = np.arange(len(x)) * dt_s
    frac = x / step_m
    above10 = np.nonzero(frac >= 0.1)[0]
    above90 = np.nonzero(frac >= 0.9)[0]
    rise = float(t[above90[0]] - t[above10[0]]) if len(above90) and len(above10) else math.inf
    outside = np.nonzero(np.abs(x - step_m) > 0.02 * abs(step_m))[0]
    settling = float(t[outside[-1]] + dt_s) if len(outside) else 0.0
    if len(outside) and outside[-1] == len(x) - 1:
        settling = math.inf
    tail = x[t >= t[-1] - 1.0]
    error = abs(float(np.mean(tail)) - step_m) / abs(step_m) * 100.0
    return StepFigures(step_m, rise, settling, float(np.max(np.abs(theta))), error,
                       saturated_samples, len(x))


def linear_step(design: BalanceDesign, step_m: float, seconds: float = _STEP_DURATION_S) -> StepFigures:
    """The discrete linear closed loop's response to a set-point step (no saturation)."""
    closed = design.closed_loop_matrix()
    n = closed.shape[0]
    drive_in = np.zeros(n)
    drive_in[:4] = design.bd.reshape(-1) * design.nbar * step_m
    if n == 5:
        drive_in[4] = -design.dt_s * step_m
    s = np.zeros(n)
    steps = round(seconds / design.dt_s)
    x, theta = np.empty(steps), np.empty(steps)
    for k in range(steps):
        s = closed @ s + drive_in
        x[k], theta[k] = s[0], s[2]
    return step_figures(step_m, design.dt_s, x, theta)


def _sensors(config: PoiseConfig) -> SensorParams:
    return SensorParams(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev,
                        config.estimator.encoder_noise_counts, config.estimator.encoder_noise_counts)


def nonlinear_step(config: PoiseConfig, controls: ControlSet, step_m: float,
                   seconds: float = _STEP_DURATION_S) -> StepFigures:
    """The plant model's response to a set-point step under the balance controller, from upright at rest."""
    balance = BalanceController(controls.design, config.balance.blend_samples)
    loop = ClosedLoop(controls.params, _sensors(config), controls.estimator, config.sampling.rate_hz,
                      state0=(0.0, 0.0, 0.0, 0.0))
    balance.set_point_m = step_m
    steps = round(seconds / loop.dt_s)
    x, theta = np.empty(steps), np.empty(steps)
    for k in range(steps):
        loop.advance(balance.update(*loop.measured))
        state = loop.plant.state
        x[k], theta[k] = state[0], state[2]
    return step_figures(step_m, loop.dt_s, x, theta, balance.saturated_samples)


def _recovers(config: PoiseConfig, controls: ControlSet, angle_rad: float) -> bool:
    balance = BalanceController(controls.design, config.balance.blend_samples)
    loop = ClosedLoop(controls.params, _sensors(config), controls.estimator, config.sampling.rate_hz,
                      state0=(0.0, 0.0, angle_rad, 0.0))
    loop.run(balance.update, 5.0)
    theta = loop.plant.state[2]
    return abs(theta) < math.radians(3.0) and loop.max_abs_x_m < controls.soft_limit_m


def largest_recoverable_angle(config: PoiseConfig, controls: ControlSet, resolution_deg: float = 0.25) -> float:
    """Largest initial angle (rad) from rest the saturated balance loop recovers from (bisection)."""
    low, high = 0.0, math.radians(90.0)
    while high - low > math.radians(resolution_deg):
        middle = 0.5 * (low + high)
        if _recovers(config, controls, middle):
            low = middle
        else:
            high = middle
    return low


@dataclass(frozen=True)
class DesignReport:
    design: BalanceDesign
    margins: LoopMargins
    continuous_margins: LoopMargins
    linear: StepFigures
    nonlinear: StepFigures
    recoverable_angle_rad: float
    soft_limit_m: float

    def to_json(self) -> dict:
        d = self.design
        poles = d.poles()
        return {
            "K": list(d.k),
            "Ki": d.ki,
            "Nbar": d.nbar,
            "poles": [[float(p.real), float(p.imag)] for p in poles],
            "sample_rate_hz": d.sample_rate_hz,
            "input": "volts" if d.input_kind == "voltage" else "newtons",
            "drive_limit": d.limit,
            "K_continuous": list(d.k_continuous),
            "margins": {
                "phase_margin_deg": self.margins.phase_margin_deg,
                "gain_margin_upper_db": self.margins.gain_margin_upper_db,
                "gain_margin_lower_db": self.margins.gain_margin_lower_db,
                "continuous_phase_margin_deg": self.continuous_margins.phase_margin_deg,
            },
            "step": {"linear": asdict(self.linear), "nonlinear": asdict(self.nonlinear)},
            "largest_recoverable_angle_deg": math.degrees(self.recoverable_angle_rad),
            "soft_limit_m": self.soft_limit_m,
        }


def design_report(config: PoiseConfig, step_m: float | None = None) -> DesignReport:
    """Design the balance gains for ``config`` afresh (ignoring ``[balance] gains``) and predict their behaviour."""
    controls = build_control_set(config, use_config_gains=False)
    step = step_m if step_m is not None else config.balance.step_m
    if step >= controls.soft_limit_m:
        raise ValueError(f"a {step} m set-point step would pass the soft limit ±{controls.soft_limit_m:.3f} m")
    d = controls.design
    k = d.k_full
    return DesignReport(
        design=d,
        margins=loop_margins(*_loop_model(d), k, d.dt_s),
        continuous_margins=loop_margins(d.a, d.b, np.array(d.k_continuous), None),
        linear=linear_step(d, step),
        nonlinear=nonlinear_step(config, controls, step),
        recoverable_angle_rad=largest_recoverable_angle(config, controls),
        soft_limit_m=controls.soft_limit_m,
    )


def _loop_model(d: BalanceDesign) -> tuple[np.ndarray, np.ndarray]:
    """``(Ad, Bd)`` of the loop the gains close (augmented with the integrator if there is one)."""
    if d.ki:
        return augment_with_integrator(d.ad, d.bd, np.array([[1.0, 0.0, 0.0, 0.0]]), d.dt_s)
    return d.ad, d.bd
