"""Map a validated rig config onto the plant model's parameters (the rig's one parameter set).

No silent defaults for the plant: every config field that reaches
:class:`~sim_device.plant.PlantParams` here (track, cart, pendulum, drive) is
required, and so are the encoders and ``sampling.rate_hz``, which set what the
simulated rig measures and how often. Decided field by field, none of them has
a default that is a true physical zero: friction (cart viscous and Coulomb,
pivot viscous), the drive's dead band and the rotor's inertia are never zero on
a real rig, so 0 is a modelling choice the config must state (write ``0.0``),
not something a forgotten line may decide; ``drive.kind``, the motor's
constants and ``track.has_limit_switches`` change what the model is. A force
drive's torque constant and resistance give no force, but are required all
the same: one rule, and the run record holds the whole drive.

Gravity is the plant's default, 9.81 m/s^2, and has no config field.
Controller tuning, interlock and service settings keep their defaults.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from sim_device.plant import DriveParams, PlantParams, TrackParams

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

__all__ = ["plant_params"]


def plant_params(config: PoiseConfig) -> PlantParams:
    """The :class:`PlantParams` described by ``config``'s track, cart, pendulum and drive sections."""
    drive = config.drive
    return PlantParams(
        cart_mass_kg=config.cart.mass_kg,
        pendulum_mass_kg=config.pendulum.mass_kg,
        com_distance_m=config.pendulum.com_distance_m,
        inertia_com_kgm2=config.pendulum.inertia_com_kgm2,
        cart_viscous_n_per_mps=config.cart.viscous_n_per_mps,
        cart_coulomb_n=config.cart.coulomb_n,
        pivot_viscous_nms_per_rad=config.pendulum.pivot_viscous_nms_per_rad,
        drive=DriveParams(
            kind=drive.kind,
            limit=drive.limit,
            torque_constant_nm_per_a=drive.torque_constant_nm_per_a,
            resistance_ohm=drive.resistance_ohm,
            gear_ratio=drive.gear_ratio,
            pulley_radius_m=drive.pulley_radius_m,
            rotor_inertia_kgm2=drive.rotor_inertia_kgm2,
            dead_band=drive.dead_band,
        ),
        track=TrackParams(
            length_m=config.track.length_m,
            switch_inset_m=config.track.switch_inset_m,
            has_limit_switches=config.track.has_limit_switches,
        ),
    )
