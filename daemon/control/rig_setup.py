"""Build the configured estimator and controllers for one rig (design work done once, at start-up)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from daemon.config import PoiseConfig
from daemon.config.derived import swing_up_travel_m
from daemon.config.plant import plant_params
from daemon.control.balance import BalanceController, BalanceDesign, design_balance
from daemon.control.catch import CatchWindow, natural_frequency_radps
from daemon.control.encoders import EncoderScaling
from daemon.control.estimation import StateEstimator
from daemon.control.kalman import design_kalman
from daemon.control.swing_energy import EnergySwingUp
from daemon.control.swing_pump import PumpSwingUp
from sim_device.plant import PlantParams

__all__ = ["ControlSet", "build_control_set"]

# Pumping stops once the energy would bring the pendulum within this share of the catch window.
_PUMP_BAND_SHARE = 0.9


@dataclass
class ControlSet:
    params: PlantParams
    design: BalanceDesign
    estimator: StateEstimator
    balance: BalanceController
    swing_up: EnergySwingUp | PumpSwingUp
    window: CatchWindow
    soft_limit_m: float
    dt_s: float


def build_control_set(
    config: PoiseConfig, law: str | None = None, use_config_gains: bool = True
) -> ControlSet:
    """Everything the control cycle runs, from ``config``; ``law`` overrides ``swing_up.law``."""
    params = plant_params(config)
    rate = config.sampling.rate_hz
    dt = 1.0 / rate
    design = design_balance(params, config.balance, rate, use_config_gains)
    scaling = EncoderScaling(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev)
    est = config.estimator
    kalman = None
    if est.velocity == "kalman":
        kalman = design_kalman(
            design.ad, design.bd, dt, scaling.cart_quantum_m, scaling.pendulum_quantum_rad,
            est.kalman_cart_accel_noise_mps2, est.kalman_pendulum_accel_noise_radps2,
            est.encoder_noise_counts,
        )
    estimator = StateEstimator(scaling, dt, est.difference_cutoff_hz, kalman, math.radians(est.kalman_region_deg))
    soft = config.soft_limit_m
    travel = swing_up_travel_m(config)
    law = law or config.swing_up.law
    if law == "energy":
        swing: EnergySwingUp | PumpSwingUp = EnergySwingUp(params, config.swing_up, travel)
    elif law == "pump":
        mgl = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
        # energies that bring the pendulum into the catch window: short of upright by less than a
        # pendulum at rest at the window's edge, or over it by less than the window's rate
        band = (
            mgl * (1.0 - math.cos(_PUMP_BAND_SHARE * math.radians(config.catch.angle_deg))),
            0.5 * params.pivot_inertia_kgm2 * (_PUMP_BAND_SHARE * math.radians(config.catch.rate_dps)) ** 2,
        )
        swing = PumpSwingUp(params, config.swing_up, travel, dt, band)
    else:
        raise ValueError(f"swing_up.law: unknown law {law!r} (energy or pump)")
    return ControlSet(
        params=params,
        design=design,
        estimator=estimator,
        balance=BalanceController(design, config.balance.blend_samples),
        swing_up=swing,
        window=CatchWindow(config.catch, natural_frequency_radps(params)),
        soft_limit_m=soft,
        dt_s=dt,
    )
