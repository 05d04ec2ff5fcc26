"""The plant's equations of motion and their linearisation, checked against outside references.

Florian's published frictionless equations, a Newton-Euler solve of the free
bodies (with friction and the motor rotor as its own body), a published
state-space model, and a finite-difference Jacobian of the nonlinear model.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from sim_device.plant import (
    DriveParams,
    PlantParams,
    TrackParams,
    linearise,
    state_derivative,
)

TRACK = TrackParams(length_m=100.0, switch_inset_m=0.05)
FORCE_DRIVE = DriveParams(
    kind="force",
    limit=1000.0,
    torque_constant_nm_per_a=1.0,
    resistance_ohm=1.0,
    gear_ratio=1.0,
    pulley_radius_m=1.0,
)


def random_voltage_rig(rng: np.random.Generator) -> PlantParams:
    """A plausible rig with every friction term, back-EMF and rotor inertia switched on."""
    drive = DriveParams(
        kind="voltage",
        limit=24.0,
        torque_constant_nm_per_a=rng.uniform(0.01, 0.1),
        resistance_ohm=rng.uniform(0.5, 5.0),
        gear_ratio=rng.uniform(1.0, 5.0),
        pulley_radius_m=rng.uniform(0.005, 0.03),
        rotor_inertia_kgm2=rng.uniform(0.0, 2e-5),
    )
    return PlantParams(
        cart_mass_kg=rng.uniform(0.3, 3.0),
        pendulum_mass_kg=rng.uniform(0.05, 0.5),
        com_distance_m=rng.uniform(0.1, 0.6),
        inertia_com_kgm2=rng.uniform(0.0, 0.01),
        gravity_mps2=9.81,
        cart_viscous_n_per_mps=rng.uniform(0.0, 5.0),
        cart_coulomb_n=rng.uniform(0.0, 1.0),
        pivot_viscous_nms_per_rad=rng.uniform(0.0, 0.01),
        drive=drive,
        track=TRACK,
    )


# --- R. V. Florian, "Correct equations for the dynamics of the cart-pole system", 2007 ------------
# Frictionless case of his equations (as Barto, Sutton & Anderson 1983 without friction):
#   th'' = [g sin th + cos th * (-F - m_p l th'^2 sin th)/(m_c + m_p)]
#          / [l (4/3 - m_p cos^2 th/(m_c + m_p))]
#   x''  = [F + m_p l (th'^2 sin th - th'' cos th)] / (m_c + m_p)
# for a uniform pole with its centre of mass l from the pivot (I = m_p l^2 / 3 about it).
# His angle is positive clockwise (pushing the cart to +x gives th'' < 0): th_Florian = -theta.


def florian_accelerations(
    m_c: float, m_p: float, l: float, g: float, force: float, th: float, th_dot: float
) -> tuple[float, float]:
    total = m_c + m_p
    th_ddot = (
        g * math.sin(th) + math.cos(th) * (-force - m_p * l * th_dot**2 * math.sin(th)) / total
    ) / (l * (4.0 / 3.0 - m_p * math.cos(th) ** 2 / total))
    x_ddot = (force + m_p * l * (th_dot**2 * math.sin(th) - th_ddot * math.cos(th))) / total
    return x_ddot, th_ddot


def test_frictionless_accelerations_match_florian_2007_at_random_states():
    rng = np.random.default_rng(2007)
    for _ in range(200):
        m_c, m_p, l = rng.uniform(0.2, 3.0), rng.uniform(0.05, 1.0), rng.uniform(0.1, 1.0)
        params = PlantParams(
            cart_mass_kg=m_c,
            pendulum_mass_kg=m_p,
            com_distance_m=l,
            inertia_com_kgm2=m_p * l * l / 3.0,
            gravity_mps2=9.8,
            drive=FORCE_DRIVE,
            track=TRACK,
        )
        theta, omega = rng.uniform(-2 * math.pi, 2 * math.pi), rng.uniform(-10, 10)
        force, v = rng.uniform(-20, 20), rng.uniform(-2, 2)
        _, a, _, alpha = state_derivative(params, (0.0, v, theta, omega), force)
        x_ddot, th_ddot_florian = florian_accelerations(m_c, m_p, l, 9.8, force, -theta, -omega)
        assert a == pytest.approx(x_ddot, rel=1e-9, abs=1e-9)
        assert alpha == pytest.approx(-th_ddot_florian, rel=1e-9, abs=1e-9)


# --- Newton-Euler on the free bodies --------------------------------------------------------------
# Bodies: cart (mass M), pendulum (m, I about its centre of mass, pivot l from it), motor rotor
# (inertia J_r, turning at G v / r). Unknowns: cart acceleration a, pendulum alpha, pivot reaction
# on the pendulum (N_x, N_y), belt force on the cart F_b.
#   cart:      M a = F_b - b v - f_c - N_x
#   pendulum:  m (a - l c alpha + l s w^2) = N_x            (centre of mass x = x - l s)
#              m (-l s alpha - l c w^2)    = N_y - m g       (centre of mass y = l c)
#              I alpha = l s N_y + l c N_x - b_p w           (moments about the centre of mass;
#                                                             pivot at (l s, -l c) from it)
#   rotor:     J_r (G/r) a = Kt i - (r/G) F_b,  i = (V_eff - Kt G v / r) / R


def newton_euler_accelerations(
    p: PlantParams, state, volts_effective: float
) -> tuple[float, float]:
    _x, v, th, w = state
    d = p.drive
    m, l, inertia = p.pendulum_mass_kg, p.com_distance_m, p.inertia_com_kgm2
    s, c = math.sin(th), math.cos(th)
    current = (
        volts_effective - d.torque_constant_nm_per_a * d.gear_ratio * v / d.pulley_radius_m
    ) / (d.resistance_ohm)
    f_c = p.cart_coulomb_n * math.copysign(1.0, v)
    # fmt: off
    #              a                                          alpha      N_x      N_y  F_b
    lhs = np.array([
        [p.cart_mass_kg,                                      0.0,       1.0,     0.0, -1.0],
        [m,                                                   -m * l * c, -1.0,   0.0, 0.0],
        [0.0,                                                 -m * l * s, 0.0,   -1.0, 0.0],
        [0.0,                                                 inertia,   -l * c, -l * s, 0.0],
        [d.rotor_inertia_kgm2 * d.gear_ratio / d.pulley_radius_m, 0.0,   0.0,     0.0,
         d.pulley_radius_m / d.gear_ratio],
    ])
    rhs = np.array([
        -p.cart_viscous_n_per_mps * v - f_c,
        -m * l * s * w * w,
        m * l * c * w * w - m * p.gravity_mps2,
        -p.pivot_viscous_nms_per_rad * w,
        d.torque_constant_nm_per_a * current,
    ])
    # fmt: on
    a, alpha, *_ = np.linalg.solve(lhs, rhs)
    return a, alpha


def test_accelerations_with_friction_and_motor_match_a_newton_euler_solve():
    rng = np.random.default_rng(31)
    for _ in range(300):
        params = random_voltage_rig(rng)
        state = (
            rng.uniform(-0.4, 0.4),
            rng.choice([-1, 1]) * rng.uniform(1e-3, 2.0),
            rng.uniform(-7, 7),
            rng.uniform(-15, 15),
        )
        volts = rng.uniform(-20, 20)  # inside the limit, no dead band: V_eff = V
        _, a, _, alpha = state_derivative(params, state, volts)
        a_ne, alpha_ne = newton_euler_accelerations(params, state, volts)
        assert a == pytest.approx(a_ne, rel=1e-9, abs=1e-9)
        assert alpha == pytest.approx(alpha_ne, rel=1e-9, abs=1e-9)


def holding_friction_newton_euler(p: PlantParams, state, force: float) -> float:
    """Friction (opposing +x) that keeps the cart at rest: the free-body equations with a = 0."""
    _x, _v, th, w = state
    m, l, inertia = p.pendulum_mass_kg, p.com_distance_m, p.inertia_com_kgm2
    s, c = math.sin(th), math.cos(th)
    # unknowns: alpha, N_x, N_y, f   (cart: 0 = F - f - N_x)
    # fmt: off
    lhs = np.array([
        [0.0,        1.0,    0.0,   1.0],
        [-m * l * c, -1.0,   0.0,   0.0],
        [-m * l * s, 0.0,    -1.0,  0.0],
        [inertia,    -l * c, -l * s, 0.0],
    ])
    rhs = np.array([force, -m * l * s * w * w, m * l * c * w * w - m * p.gravity_mps2,
                    -p.pivot_viscous_nms_per_rad * w])
    # fmt: on
    return float(np.linalg.solve(lhs, rhs)[3])


@pytest.mark.parametrize("seed", range(20))
def test_cart_at_rest_sticks_exactly_when_the_holding_force_is_within_coulomb(seed):
    rng = np.random.default_rng(seed)
    base = PlantParams(
        cart_mass_kg=1.0,
        pendulum_mass_kg=0.2,
        com_distance_m=0.3,
        inertia_com_kgm2=0.004,
        pivot_viscous_nms_per_rad=0.002,
        drive=FORCE_DRIVE,
        track=TRACK,
    )
    state = (0.0, 0.0, rng.uniform(-math.pi, math.pi), rng.uniform(-6, 6))
    force = rng.uniform(-2, 2)
    hold = holding_friction_newton_euler(base, state, force)
    for coulomb, sticks in ((abs(hold) * 1.01, True), (abs(hold) * 0.99, False)):
        params = replace(base, cart_coulomb_n=coulomb)
        _, a, _, _ = state_derivative(params, state, force)
        if sticks:
            assert a == 0.0
        else:
            assert a != 0.0 and math.copysign(1.0, a) == math.copysign(1.0, hold)


# --- Linearisation --------------------------------------------------------------------------------
# Control Tutorials for MATLAB and Simulink (University of Michigan), "Inverted Pendulum:
# State-Space Methods for Controller Design": M = 0.5, m = 0.2, b = 0.1, l = 0.3, I = 0.006,
# g = 9.8, force input, state [x, x', phi, phi'] with phi the deviation from upright in the
# same sense as theta here (so no mapping is needed).
TUTORIAL_A = [[0, 1, 0, 0], [0, -0.1818, 2.6727, 0], [0, 0, 0, 1], [0, -0.4545, 31.1818, 0]]
TUTORIAL_B = [0, 1.8182, 0, 4.5455]


def test_upright_linearisation_reproduces_the_control_tutorials_state_space_model():
    params = PlantParams(
        cart_mass_kg=0.5,
        pendulum_mass_kg=0.2,
        com_distance_m=0.3,
        inertia_com_kgm2=0.006,
        gravity_mps2=9.8,
        cart_viscous_n_per_mps=0.1,
        drive=FORCE_DRIVE,
        track=TRACK,
    )
    a_mat, b_vec = linearise(params, "upright")
    # four significant digits as printed: within half a unit of the last printed decimal
    np.testing.assert_allclose(a_mat, TUTORIAL_A, rtol=0, atol=5e-5)
    np.testing.assert_allclose(b_vec, TUTORIAL_B, rtol=0, atol=5e-5)


def numerical_jacobian(params: PlantParams, state0, step: float = 1e-6):
    def f(state, u):
        return np.array(state_derivative(params, tuple(state), u))

    a_mat = np.zeros((4, 4))
    for j in range(4):
        dx = np.zeros(4)
        dx[j] = step
        a_mat[:, j] = (f(state0 + dx, 0.0) - f(state0 - dx, 0.0)) / (2 * step)
    b_vec = (f(state0, step) - f(state0, -step)) / (2 * step)
    return a_mat, b_vec


@pytest.mark.parametrize("about, theta0", [("upright", 0.0), ("hanging", math.pi)])
@pytest.mark.parametrize("kind", ["voltage", "force"])
def test_analytic_jacobian_matches_finite_differences_of_the_nonlinear_model(about, theta0, kind):
    rng = np.random.default_rng(7)
    for _ in range(10):
        rig = random_voltage_rig(rng)
        drive = replace(rig.drive, kind=kind)
        params = replace(rig, cart_coulomb_n=0.0, drive=drive)
        a_mat, b_vec = linearise(params, about)
        a_num, b_num = numerical_jacobian(params, np.array([0.0, 0.0, theta0, 0.0]))
        scale = np.abs(a_num).max()
        np.testing.assert_allclose(a_mat, a_num, rtol=1e-6, atol=1e-7 * scale)
        np.testing.assert_allclose(b_vec, b_num, rtol=1e-6, atol=1e-9)


def test_linearisation_leaves_out_coulomb_friction_and_uses_the_drive_slope_above_the_dead_band():
    rig = random_voltage_rig(np.random.default_rng(3))
    plain = replace(rig, cart_coulomb_n=0.0)
    drive = replace(rig.drive, dead_band=0.5)
    rough = replace(rig, cart_coulomb_n=0.8, drive=drive)
    for about in ("upright", "hanging"):
        for got, want in zip(linearise(rough, about), linearise(plain, about), strict=True):
            np.testing.assert_array_equal(got, want)


def test_upright_is_unstable_and_hanging_is_stable():
    params = random_voltage_rig(np.random.default_rng(11))
    upright = np.linalg.eigvals(linearise(params, "upright")[0])
    hanging = np.linalg.eigvals(linearise(params, "hanging")[0])
    assert upright.real.max() > 0.1
    assert hanging.real.max() <= 1e-12


def test_linearise_rejects_an_unknown_equilibrium_by_name():
    params = random_voltage_rig(np.random.default_rng(0))
    with pytest.raises(ValueError, match="about must be 'upright' or 'hanging'"):
        linearise(params, "sideways")  # type: ignore[arg-type]
