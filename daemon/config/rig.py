"""Physical description of one rig: track, cart, pendulum, drive, encoders.

These numbers are the one parameter set of the rig. The simulator, the
linearisation for LQR design and model identification all read them, via
:func:`daemon.config.plant.plant_params` which maps them onto
:class:`sim_device.plant.PlantParams`.
"""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from daemon.config.base import Section


class RigIdentity(Section):
    """Who and where the rig is; recorded with every run."""

    id: str = Field(min_length=1, max_length=16, pattern=r"^[A-Za-z0-9_.-]+$")
    name: str = ""
    lab: str = ""


class TrackSettings(Section):
    """The rail the cart runs on. Positions are measured from the track centre."""

    length_m: float = Field(gt=0.05, le=10.0, description="between the hard end stops")
    switch_inset_m: float = Field(
        default=0.02, ge=0.0, le=0.5, description="limit switches this far inside each end stop"
    )
    has_limit_switches: bool = True


class CartSettings(Section):
    mass_kg: float = Field(gt=0.0, le=100.0, description="cart plus everything riding on it")
    viscous_n_per_mps: float = Field(default=0.0, ge=0.0, le=1000.0)
    coulomb_n: float = Field(default=0.0, ge=0.0, le=1000.0)


class PendulumSettings(Section):
    mass_kg: float = Field(gt=0.0, le=50.0)
    com_distance_m: float = Field(gt=0.0, le=5.0, description="pivot to centre of mass")
    inertia_com_kgm2: float = Field(
        ge=0.0, le=100.0, description="moment of inertia about the centre of mass"
    )
    pivot_viscous_nms_per_rad: float = Field(default=0.0, ge=0.0, le=100.0)


class DriveSettings(Section):
    """How a drive command becomes a force on the cart.

    ``voltage``: a DC motor through a pinion or belt; the command is armature
    volts and the force includes back-EMF. ``force``: a current-mode amplifier;
    the command is newtons (force proportional to command).
    """

    kind: Literal["voltage", "force"] = "voltage"
    limit: float = Field(gt=0.0, le=1000.0, description="largest |command|, volts or newtons")
    torque_constant_nm_per_a: float = Field(default=0.05, gt=0.0, le=10.0, description="Kt = Ke")
    resistance_ohm: float = Field(default=1.0, gt=0.0, le=1000.0)
    gear_ratio: float = Field(default=1.0, gt=0.0, le=1000.0, description="motor turns per pulley turn")
    pulley_radius_m: float = Field(default=0.01, gt=0.0, le=1.0)
    rotor_inertia_kgm2: float = Field(default=0.0, ge=0.0, le=1.0)
    dead_band: float = Field(default=0.0, ge=0.0, le=100.0, description="commands below this give no force")


class EncoderSettings(Section):
    cart_counts_per_m: float = Field(gt=0.0, le=1e9)
    pendulum_counts_per_rev: int = Field(gt=3, le=1 << 30)


class SamplingSettings(Section):
    rate_hz: int = Field(default=500, ge=50, le=5000)
    device_watchdog_ms: int = Field(default=50, ge=2, le=5000)

    @model_validator(mode="after")
    def _watchdog_spans_samples(self) -> SamplingSettings:
        period_ms = 1000.0 / self.rate_hz
        if self.device_watchdog_ms < 3 * period_ms:
            raise ValueError(
                f"device_watchdog_ms must be at least 3 sample periods ({3 * period_ms:.1f} ms)"
            )
        return self
