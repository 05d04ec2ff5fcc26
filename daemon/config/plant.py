"""Map a validated rig config onto the plant model's parameters (the rig's one parameter set),
and onto the whole simulated rig those parameters describe (:func:`rig_spec`).

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
    from sim_device.rig import RigSpec

__all__ = ["plant_params", "rig_spec"]


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


def rig_spec(
    config: PoiseConfig,
    encoder_noise_counts: float = 0.0,
    jitter_us: float = 0.0,
    supply_v: float | None = None,
) -> RigSpec:
    """The simulated rig a config describes (plant, encoders, hello identity), plus sensor imperfections.

    ``supply_v`` fits a supply voltage measurement reading that voltage (None: not fitted).

    ``poise sim`` and the daemon's built-in simulated rig (``poise run --sim``) both build
    their rig here, so they simulate the same rig.
    """
    from sim_device.device import DeviceIdentity
    from sim_device.rig import RigSpec
    from sim_device.sensors import SensorParams

    return RigSpec(
        plant=plant_params(config),
        sensors=SensorParams(
            cart_counts_per_m=config.encoders.cart_counts_per_m,
            pendulum_counts_per_rev=config.encoders.pendulum_counts_per_rev,
            cart_noise_counts=encoder_noise_counts,
            pendulum_noise_counts=encoder_noise_counts,
            jitter_us=jitter_us,
            supply_v=supply_v,
        ),
        identity=DeviceIdentity(
            device_id=config.rig.id,
            sample_rate_hz=config.sampling.rate_hz,
            watchdog_ms=config.sampling.device_watchdog_ms,
        ),
    )
