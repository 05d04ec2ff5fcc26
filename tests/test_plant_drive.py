"""The drive's force law, the encoder count helpers, and parameter validation."""

from __future__ import annotations

import math

import pytest

from sim_device.plant import (
    DriveParams,
    PlantParams,
    TrackParams,
    applied_command,
    cart_counts,
    cart_force,
    effective_command,
    pendulum_counts,
    theta_from_counts,
    x_from_counts,
)

MOTOR = DriveParams(
    kind="voltage",
    limit=12.0,
    torque_constant_nm_per_a=0.042,
    resistance_ohm=1.9,
    gear_ratio=2.0,
    pulley_radius_m=0.015,
)


def test_voltage_drive_gives_the_motor_stall_force_at_rest():
    # Permanent-magnet DC motor at stall: torque = Kt V / R (A. Hughes & B. Drury, "Electric Motors
    # and Drives", 4th ed. 2013, ch. 3); through gear ratio G and pulley radius r: F = G torque / r.
    stall_torque_nm = 0.042 * 6.0 / 1.9
    assert cart_force(MOTOR, 6.0, 0.0) == pytest.approx(stall_torque_nm * 2.0 / 0.015, rel=1e-12)


def test_voltage_drive_force_vanishes_at_the_no_load_speed_and_falls_linearly_with_speed():
    # No-load speed of a PM DC motor: w0 = V / Ke, Ke = Kt in SI units (Hughes & Drury 2013, ch. 3);
    # the cart moves at w0 r / G there. Torque falls linearly from stall to zero at w0.
    no_load_mps = 6.0 / 0.042 * 0.015 / 2.0
    assert cart_force(MOTOR, 6.0, no_load_mps) == pytest.approx(0.0, abs=1e-12)
    stall = cart_force(MOTOR, 6.0, 0.0)
    assert cart_force(MOTOR, 6.0, 0.25 * no_load_mps) == pytest.approx(0.75 * stall, rel=1e-12)
    assert cart_force(MOTOR, 0.0, -no_load_mps) == pytest.approx(
        stall, rel=1e-12
    )  # back-EMF brakes


def test_force_drive_force_is_the_command_in_newtons_without_back_emf():
    drive = DriveParams(
        kind="force",
        limit=20.0,
        torque_constant_nm_per_a=0.042,
        resistance_ohm=1.9,
        gear_ratio=2.0,
        pulley_radius_m=0.015,
    )
    assert cart_force(drive, 7.5, 3.0) == 7.5
    assert cart_force(drive, -25.0, 0.0) == -20.0


@pytest.mark.parametrize(
    "command, applied, effective",
    [
        (0.0, 0.0, 0.0),
        (0.1, 0.1, 0.0),
        (-0.15, -0.15, 0.0),
        (0.25, 0.25, 0.1),
        (-3.0, -3.0, -2.85),
        (15.0, 12.0, 11.85),
        (-99.0, -12.0, -11.85),
    ],
)
def test_command_saturates_at_the_limit_then_loses_the_dead_band(command, applied, effective):
    drive = DriveParams(
        kind="voltage",
        limit=12.0,
        torque_constant_nm_per_a=0.042,
        resistance_ohm=1.9,
        gear_ratio=2.0,
        pulley_radius_m=0.015,
        dead_band=0.15,
    )
    assert applied_command(drive, command) == applied
    assert effective_command(drive, command) == pytest.approx(effective, abs=1e-12)


def test_pendulum_counts_are_zero_hanging_and_invert_to_within_half_a_count():
    cpr = 4096
    assert pendulum_counts(math.pi, cpr) == 0
    assert pendulum_counts(0.0, cpr) == -2048  # upright, reached counter-clockwise from hanging
    assert pendulum_counts(2 * math.pi, cpr) == 2048
    assert pendulum_counts(math.pi + 5 * 2 * math.pi, cpr) == 5 * cpr  # multi-turn, never wraps
    for theta in (0.123, -7.0, 3.3, 12.0):
        back = theta_from_counts(pendulum_counts(theta, cpr), cpr)
        assert abs(back - theta) <= math.pi / cpr + 1e-12


def test_cart_counts_are_zero_at_the_centre_and_invert_to_within_half_a_count():
    cpm = 173852.0
    assert cart_counts(0.0, cpm) == 0
    assert cart_counts(0.1, cpm) == 17385
    assert cart_counts(-0.1, cpm) == -17385
    for x in (0.4321, -0.3333, 1e-7):
        assert abs(x_from_counts(cart_counts(x, cpm), cpm) - x) <= 0.5 / cpm + 1e-15


def test_bad_parameters_are_rejected_naming_the_field():
    with pytest.raises(ValueError, match=r"drive\.kind must be one of"):
        DriveParams(
            kind="hydraulic",
            limit=1.0,
            torque_constant_nm_per_a=1.0,
            resistance_ohm=1.0,  # type: ignore[arg-type]
            gear_ratio=1.0,
            pulley_radius_m=1.0,
        )
    with pytest.raises(ValueError, match=r"drive\.resistance_ohm must be > 0"):
        DriveParams(
            kind="voltage",
            limit=1.0,
            torque_constant_nm_per_a=1.0,
            resistance_ohm=0.0,
            gear_ratio=1.0,
            pulley_radius_m=1.0,
        )
    with pytest.raises(ValueError, match=r"track\.switch_inset_m must be in"):
        TrackParams(length_m=0.1, switch_inset_m=0.05)
    with pytest.raises(ValueError, match=r"plant\.cart_coulomb_n must be >= 0"):
        PlantParams(
            cart_mass_kg=1.0,
            pendulum_mass_kg=0.1,
            com_distance_m=0.2,
            inertia_com_kgm2=0.0,
            cart_coulomb_n=-1.0,
            drive=MOTOR,
            track=TrackParams(1.0, 0.02),
        )
