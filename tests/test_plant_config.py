"""A rig config maps field by field onto the plant model's parameters."""

from __future__ import annotations

import pytest

from daemon.config import ConfigError, load_config, parse_config
from daemon.config.plant import plant_params
from sim_device.plant import DriveParams, PlantParams, TrackParams


def test_demo_rig_config_maps_onto_plant_params_field_by_field():
    params = plant_params(load_config("configs/kestrel-1.toml"))
    assert params == PlantParams(
        cart_mass_kg=0.75,
        pendulum_mass_kg=0.12,
        com_distance_m=0.25,
        inertia_com_kgm2=0.0025,
        gravity_mps2=9.81,
        cart_viscous_n_per_mps=2.0,
        cart_coulomb_n=0.35,
        pivot_viscous_nms_per_rad=0.0004,
        drive=DriveParams(
            kind="voltage",
            limit=12.0,
            torque_constant_nm_per_a=0.042,
            resistance_ohm=1.9,
            gear_ratio=2.0,
            pulley_radius_m=0.015,
            rotor_inertia_kgm2=0.0,
            dead_band=0.15,
        ),
        track=TrackParams(length_m=0.9, switch_inset_m=0.03, has_limit_switches=True),
    )


MINIMAL_FORCE_RIG = """
[rig]
id = "bench-2"
[track]
length_m = 1.2
switch_inset_m = 0.05
has_limit_switches = false
[cart]
mass_kg = 1.5
[pendulum]
mass_kg = 0.2
com_distance_m = 0.3
inertia_com_kgm2 = 0.001
[drive]
kind = "force"
limit = 15.0
[encoders]
cart_counts_per_m = 10000.0
pendulum_counts_per_rev = 2000
"""


def test_force_rig_config_with_defaults_maps_kind_limit_and_switch_settings():
    params = plant_params(parse_config(MINIMAL_FORCE_RIG))
    assert params.drive.kind == "force" and params.drive.limit == 15.0
    assert params.track == TrackParams(length_m=1.2, switch_inset_m=0.05, has_limit_switches=False)
    assert (
        params.cart_viscous_n_per_mps,
        params.cart_coulomb_n,
        params.pivot_viscous_nms_per_rad,
    ) == (0.0, 0.0, 0.0)


def test_a_switch_inset_past_the_track_middle_is_reported_by_field():
    # The config refuses it already (the soft limits lie further in still); the plant model, which
    # the simulator also builds without a config, names the field itself.
    with pytest.raises(ConfigError, match=r"interlocks\.soft_limit_inset_m: "):
        parse_config(MINIMAL_FORCE_RIG.replace("length_m = 1.2", "length_m = 0.08"))
    with pytest.raises(ValueError, match=r"track\.switch_inset_m"):
        TrackParams(length_m=0.08, switch_inset_m=0.05, has_limit_switches=True)
