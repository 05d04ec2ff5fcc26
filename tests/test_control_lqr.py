"""LQR design, reference gain, loop margins and the predicted step response, against outside references."""

import math

import control
import numpy as np
import pytest

from daemon.control.design_report import linear_step
from daemon.control.lqr import (
    continuous_lqr,
    discrete_lqr,
    discretise_zoh,
    reference_gain,
)
from daemon.control.margins import loop_margins
from sim_device.plant import DriveParams, PlantParams, TrackParams, linearise

CART_X = np.array([[1.0, 0.0, 0.0, 0.0]])


def tutorial_plant() -> PlantParams:
    """Control Tutorials for MATLAB and Simulink (CTMS), "Inverted Pendulum: System Modeling":
    M = 0.5 kg, m = 0.2 kg, b = 0.1 N/(m/s), l = 0.3 m, I = 0.006 kg m^2, g = 9.8, force input."""
    force = DriveParams(kind="force", limit=1e6, torque_constant_nm_per_a=1.0, resistance_ohm=1.0,
                        gear_ratio=1.0, pulley_radius_m=1.0)
    return PlantParams(cart_mass_kg=0.5, pendulum_mass_kg=0.2, com_distance_m=0.3, inertia_com_kgm2=0.006,
                       gravity_mps2=9.8, cart_viscous_n_per_mps=0.1, drive=force,
                       track=TrackParams(length_m=100.0, switch_inset_m=0.0))


def test_tutorial_continuous_lqr_gains_weighting_angle_and_position_equally():
    a, b = linearise(tutorial_plant())
    k = continuous_lqr(a, b, np.diag([1.0, 0.0, 1.0, 0.0]), 1.0)[0]
    # CTMS, "Inverted Pendulum: State-Space Methods for Controller Design": K = [-1.0000 -1.6567 18.6854 3.4594]
    assert k == pytest.approx([-1.0000, -1.6567, 18.6854, 3.4594], abs=1e-4)


def test_tutorial_continuous_lqr_gains_and_reference_gain_for_heavy_weights():
    a, b = linearise(tutorial_plant())
    k = continuous_lqr(a, b, np.diag([5000.0, 0.0, 100.0, 0.0]), 1.0)
    # CTMS state-space page: K = [-70.7107 -37.8345 105.5298 20.9238], Nbar = -70.7107
    assert k[0] == pytest.approx([-70.7107, -37.8345, 105.5298, 20.9238], abs=1e-4)
    assert reference_gain(a, b, k, CART_X, discrete=False) == pytest.approx(-70.7107, abs=1e-4)


def test_tutorial_digital_lqr_at_100_hz():
    a, b = linearise(tutorial_plant())
    ad, bd = discretise_zoh(a, b, 0.01)
    k = discrete_lqr(ad, bd, np.diag([5000.0, 0.0, 100.0, 0.0]), 1.0)[0]
    # CTMS, "Inverted Pendulum: Digital Controller Design" (ZOH, Ts = 1/100 s):
    # K = [-61.9933 -33.5040 95.0597 18.8300]
    assert k == pytest.approx([-61.9933, -33.5040, 95.0597, 18.8300], abs=1e-4)


def test_zoh_discretisation_matches_python_control():
    a, b = linearise(tutorial_plant())
    ad, bd = discretise_zoh(a, b, 0.002)
    # python-control's c2d (zero-order hold) as the independent reference
    ref = control.c2d(control.ss(a, b.reshape(-1, 1), np.eye(4), 0), 0.002, method="zoh")
    assert ad == pytest.approx(ref.A, abs=1e-12)
    assert bd == pytest.approx(ref.B, abs=1e-12)


def test_tutorial_step_response_meets_the_tutorials_design_requirements():
    a, b = linearise(tutorial_plant())
    q = np.diag([5000.0, 0.0, 100.0, 0.0])
    k = continuous_lqr(a, b, q, 1.0)
    dt = 0.001
    ad, bd = discretise_zoh(a, b, dt)

    class Design:  # the continuous design evaluated on a fine ZOH grid
        dt_s = dt
        nbar = reference_gain(a, b, k, CART_X, discrete=False)

        def closed_loop_matrix(self):
            return ad - bd @ k

    Design.bd = bd
    figures = linear_step(Design(), 0.2)
    # CTMS state-space page requirements for a 0.2 m step: settling time of x and theta < 5 s,
    # rise time of x < 0.5 s, theta within 20 degrees (0.35 rad), steady-state error < 2 %.
    assert figures.settling_time_s < 5.0
    assert figures.rise_time_s < 0.5
    assert figures.peak_angle_rad < 0.35
    assert figures.steady_state_error_pct < 2.0


