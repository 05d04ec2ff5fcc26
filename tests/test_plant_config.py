"""A rig config maps field by field onto the plant model's parameters."""

from __future__ import annotations

import pytest
from test_config_support import KESTREL, config_dict, toml_text

from daemon.config import ConfigError, PoiseConfig, load_config, parse_config
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


FORCE_RIG = """
[rig]
id = "bench-2"
[track]
length_m = 1.2
switch_inset_m = 0.05
has_limit_switches = false
[cart]
mass_kg = 1.5
viscous_n_per_mps = 0.0
coulomb_n = 0.0
[pendulum]
mass_kg = 0.2
com_distance_m = 0.3
inertia_com_kgm2 = 0.001
pivot_viscous_nms_per_rad = 0.0
[drive]
kind = "force"
limit = 15.0
torque_constant_nm_per_a = 0.05
resistance_ohm = 1.0
gear_ratio = 1.0
pulley_radius_m = 0.01
rotor_inertia_kgm2 = 0.0
dead_band = 0.0
[encoders]
cart_counts_per_m = 10000.0
pendulum_counts_per_rev = 2000
[sampling]
rate_hz = 500
"""


def test_force_rig_config_maps_kind_limit_and_switch_settings():
    params = plant_params(parse_config(FORCE_RIG))
    assert params.drive.kind == "force" and params.drive.limit == 15.0
    assert params.track == TrackParams(length_m=1.2, switch_inset_m=0.05, has_limit_switches=False)
    assert (
        params.cart_viscous_n_per_mps,
        params.cart_coulomb_n,
        params.pivot_viscous_nms_per_rad,
    ) == (0.0, 0.0, 0.0)


PLANT_SECTIONS = ("track", "cart", "pendulum", "drive", "encoders")


def _plant_keys() -> list[tuple[str, str]]:
    doc = config_dict(KESTREL)
    return [(section, key) for section in PLANT_SECTIONS for key in doc[section]] + [("sampling", "rate_hz")]


@pytest.mark.parametrize(("section", "key"), _plant_keys(), ids=lambda part: part)
def test_every_field_that_shapes_the_plant_must_be_given(section, key):
    # No silent defaults for the plant (daemon/config/plant.py): a line left out is an error, never a
    # made-up motor constant, friction or sample rate.
    doc = config_dict(KESTREL)
    del doc[section][key]
    with pytest.raises(ConfigError) as caught:
        parse_config(toml_text(doc))
    assert caught.value.problems == [f"{section}.{key}: required field is missing"]


def test_every_plant_field_is_in_the_shipped_config():
    # The deletions above cover every field of the plant's sections only if the demo rig sets them all.
    doc = config_dict(KESTREL)
    for section in PLANT_SECTIONS:
        assert set(doc[section]) == set(PoiseConfig.model_fields[section].annotation.model_fields), section


def test_a_switch_inset_past_the_track_middle_is_reported_by_field():
    # The config refuses it already (the soft limits lie further in still); the plant model, which
    # the simulator also builds without a config, names the field itself.
    with pytest.raises(ConfigError, match=r"interlocks\.soft_limit_inset_m: "):
        parse_config(FORCE_RIG.replace("length_m = 1.2", "length_m = 0.08"))
    with pytest.raises(ValueError, match=r"track\.switch_inset_m"):
        TrackParams(length_m=0.08, switch_inset_m=0.05, has_limit_switches=True)
