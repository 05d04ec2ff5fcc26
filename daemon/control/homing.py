"""Homing: find the track centre, as a small state machine fed one sample at a time.

With limit switches (``track.has_limit_switches``):

1. ``SEEK_NEGATIVE``: move at ``-speed_mps`` until the negative switch closes;
   the cart position there is the reference (the encoder is "zeroed" there:
   the centre is ``length_m/2 - switch_inset_m`` further on).
2. ``SEEK_POSITIVE``: move at ``+speed_mps`` until the positive switch closes;
   the measured switch-to-switch travel must equal ``length_m - 2 switch_inset_m``
   within ``homing.length_tolerance_m``, otherwise homing FAILS with a message
   giving both numbers (wrong track length or inset in the config, a slipping
   belt, or a wrong ``cart_counts_per_m``).
3. ``TO_CENTRE``: position loop to the centre; ``DONE`` once within
   ``centre_tolerance_m`` and nearly still.

A switch not found within the configured travel plus 10 % (and 5 cm) also
fails, as do both switches closed at once (wiring fault).

Without switches the present position is declared the centre at once
(``DONE`` on the first sample); the travel limits then follow from the
configured track length.

Motion is a velocity loop (``a = (v_target - v) / 0.05 s``, at most
``MAX_ACCEL_MPS2``) through the inverse plant model; the drive command is
clamped to the limit. The seek speed is ``homing.speed_mps``, lowered where
needed so that the cart, braking at ``MAX_ACCEL_MPS2`` once a switch closes,
stops within half the switch inset (``v^2 / (2 a) <= inset / 2``), well short
of the hard end stop. On the way to the centre the loop also damps the
pendulum's swing: the hanging pendulum's energy changes at ``m l a cos(th) w``,
so ``a = -k cos(th) w`` takes energy out, and as ``cos(th) w`` is the rate of
``sin(th)`` the velocity loop gets it as ``-k sin(th)`` added to its target.
The rig is then ready for swing-up soon after homing ends.

``update`` takes raw cart positions (encoder counts / counts_per_m, no offset)
and returns the drive command; :attr:`centre_raw_m` is the result, and
:attr:`phase` and :attr:`travelled_m` say how far it has got.
"""

from __future__ import annotations

import enum
import math

from daemon.config.control import HomingSettings
from daemon.control.drive_model import AccelerationDrive, clamp
from protocol.messages import SW_LIMIT_NEG, SW_LIMIT_POS
from sim_device.plant import PlantParams

__all__ = ["Homing", "HomingPhase"]

_VELOCITY_TIME_CONSTANT_S = 0.05
MAX_ACCEL_MPS2 = 2.0
_POSITION_GAIN_PER_S = 2.0
_SWING_DAMPING_PER_S = 0.5  # m/s^2 of cart acceleration per rad/s of pendulum rate, on the way back


class HomingPhase(enum.Enum):
    SEEK_NEGATIVE = "seek_negative"
    SEEK_POSITIVE = "seek_positive"
    TO_CENTRE = "to_centre"
    DONE = "done"
    FAILED = "failed"