def random_stabilisable(rng: np.random.Generator, n: int, m: int) -> tuple[np.ndarray, np.ndarray]:
    while True:
        a = rng.normal(size=(n, n))
        b = rng.normal(size=(n, m))
        ctrb = np.hstack([np.linalg.matrix_power(a, i) @ b for i in range(n)])
        if np.linalg.matrix_rank(ctrb) == n:
            return a, b


@pytest.mark.parametrize("seed", range(6))
def test_continuous_lqr_matches_slicot(seed):
    rng = np.random.default_rng(seed)
    n, m = 3 + seed % 3, 1 + seed % 2
    a, b = random_stabilisable(rng, n, m)
    h = rng.normal(size=(n, n))
    q = h @ h.T + 0.1 * np.eye(n)
    r = np.diag(rng.uniform(0.5, 3.0, size=m))
    # python-control with method='slycot' solves the Riccati equation with SLICOT (SB02MD), not scipy
    k_ref, _s, _e = control.lqr(a, b, q, r, method="slycot")
    assert continuous_lqr(a, b, q, r) == pytest.approx(np.asarray(k_ref), rel=1e-7, abs=1e-9)


@pytest.mark.parametrize("seed", range(6))
def test_discrete_lqr_matches_slicot(seed):
    rng = np.random.default_rng(100 + seed)
    n, m = 3 + seed % 3, 1 + seed % 2
    a, b = random_stabilisable(rng, n, m)
    ad, bd = discretise_zoh(a, b, 0.05)
    q = np.diag(rng.uniform(0.1, 10.0, size=n))
    r = np.diag(rng.uniform(0.5, 3.0, size=m))
    k_ref, _s, _e = control.dlqr(ad, bd, q, r, method="slycot")
    assert discrete_lqr(ad, bd, q, r) == pytest.approx(np.asarray(k_ref), rel=1e-7, abs=1e-9)


@pytest.mark.parametrize("seed", range(4))
def test_continuous_lqr_has_at_least_60_degrees_phase_margin(seed):
    # Anderson & Moore, "Optimal Control: Linear Quadratic Methods" (1990), ch. 5: a single-input
    # continuous LQR loop broken at the input has phase margin >= 60 degrees and gain margin [1/2, inf).
    rng = np.random.default_rng(200 + seed)
    a, b = random_stabilisable(rng, 4, 1)
    k = continuous_lqr(a, b, np.diag(rng.uniform(0.1, 100.0, size=4)), rng.uniform(0.1, 10.0))
    margins = loop_margins(a, b, k, None)
    assert margins.phase_margin_deg >= 60.0 - 1e-6
    assert margins.gain_margin_lower <= 0.5 + 1e-6
    assert margins.gain_margin_upper == math.inf


def test_discrete_gain_margins_put_a_closed_loop_pole_on_the_unit_circle():
    a, b = linearise(tutorial_plant())
    ad, bd = discretise_zoh(a, b, 0.01)
    k = discrete_lqr(ad, bd, np.diag([5000.0, 0.0, 100.0, 0.0]), 1.0)
    margins = loop_margins(ad, bd, k, 0.01)
    for factor in (margins.gain_margin_upper, margins.gain_margin_lower):
        radius = max(abs(np.linalg.eigvals(ad - factor * bd @ k)))
        assert radius == pytest.approx(1.0, abs=1e-6)
    # inside the margins the loop is stable, just outside it is not
    inside = max(abs(np.linalg.eigvals(ad - 0.99 * margins.gain_margin_upper * bd @ k)))
    outside = max(abs(np.linalg.eigvals(ad - 1.01 * margins.gain_margin_upper * bd @ k)))
    assert inside < 1.0 < outside


def test_phase_margin_agrees_with_python_control_stability_margins():
    a, b = linearise(tutorial_plant())
    k = continuous_lqr(a, b, np.diag([1.0, 0.0, 1.0, 0.0]), 1.0)
    loop = control.ss(a, b.reshape(-1, 1), k, 0)
    # python-control's margin() on the same loop transfer (independent implementation)
    _gm, pm, _wcg, _wcp = control.margin(loop)
    assert loop_margins(a, b, k, None).phase_margin_deg == pytest.approx(pm, abs=0.05)
