"""Controller settings: estimator, balance (LQR), swing-up, catch window, homing."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from daemon.config.base import Section


class EstimatorSettings(Section):
    """How velocities are estimated; see daemon/control/estimation.py for the trade-off."""

    velocity: Literal["filtered_difference", "kalman"] = "kalman"
    difference_cutoff_hz: float = Field(default=40.0, gt=0.0, le=5000.0)
    kalman_cart_accel_noise_mps2: float = Field(
        default=2.0, gt=0.0, le=1000.0, description="unmodelled cart acceleration, rms"
    )
    kalman_pendulum_accel_noise_radps2: float = Field(
        default=10.0, gt=0.0, le=10000.0, description="unmodelled pendulum acceleration, rms"
    )
    kalman_region_deg: float = Field(
        default=30.0, gt=0.0, le=90.0, description="Kalman filter used this close to upright"
    )
    encoder_noise_counts: float = Field(
        default=0.0, ge=0.0, le=1000.0, description="encoder noise beyond quantisation, counts rms"
    )


class BalanceSettings(Section):
    """LQR weights on [x_m, v_mps, theta_rad, omega_radps] and the drive (volts or newtons)."""

    q_diag: tuple[float, float, float, float] = (5000.0, 0.0, 100.0, 0.0)
    r: float = Field(default=1.0, gt=0.0)
    integral_action: bool = False
    integral_weight: float = Field(default=100.0, ge=0.0, description="LQR weight on the integral of x")
    gains: tuple[float, ...] | None = Field(
        default=None,
        description="K for [x, v, theta, omega] (plus the integral gain last with integral_action); "
        "written by `poise design --write`; designed at start-up if absent",
    )
    blend_samples: int = Field(
        default=10, ge=1, le=10000, description="bumpless transfer: command offset decays over this many samples"
    )
    step_m: float = Field(default=0.1, gt=0.0, le=5.0, description="set-point step for `poise design`")

    @model_validator(mode="after")
    def _gains_match_structure(self) -> BalanceSettings:
        if self.gains is not None:
            wanted = 5 if self.integral_action else 4
            if len(self.gains) != wanted:
                raise ValueError(
                    f"gains must have {wanted} entries with integral_action = "
                    f"{str(self.integral_action).lower()} (got {len(self.gains)})"
                )
        return self


class SwingUpSettings(Section):
    """Swing-up: ``energy`` (Åström-Furuta with cart feedback) or ``pump`` (set-point switching)."""

    law: Literal["energy", "pump"] = "energy"
    max_accel_mps2: float = Field(default=4.0, gt=0.0, le=100.0)
    energy_gain: float = Field(
        default=20.0, gt=0.0, le=1e4,
        description="cart accel in g per unit of energy error / (2 m g l) at a rate w cos th of w0",
    )
    upright_rate_dps: float = Field(
        default=20.0, ge=0.0, le=360.0,
        description="energy target: the rate the pendulum passes upright with (just above the upright energy)",
    )
    position_gain_per_s2: float = Field(default=8.0, ge=0.0, le=1e4)
    velocity_gain_per_s: float = Field(default=4.0, ge=0.0, le=1e4)
    pump_offset_m: float | None = Field(
        default=None, gt=0.0, le=5.0,
        description="set-points at ±this; derived from the swing-up travel limit when left out",
    )
    pump_bandwidth_hz: float = Field(default=2.5, gt=0.0, le=100.0, description="inner position loop")
    track_use_fraction: float = Field(
        default=0.5, gt=0.0, le=1.0, description="swing-up keeps the cart within this share of the soft limits"
    )


class CatchSettings(Section):
    """Window around upright where balance takes over, and the larger one where it has lost the pendulum.

    With ``follow_approach`` the rate limit is centred on the approach of a
    pendulum with exactly the upright energy (``w = -w0 theta``), see
    daemon/control/catch.py. Every corner of the window must be a state the
    saturated LQR recovers from without the cart reaching the soft limits; on a
    short track the cart travel, not the drive, sets that edge. The defaults
    suit Kestrel-1 (checked by tests/test_control_closed_loop.py).
    """

    angle_deg: float = Field(default=12.0, gt=0.0, le=60.0, description="switch to balance inside this")
    rate_dps: float = Field(
        default=60.0, gt=0.0, le=5000.0,
        description="rate limit, relative to the upright-energy approach w = -w0 theta with follow_approach",
    )
    follow_approach: bool = Field(
        default=True, description="centre the rate limit on the approach of a pendulum with the upright energy"
    )
    fall_angle_deg: float = Field(default=30.0, gt=0.0, le=90.0, description="balance lost outside this")
    retries: int = Field(default=2, ge=0, le=20)

    @model_validator(mode="after")
    def _fall_outside_catch(self) -> CatchSettings:
        if self.fall_angle_deg <= self.angle_deg:
            raise ValueError(
                f"fall_angle_deg ({self.fall_angle_deg}) must be larger than angle_deg ({self.angle_deg})"
            )
        return self


class HomingSettings(Section):
    speed_mps: float = Field(
        default=0.2, gt=0.0, le=2.0,
        description="seek speed; lowered where braking from it would not stop within half the switch inset",
    )
    length_tolerance_m: float = Field(default=0.02, gt=0.0, le=1.0)
    centre_tolerance_m: float = Field(default=0.003, gt=0.0, le=0.1, description="done this close to centre")
