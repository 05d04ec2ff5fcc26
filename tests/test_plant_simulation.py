"""The stepped plant: periods, energy, stiction, end stops, switches, impulses, determinism."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.special import ellipk

from sim_device.plant import DriveParams, Plant, PlantParams, TrackParams

FORCE_DRIVE = DriveParams(
    kind="force",
    limit=50.0,
    torque_constant_nm_per_a=1.0,
    resistance_ohm=1.0,
    gear_ratio=1.0,
    pulley_radius_m=1.0,
)
FRICTIONLESS = PlantParams(
    cart_mass_kg=0.8,
    pendulum_mass_kg=0.15,
    com_distance_m=0.25,
    inertia_com_kgm2=0.003,
    drive=FORCE_DRIVE,
    track=TrackParams(length_m=100.0, switch_inset_m=0.05),
)
DT_S = 0.001  # 1 kHz sample period, the rate the checks are stated at


def swing_period_s(params: PlantParams, release_from_hanging_rad: float, swings: int) -> float:
    """Mean period of a free swing released from rest with the cart held.

    Times the upward zero crossings of theta - pi, interpolated linearly between samples
    (theta'' is zero at a crossing, so the interpolation error is third order).
    """
    plant = Plant(params, (0.0, 0.0, math.pi - release_from_hanging_rad, 0.0))
    plant.hold_cart(True)
    crossings: list[float] = []
    t, previous = 0.0, -release_from_hanging_rad
    while len(crossings) < swings + 1:
        plant.step(0.0, DT_S)
        t += DT_S
        deviation = plant.state[2] - math.pi
        if previous < 0.0 <= deviation:
            crossings.append(t - DT_S * deviation / (deviation - previous))
        previous = deviation
    return (crossings[-1] - crossings[0]) / swings


def pivot_inertia(params: PlantParams) -> float:
    return params.inertia_com_kgm2 + params.pendulum_mass_kg * params.com_distance_m**2


def test_small_angle_period_is_the_physical_pendulum_formula():
    # Physical pendulum, T = 2 pi sqrt((I + m l^2) / (m g l)): Halliday, Resnick & Walker,
    # "Fundamentals of Physics" (physical pendulum). A 1 degree release lengthens T by ~2e-5.
    p = FRICTIONLESS
    expected = (
        2
        * math.pi
        * math.sqrt(pivot_inertia(p) / (p.pendulum_mass_kg * p.gravity_mps2 * p.com_distance_m))
    )
    assert swing_period_s(p, math.radians(1.0), swings=5) == pytest.approx(expected, rel=1e-4)


@pytest.mark.parametrize("release_deg", [30.0, 90.0, 150.0])
def test_large_amplitude_period_matches_the_complete_elliptic_integral(release_deg):
    # Exact period T = 4 sqrt(J / (m g l)) K(k), k = sin(theta0 / 2) (e.g. L. D. Landau &
    # E. M. Lifshitz, "Mechanics", 1976, sec. 11 problem 1); scipy.special.ellipk takes m = k^2.
    p = FRICTIONLESS
    k = math.sin(math.radians(release_deg) / 2)
    expected = (
        4
        * math.sqrt(pivot_inertia(p) / (p.pendulum_mass_kg * p.gravity_mps2 * p.com_distance_m))
        * ellipk(k * k)
    )
    assert swing_period_s(p, math.radians(release_deg), swings=4) == pytest.approx(
        expected, rel=1e-3
    )


def test_total_energy_drifts_less_than_1e_6_over_60_s_at_1_khz_with_friction_off():
    plant = Plant(FRICTIONLESS, (0.0, 0.2, math.pi - 2.5, 1.0))
    e0 = plant.total_energy()
    worst = 0.0
    for _ in range(60_000):
        plant.step(0.0, DT_S)
        worst = max(worst, abs(plant.total_energy() - e0))
    assert worst / e0 < 1e-6
    assert abs(plant.state[0]) < FRICTIONLESS.track.length_m / 2  # never reached an end stop


def test_energy_never_rises_with_every_loss_switched_on():
    drive = DriveParams(
        kind="voltage",
        limit=12.0,
        torque_constant_nm_per_a=0.04,
        resistance_ohm=2.0,
        gear_ratio=2.0,
        pulley_radius_m=0.015,
        rotor_inertia_kgm2=1e-6,
    )
    params = replace(
        FRICTIONLESS,
        drive=drive,
        cart_viscous_n_per_mps=1.0,
        cart_coulomb_n=0.3,
        pivot_viscous_nms_per_rad=0.001,
        track=TrackParams(0.6, 0.02),
    )
    plant = Plant(params, (0.0, 0.8, math.pi - 2.0, 4.0))
    energy = plant.total_energy()
    for _ in range(5_000):
        plant.step(0.0, DT_S)
        now = plant.total_energy()
        assert now <= energy + 1e-12
        energy = now
    at_rest = Plant(params, (0.0, 0.0, math.pi, 0.0)).total_energy()  # the lowest there is
    start = Plant(params, (0.0, 0.8, math.pi - 2.0, 4.0)).total_energy()
    assert energy - at_rest < 0.5 * (start - at_rest)


# --- Coulomb stiction -----------------------------------------------------------------------------


@pytest.mark.parametrize("force_n", [0.49, -0.49, 0.0])
def test_cart_at_rest_stays_exactly_still_while_the_force_is_below_coulomb(force_n):
    plant = Plant(replace(FRICTIONLESS, cart_coulomb_n=0.5))
    for _ in range(2_000):
        plant.step(force_n, DT_S)
    assert plant.state[:2] == (0.0, 0.0)


@pytest.mark.parametrize("force_n", [0.51, -0.51])
def test_cart_at_rest_moves_off_in_the_force_direction_once_above_coulomb(force_n):
    plant = Plant(replace(FRICTIONLESS, cart_coulomb_n=0.5))
    for _ in range(200):
        plant.step(force_n, DT_S)
    x, v, _, _ = plant.state
    assert math.copysign(1.0, x) == math.copysign(1.0, v) == math.copysign(1.0, force_n)


def test_a_coasting_cart_comes_to_rest_and_then_stays_exactly_still():
    plant = Plant(replace(FRICTIONLESS, cart_coulomb_n=0.5), (0.0, 0.3, math.pi, 0.0))
    for _ in range(3_000):
        plant.step(0.0, DT_S)
    x_settled = plant.state[0]
    for _ in range(1_000):
        plant.step(0.0, DT_S)
        assert plant.state[0] == x_settled and plant.state[1] == 0.0
    # decelerates at roughly coulomb / (M + m): v^2 / (2 a) with the pendulum sloshing along
    assert x_settled == pytest.approx(0.3**2 / (2 * 0.5 / 0.95), rel=0.15)


# --- Track ----------------------------------------------------------------------------------------


def test_end_stop_stops_the_cart_dead_at_the_track_end_and_reports_it():
    params = replace(FRICTIONLESS, track=TrackParams(length_m=0.8, switch_inset_m=0.03))
    plant = Plant(params)
    touched_at = None
    for i in range(2_000):
        plant.step(5.0, DT_S)
        if plant.end_stop_touched and touched_at is None:
            touched_at = i
    assert touched_at is not None
    x, v, _, _ = plant.state
    assert x == 0.4 and v == 0.0
    for _ in range(100):
        plant.step(-5.0, DT_S)  # drives away again
    assert plant.state[0] < 0.4 and not plant.end_stop_touched


def test_end_stop_keeps_the_pendulum_momentum_about_the_pivot():
    # The stop's impulse acts on the cart only, so J w - m l cos(th) v is unchanged across it.
    p = replace(
        FRICTIONLESS, track=TrackParams(length_m=0.8, switch_inset_m=0.03), gravity_mps2=1e-9
    )
    theta, v0, w0 = 2.5, 0.6, 0.4
    plant = Plant(p, (0.4 - 1e-9, v0, theta, w0), substeps=1)
    plant.step(0.0, 1e-7)
    _, v, th, w = plant.state
    ml = p.pendulum_mass_kg * p.com_distance_m
    assert v == 0.0 and plant.end_stop_touched
    assert pivot_inertia(p) * w == pytest.approx(
        pivot_inertia(p) * w0 - ml * math.cos(theta) * v0, rel=1e-5
    )
    assert th == pytest.approx(theta, abs=1e-6)


def test_limit_switches_trip_at_the_inset_from_each_end():
    track = TrackParams(length_m=0.9, switch_inset_m=0.03)
    plant = Plant(replace(FRICTIONLESS, track=track))
    # the switches trip at |x| >= 0.45 - 0.03 = 0.42
    expectations = {
        0.0: (False, False),
        0.4199: (False, False),
        0.4201: (False, True),
        0.45: (False, True),
        -0.4199: (False, False),
        -0.4201: (True, False),
        -0.45: (True, False),
    }
    for x, switches in expectations.items():
        plant.set_state((x, 0.0, math.pi, 0.0))
        assert plant.limit_switches == switches, x
    without = Plant(
        replace(FRICTIONLESS, track=replace(track, has_limit_switches=False)), (0.45, 0, math.pi, 0)
    )
    assert without.limit_switches == (False, False)


# --- Impulses -------------------------------------------------------------------------------------


def momenta(p: PlantParams, state) -> tuple[float, float]:
    """Total horizontal momentum; pendulum angular momentum about the fixed point at the pivot.

    From the bodies directly: cart M v, pendulum m v_com; I w + r x m v_com with r pivot -> COM.
    """
    _x, v, th, w = state
    m, l = p.pendulum_mass_kg, p.com_distance_m
    r = np.array([-l * math.sin(th), l * math.cos(th), 0.0])
    v_com = np.array([v, 0.0, 0.0]) + np.cross([0.0, 0.0, w], r)
    linear = p.cart_mass_kg * v + m * v_com[0]
    angular = p.inertia_com_kgm2 * w + m * np.cross(r, v_com)[2]
    return linear, angular


def test_impulses_change_linear_and_pivot_angular_momentum_by_exactly_the_impulse():
    rng = np.random.default_rng(5)
    p = FRICTIONLESS
    for _ in range(50):
        state = (0.0, rng.uniform(-1, 1), rng.uniform(-4, 4), rng.uniform(-5, 5))
        pendulum_ns, cart_ns = rng.uniform(-0.5, 0.5), rng.uniform(-0.5, 0.5)
        plant = Plant(p, state)
        plant.apply_impulse(pendulum_ns=pendulum_ns, cart_ns=cart_ns)
        (lin0, ang0), (lin1, ang1) = momenta(p, state), momenta(p, plant.state)
        r_y = p.com_distance_m * math.cos(state[2])
        assert lin1 - lin0 == pytest.approx(pendulum_ns + cart_ns, abs=1e-12)
        assert ang1 - ang0 == pytest.approx(
            -r_y * pendulum_ns, abs=1e-12
        )  # r x (P, 0) about the pivot
        assert plant.state[::2] == state[::2]  # positions do not jump


def test_impulse_on_a_held_cart_only_turns_the_pendulum():
    p = FRICTIONLESS
    plant = Plant(p, (0.1, 0.0, math.pi - 0.3, 0.0))
    plant.hold_cart(True)
    plant.apply_impulse(pendulum_ns=0.05, cart_ns=1.0)
    _, v, th, w = plant.state
    assert v == 0.0
    assert pivot_inertia(p) * w == pytest.approx(-p.com_distance_m * math.cos(th) * 0.05, rel=1e-12)


def test_holding_the_cart_keeps_it_still_under_any_command():
    plant = Plant(FRICTIONLESS, (0.1, 0.0, math.pi - 1.0, 0.0))
    plant.hold_cart(True)
    for _ in range(500):
        plant.step(40.0, DT_S)
    assert plant.state[:2] == (0.1, 0.0) and plant.held
    plant.hold_cart(False)
    plant.step(40.0, DT_S)
    assert plant.state[1] > 0.0


# --- Determinism ----------------------------------------------------------------------------------


def test_identical_inputs_give_bit_identical_trajectories():
    params = replace(
        FRICTIONLESS,
        cart_coulomb_n=0.3,
        cart_viscous_n_per_mps=0.5,
        track=TrackParams(length_m=0.6, switch_inset_m=0.02),
    )
    commands = np.random.default_rng(99).uniform(-8, 8, size=3_000).tolist()
    runs = []
    for _ in range(2):
        plant = Plant(params, (0.0, 0.0, 3.0, 0.0))
        trajectory = []
        for u in commands:
            plant.step(u, DT_S)
            trajectory.append(plant.state)
        runs.append(trajectory)
    assert runs[0] == runs[1]
    assert len(set(runs[0])) == len(runs[0])  # and the plant actually moved


def test_each_step_uses_the_force_of_its_own_command():
    # The step's drive force depends only on the command it is given (sim_device/drive.py):
    # a plant stepped through changing, repeated, saturating, dead-band and NaN commands follows
    # the same trajectory, bit for bit, as a fresh plant placed in each state for each step.
    drive = replace(FORCE_DRIVE, limit=10.0, dead_band=0.5)
    params = replace(FRICTIONLESS, drive=drive, cart_coulomb_n=0.2, track=TrackParams(0.9, 0.03))
    commands = [3.0, 3.0, -2.0, 0.3, 0.3, 20.0, -20.0, math.nan, 0.0, -0.0, 6.0, 3.0] * 50
    plant = Plant(params, (0.0, 0.0, math.pi - 0.5, 0.0), substeps=1)
    for u in commands:
        fresh = Plant(params, plant.state, substeps=1)
        plant.step(u, DT_S)
        fresh.step(u, DT_S)
        assert plant.state == fresh.state, u
    assert plant.state[1] != 0.0  # the commands did move the cart


def test_step_rejects_a_non_positive_time_step():
    with pytest.raises(ValueError, match="dt_s must be > 0"):
        Plant(FRICTIONLESS).step(0.0, 0.0)
