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

When a prediction never rises or never settles, it says why
(:func:`why_unsettled`): the closed loop is unstable or marginal (a pole on
or outside the unit circle), the step leaves the soft limits, the pendulum
falls, the response is still approaching the set-point when the prediction
ends (the slowest pole's time constant), or it keeps moving about the
set-point long after its slowest mode has died away (on the plant model:
friction, dead band and encoder steps, which the linear model leaves out);
with how many samples the drive saturated.

The largest recoverable angle is found by bisection: the largest initial
angle, pendulum and cart at rest at the centre, from which the saturated
balance controller brings the pendulum within 3 degrees of upright in 5 s
without the cart passing the soft limits.

:meth:`DesignReport.to_json` is strict JSON: a figure that does not exist (a
step that never rises or settles, a margin with no crossing) is ``null``, and
the step's ``unsettled_reason`` says why it never settles.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from daemon.config import PoiseConfig
from daemon.config.derived import DerivedValue
from daemon.control.balance import BalanceController, BalanceDesign
from daemon.control.lqr import augment_with_integrator
from daemon.control.margins import LoopMargins, loop_margins
from daemon.control.rig_setup import ControlSet, build_control_set
from daemon.control.simulate import ClosedLoop
from daemon.strict_json import finite_or_null
from sim_device.sensors import SensorParams

__all__ = [
    "DesignReport",
    "LqrWeights",
    "StepFigures",
    "design_report",
    "largest_recoverable_angle",
    "linear_step",
    "nonlinear_step",
    "step_figures",
    "why_unsettled",
]

_STEP_DURATION_S = 10.0
_SETTLING_BAND = 0.02  # share of the step the settling time counts as settled
_MARGINAL_POLE = 1e-6  # a pole this close to the unit circle is marginal
_DIED_AWAY = 10.0  # a mode has died away after this many of its time constants (e^-10)


@dataclass(frozen=True)
class StepFigures:
    step_m: float
    rise_time_s: float
    settling_time_s: float
    peak_angle_rad: float
    steady_state_error_pct: float
    saturated_samples: int
    samples: int
    unsettled_reason: str | None = None  # why it never settles (None when it does)


def step_figures(step_m: float, dt_s: float, x: np.ndarray, theta: np.ndarray,
                 saturated_samples: int = 0) -> StepFigures:
    """Figures of a recorded response (``x[k]``, ``theta[k]`` at ``k dt``) to a step of ``step_m``."""
    t = np.arange(len(x)) * dt_s
    frac = x / step_m
    above10 = np.nonzero(frac >= 0.1)[0]
    above90 = np.nonzero(frac >= 0.9)[0]
    rise = float(t[above90[0]] - t[above10[0]]) if len(above90) and len(above10) else math.inf
    outside = np.nonzero(np.abs(x - step_m) > _SETTLING_BAND * abs(step_m))[0]
    settling = float(t[outside[-1]] + dt_s) if len(outside) else 0.0
    if len(outside) and outside[-1] == len(x) - 1:
        settling = math.inf
    tail = x[t >= t[-1] - 1.0]
    error = abs(float(np.mean(tail)) - step_m) / abs(step_m) * 100.0
    return StepFigures(step_m, rise, settling, float(np.max(np.abs(theta))), error,
                       saturated_samples, len(x))


def why_unsettled(step_m: float, dt_s: float, x: np.ndarray, theta: np.ndarray, poles: np.ndarray, *,
                  soft_limit_m: float, fall_angle_rad: float, saturated_samples: int = 0) -> str:
    """Why a response (``x[k]``, ``theta[k]`` at ``k dt``) to a step of ``step_m`` never settles, in one phrase.

    ``poles`` are the discrete closed-loop poles of the gains; the first reason that applies is given.
    """
    biggest = float(np.max(np.abs(poles)))
    if biggest > 1.0 + _MARGINAL_POLE:
        return f"the closed loop is unstable (a pole of magnitude {biggest:.4f}, outside the unit circle)"
    if biggest > 1.0 - _MARGINAL_POLE:
        return f"the closed loop is marginal (a pole of magnitude {biggest:.6f}, on the unit circle)"
    farthest = float(np.max(np.abs(x)))
    if farthest > soft_limit_m:
        return f"the step leaves the soft limits (the cart reaches {farthest:.3f} m, limit ±{soft_limit_m:.3f} m)"
    steepest = float(np.max(np.abs(theta)))
    if steepest > fall_angle_rad:
        return f"the pendulum falls (it reaches {math.degrees(steepest):.1f} deg)"
    saturated = f"; the drive saturated {saturated_samples} of {len(x)} samples" if saturated_samples else ""
    tail = x[np.arange(len(x)) * dt_s >= (len(x) - 1) * dt_s - 1.0] - step_m
    last_second = (
        f"{1000 * tail.min():+.1f} to {1000 * tail.max():+.1f} mm from the set-point over the last second, "
        f"against a band of ±{1000 * _SETTLING_BAND * abs(step_m):.1f} mm"
    )
    slowest_s = -dt_s / math.log(biggest) if biggest > 0.0 else 0.0
    seconds = len(x) * dt_s
    if seconds < _DIED_AWAY * slowest_s:
        return (
            f"it is still approaching the set-point when the {seconds:g} s prediction ends "
            f"({last_second}; the slowest pole's time constant is {slowest_s:.2f} s)" + saturated
        )
    return (
        f"it keeps off the set-point long after the slowest pole (time constant {slowest_s:.2f} s) has died "
        f"away ({last_second}): Coulomb friction, the drive's dead band and encoder steps, which the "
        "linear model leaves out" + saturated
    )


def _settled_or_why(figures: StepFigures, why) -> StepFigures:
    """``figures`` with the reason it never settles filled in (``why()``) when it does not."""
    if math.isfinite(figures.settling_time_s) and math.isfinite(figures.rise_time_s):
        return figures
    return replace(figures, unsettled_reason=why())


def linear_step(design: BalanceDesign, step_m: float, seconds: float = _STEP_DURATION_S,
                soft_limit_m: float = math.inf, fall_angle_rad: float = math.inf) -> StepFigures:
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
    return _settled_or_why(
        step_figures(step_m, design.dt_s, x, theta),
        lambda: why_unsettled(step_m, design.dt_s, x, theta, design.poles(),
                              soft_limit_m=soft_limit_m, fall_angle_rad=fall_angle_rad),
    )


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
    return _settled_or_why(
        step_figures(step_m, loop.dt_s, x, theta, balance.saturated_samples),
        lambda: why_unsettled(step_m, loop.dt_s, x, theta, controls.design.poles(),
                              soft_limit_m=controls.soft_limit_m, fall_angle_rad=controls.window.fall_angle_rad,
                              saturated_samples=balance.saturated_samples),
    )


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
class LqrWeights:
    """The weights the gains were designed with (``integral_weight`` None without integral action)."""

    q_diag: tuple[float, float, float, float]
    r: float
    integral_weight: float | None


@dataclass(frozen=True)
class DesignReport:
    design: BalanceDesign
    weights: LqrWeights
    margins: LoopMargins
    continuous_margins: LoopMargins
    linear: StepFigures
    nonlinear: StepFigures
    recoverable_angle_rad: float
    soft_limit_m: float
    derived: tuple[DerivedValue, ...]  # config values the file left out, derived from the rig

    def to_json(self) -> dict:
        """The report as strict JSON: non-finite figures (never settles, no crossing) become null."""
        d = self.design
        poles = d.poles()
        return finite_or_null({
            "K": list(d.k),
            "Ki": d.ki,
            "Nbar": d.nbar,
            "weights": asdict(self.weights),
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
            "derived": [
                {"field": v.field, "value": v.value, "unit": v.unit, "from": v.source} for v in self.derived
            ],
        })


def design_report(config: PoiseConfig, step_m: float | None = None) -> DesignReport:
    """Design the balance gains for ``config`` afresh (ignoring ``[balance] gains``) and predict their behaviour."""
    controls = build_control_set(config, use_config_gains=False)
    step = step_m if step_m is not None else config.balance.step_m
    if step >= controls.soft_limit_m:
        raise ValueError(f"a {step} m set-point step would pass the soft limit ±{controls.soft_limit_m:.3f} m")
    d = controls.design
    k = d.k_full
    balance = config.balance
    return DesignReport(
        design=d,
        weights=LqrWeights(balance.q_diag, balance.r, balance.integral_weight if balance.integral_action else None),
        margins=loop_margins(*_loop_model(d), k, d.dt_s),
        continuous_margins=loop_margins(d.a, d.b, np.array(d.k_continuous), None),
        linear=linear_step(d, step, soft_limit_m=controls.soft_limit_m,
                           fall_angle_rad=controls.window.fall_angle_rad),
        nonlinear=nonlinear_step(config, controls, step),
        recoverable_angle_rad=largest_recoverable_angle(config, controls),
        soft_limit_m=controls.soft_limit_m,
        derived=config.derived,
    )


def _loop_model(d: BalanceDesign) -> tuple[np.ndarray, np.ndarray]:
    """``(Ad, Bd)`` of the loop the gains close (augmented with the integrator if there is one)."""
    if d.ki:
        return augment_with_integrator(d.ad, d.bd, np.array([[1.0, 0.0, 0.0, 0.0]]), d.dt_s)
    return d.ad, d.bd
