"""The host-port firmware's command line for a rig config (the values its C model needs)."""

from daemon.config import PoiseConfig


def host_args(config: PoiseConfig) -> list[str]:
    """name=value arguments of firmware/host/main.c for ``config``'s rig."""
    drive = config.drive
    values = {
        "device_id": config.rig.id,
        "sample_rate_hz": config.sampling.rate_hz,
        "cart_counts_per_m": config.encoders.cart_counts_per_m,
        "pendulum_counts_per_rev": config.encoders.pendulum_counts_per_rev,
        "track_length_m": config.track.length_m,
        "switch_inset_m": config.track.switch_inset_m,
        "drive_limit": drive.limit,
        "drive_kind": drive.kind,
        "cart_mass_kg": config.cart.mass_kg,
        "pendulum_mass_kg": config.pendulum.mass_kg,
        "com_distance_m": config.pendulum.com_distance_m,
        "inertia_com_kgm2": config.pendulum.inertia_com_kgm2,
        "cart_viscous": config.cart.viscous_n_per_mps,
        "cart_coulomb_n": config.cart.coulomb_n,
        "pivot_viscous": config.pendulum.pivot_viscous_nms_per_rad,
        "dead_band": drive.dead_band,
        "rotor_inertia_kgm2": drive.rotor_inertia_kgm2,
    }
    if drive.kind == "voltage":
        values |= {
            "kt": drive.torque_constant_nm_per_a, "resistance_ohm": drive.resistance_ohm,
            "gear_ratio": drive.gear_ratio, "pulley_radius_m": drive.pulley_radius_m,
        }
    return [f"{name}={value}" for name, value in values.items()]
