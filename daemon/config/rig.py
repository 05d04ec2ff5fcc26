"""Physical description of one rig: track, cart, pendulum, drive, encoders.

These numbers are the one parameter set of the rig. The simulator, the
linearisation for LQR design and model identification all read them, via
:func:`daemon.config.plant.plant_params` which maps them onto
:class:`sim_device.plant.PlantParams`. Every field that reaches the plant model
is required (the rule and its reasons are in :mod:`daemon.config.plant`), and
every one has a physical range: wide enough for any bench rig, narrow enough to
refuse a slip of the keyboard (a mass in grams, a zero too many) before it
becomes a simulated rig or a controller design.
"""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import Field, model_validator

from daemon.config.base import RangeReason, Section


class RigIdentity(Section):
    """Who and where the rig is; recorded with every run."""

    id: str = Field(min_length=1, max_length=16, pattern=r"^[A-Za-z0-9_.-]+$")
    name: str = Field(default="", max_length=200)
    lab: str = Field(default="", max_length=200)


class TrackSettings(Section):
    """The rail the cart runs on. Positions are measured from the track centre."""

    length_m: Annotated[float, RangeReason("a bench rig's track, between the hard end stops")] = Field(
        gt=0.05, le=10.0
    )
    switch_inset_m: float = Field(ge=0.0, le=0.5, description="limit switches this far inside each end stop")
    has_limit_switches: bool


class CartSettings(Section):
    mass_kg: Annotated[float, RangeReason("cart plus everything riding on it, 10 g to 100 kg")] = Field(
        ge=0.01, le=100.0
    )
    viscous_n_per_mps: float = Field(ge=0.0, le=1000.0)
    coulomb_n: float = Field(ge=0.0, le=1000.0)


class PendulumSettings(Section):
    mass_kg: Annotated[float, RangeReason("a pendulum of 1 g to 50 kg")] = Field(ge=0.001, le=50.0)
    com_distance_m: Annotated[float, RangeReason("pivot to centre of mass, 1 cm to 5 m")] = Field(
        ge=0.01, le=5.0
    )
    inertia_com_kgm2: float = Field(
        ge=0.0, le=100.0, description="moment of inertia about the centre of mass (0: a point mass)"
    )
    pivot_viscous_nms_per_rad: float = Field(ge=0.0, le=100.0)


class DriveSettings(Section):
    """How a drive command becomes a force on the cart.

    ``voltage``: a DC motor through a pinion or belt; the command is armature
    volts and the force includes back-EMF. ``force``: a current-mode amplifier;
    the command is newtons (force proportional to command). The motor's
    constants are required for either kind: a force drive's gear ratio, pulley
    and rotor still set the reflected rotor mass, and all of them are recorded
    with every run.
    """

    kind: Literal["voltage", "force"]
    limit: Annotated[
        float, RangeReason("largest |command|, volts or newtons: 0.1 (less moves no cart) to 1000")
    ] = Field(ge=0.1, le=1000.0)
    torque_constant_nm_per_a: Annotated[
        float, RangeReason("Kt = Ke; small DC motors have 1e-3 to 1 N m/A")
    ] = Field(ge=1e-4, le=10.0)
    resistance_ohm: Annotated[float, RangeReason("armature resistance, 10 milliohm to 1 kiloohm")] = Field(
        ge=0.01, le=1000.0
    )
    gear_ratio: Annotated[float, RangeReason("motor turns per pulley turn, 0.1 to 1000")] = Field(
        ge=0.1, le=1000.0
    )
    pulley_radius_m: Annotated[float, RangeReason("pinion or belt pulley, 1 mm to 1 m")] = Field(
        ge=0.001, le=1.0
    )
    rotor_inertia_kgm2: Annotated[
        float, RangeReason("0 (none, or negligible) to 0.01 kg m^2, the rotor of a servo motor of kilowatts")
    ] = Field(ge=0.0, le=0.01)
    dead_band: float = Field(ge=0.0, le=100.0, description="commands below this give no force")

    @model_validator(mode="after")
    def _dead_band_inside_limit(self) -> DriveSettings:
        if self.dead_band >= self.limit:
            raise ValueError(
                f"dead_band ({self.dead_band:g}) must be below limit ({self.limit:g}): "
                "no command would give any force"
            )
        return self


class EncoderSettings(Section):
    cart_counts_per_m: Annotated[
        float, RangeReason("one count must be under a millimetre, and no finer than a nanometre")
    ] = Field(gt=1e3, le=1e9)
    pendulum_counts_per_rev: Annotated[
        int, RangeReason("one count must be a degree or finer to balance on, and at least 2^-30 of a turn")
    ] = Field(ge=360, le=1 << 30)


class SamplingSettings(Section):
    rate_hz: int = Field(ge=50, le=5000)
    device_watchdog_ms: int = Field(default=50, ge=2, le=5000)

    @model_validator(mode="after")
    def _watchdog_spans_samples(self) -> SamplingSettings:
        period_ms = 1000.0 / self.rate_hz
        if self.device_watchdog_ms < 3 * period_ms:
            raise ValueError(
                f"device_watchdog_ms must be at least 3 sample periods ({3 * period_ms:.1f} ms)"
            )
        return self
