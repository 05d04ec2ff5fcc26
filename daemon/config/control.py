"""Controller settings: estimator, balance (LQR), swing-up, catch window, homing."""

from __future__ import annotations

from typing import Literal

from pydantic import Field

from daemon.config.base import Section


class EstimatorSettings(Section):
    velocity: Literal["filtered_difference", "kalman"] = "kalman"
    difference_cutoff_hz: float = Field(default=40.0, gt=0.0, le=5000.0)


class BalanceSettings(Section):
    """LQR weights on [x_m, v_mps, theta_rad, omega_radps] and the drive (volts or newtons)."""

    q_diag: tuple[float, float, float, float] = (5000.0, 0.0, 100.0, 0.0)
    r: float = Field(default=1.0, gt=0.0)
    integral_action: bool = False
    integral_weight: float = Field(default=100.0, ge=0.0)
    gains: tuple[float, float, float, float] | None = Field(
        default=None, description="written by `poise design --write`; designed at start-up if absent"
    )


class SwingUpSettings(Section):
    law: Literal["energy", "pump"] = "energy"
    max_accel_mps2: float = Field(default=4.0, gt=0.0, le=100.0)


class CatchSettings(Section):
    angle_deg: float = Field(default=20.0, gt=0.0, le=60.0, description="switch to balance inside this")
    rate_dps: float = Field(default=300.0, gt=0.0, le=5000.0)
    fall_angle_deg: float = Field(default=35.0, gt=0.0, le=90.0, description="balance lost outside this")
    retries: int = Field(default=2, ge=0, le=20)


class HomingSettings(Section):
    speed_mps: float = Field(default=0.05, gt=0.0, le=2.0)
    length_tolerance_m: float = Field(default=0.02, gt=0.0, le=1.0)