class Homing:
    def __init__(self, params: PlantParams, settings: HomingSettings):
        self._drive = AccelerationDrive(params)
        track = params.track
        # Braking at MAX_ACCEL_MPS2 from the seek speed must end within half the switch inset.
        self.speed_mps = min(settings.speed_mps, math.sqrt(MAX_ACCEL_MPS2 * track.switch_inset_m))
        self._speed = self.speed_mps
        self._tolerance = settings.length_tolerance_m
        self._centre_tolerance = settings.centre_tolerance_m
        self._has_switches = track.has_limit_switches
        self.expected_travel_m = track.length_m - 2.0 * track.switch_inset_m
        self._search_m = 1.1 * track.length_m + 0.05
        self.phase = HomingPhase.SEEK_NEGATIVE
        self.centre_raw_m: float | None = None
        self.measured_travel_m: float | None = None
        self.message = ""
        self.started = False  # False until the first start()
        self.travelled_m = 0.0  # distance moved since the present phase began
        self._start_raw_m = 0.0
        self._negative_raw_m = 0.0
        self._phase_start_raw_m = 0.0

    @property
    def finished(self) -> bool:
        return self.phase in (HomingPhase.DONE, HomingPhase.FAILED)

    def start(self, raw_x_m: float) -> None:
        self.started = True
        self.centre_raw_m = None
        self.measured_travel_m = None
        self.message = ""
        self.travelled_m = 0.0
        self._start_raw_m = self._phase_start_raw_m = raw_x_m
        if self._has_switches:
            self.phase = HomingPhase.SEEK_NEGATIVE
        else:
            self.centre_raw_m = raw_x_m
            self.phase = HomingPhase.DONE
            self.message = "no limit switches: present position declared the track centre"

    def _fail(self, message: str) -> None:
        self.phase = HomingPhase.FAILED
        self.message = f"homing failed: {message}"

    def _enter(self, phase: HomingPhase, raw_x_m: float) -> None:
        self.phase = phase
        self._phase_start_raw_m = raw_x_m
        self.travelled_m = 0.0

    def _velocity(self, target: float, v: float, theta: float, omega: float) -> float:
        a = clamp((target - v) / _VELOCITY_TIME_CONSTANT_S, MAX_ACCEL_MPS2)
        return self._drive.command_for(a, v, math.sin(theta), math.cos(theta), omega)

    def advance(self, raw_x_m: float, v: float, switches: int) -> HomingPhase:
        """Move to the next phase if this sample's measurement says so; returns the phase.

        Decided before any drive is worked out, so the sample that ends homing (DONE or
        FAILED) is answered by whatever the supervisor decides next, not by homing.
        """
        if self.finished:
            return self.phase
        negative = bool(switches & SW_LIMIT_NEG)
        positive = bool(switches & SW_LIMIT_POS)
        self.travelled_m = abs(raw_x_m - self._phase_start_raw_m)
        if negative and positive:
            self._fail("both limit switches closed at once (wiring fault?)")
        elif self.phase is HomingPhase.SEEK_NEGATIVE:
            if negative:
                self._negative_raw_m = raw_x_m
                self._enter(HomingPhase.SEEK_POSITIVE, raw_x_m)
            elif self._start_raw_m - raw_x_m > self._search_m:
                self._fail(
                    f"negative limit switch not found after {self._start_raw_m - raw_x_m:.3f} m of travel"
                )
        elif self.phase is HomingPhase.SEEK_POSITIVE:
            travel = raw_x_m - self._negative_raw_m
            if positive:
                self.measured_travel_m = travel
                if abs(travel - self.expected_travel_m) > self._tolerance:
                    self._fail(
                        f"measured switch-to-switch travel {travel:.3f} m, config says "
                        f"{self.expected_travel_m:.3f} m (track.length_m - 2 track.switch_inset_m); "
                        f"differs by more than homing.length_tolerance_m = {self._tolerance} m"
                    )
                else:
                    self.centre_raw_m = self._negative_raw_m + 0.5 * self.expected_travel_m
                    self._enter(HomingPhase.TO_CENTRE, raw_x_m)
            elif travel > self.expected_travel_m + self._tolerance + 0.05:
                self._fail(
                    f"positive limit switch not found {travel:.3f} m past the negative one "
                    f"(expected {self.expected_travel_m:.3f} m)"
                )
        elif abs(raw_x_m - self.centre_raw_m) < self._centre_tolerance and abs(v) < 0.2 * self._speed:
            self.phase = HomingPhase.DONE
            self.message = f"homed: switch-to-switch travel {self.measured_travel_m:.4f} m"
        return self.phase

    def command(self, raw_x_m: float, v: float, theta: float, omega: float) -> float:
        """The drive for the present phase (0 once finished)."""
        phase = self.phase
        if phase is HomingPhase.SEEK_NEGATIVE:
            return self._velocity(-self._speed, v, theta, omega)
        if phase is HomingPhase.SEEK_POSITIVE:
            return self._velocity(self._speed, v, theta, omega)
        if phase is HomingPhase.TO_CENTRE:
            target = clamp(-_POSITION_GAIN_PER_S * (raw_x_m - self.centre_raw_m), self._speed)
            return self._velocity(target - _SWING_DAMPING_PER_S * math.sin(theta), v, theta, omega)
        return 0.0

    def update(self, raw_x_m: float, v: float, theta: float, omega: float, switches: int) -> float:
        """One sample: advance the phase, then the drive command for it (0 once finished)."""
        self.advance(raw_x_m, v, switches)
        return self.command(raw_x_m, v, theta, omega)
