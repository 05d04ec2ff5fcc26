"""Swing-up B for short tracks: the cart set-point alternates between two positions inside ``±pump_offset_m``.

The inner loop is a critically damped position loop on cart acceleration
(``a = wc^2 (x_sp - x) - 2 wc v``, ``wc = 2 pi pump_bandwidth_hz``, saturated
and kept inside the track by :class:`TrackGuard`), turned into a drive
command through the inverse plant model.

Which set-point, and when. Energy enters the pendulum at the rate ``m l a
cos(th) w`` (see :mod:`.swing_energy`). A move between set-points first
accelerates the cart toward the new one, then brakes; both halves pump energy
in when the move is centred on the instant where ``w cos th`` changes sign and
goes against the swing direction. With ``p = th - pi`` (wrapped, 0 hanging):

- swing below horizontal: that instant is the turning point, where the angular
  velocity changes sign;
- swing past horizontal: it is the crossing of the horizontal on the way out
  (angle threshold ``|p| = pi/2``); the cart then stays put for the rest of the
  half swing.

Each half swing (between crossings of the hanging position) therefore gets one
move, against the swing direction (``-sign w`` while pumping in), started
while the pendulum moves outward (``sign w = sign p``) once::

    below horizontal (E < -m g l):  |p| >= A cos(pi L / T_half)
    past horizontal:                 pi/2 - |p| <= L (|w| + w_h) / 2

``A`` is the amplitude of the last swing, ``T_half`` the half period measured
online as the time between successive crossings of the hanging position,
``w_h`` the speed the energy gives at horizontal, and the lead ``L`` the
measured time from a switch until the cart passes the midpoint of its move
(half the travel time), so that the move is centred on the instant. A swing
that turns back before its threshold gets no move.

The moves shrink as the energy nears the upright energy. A rest-to-rest move
of length ``d`` centred where ``c = w cos th`` changes sign adds ``dE ~ m l
|dc/dt| d`` (integrate ``m l a c`` by parts with ``c`` linear in time); for
the free pendulum ``|dc/dt|`` is ``w_h^2`` at the horizontal and ``(m g l /
J) |sin A cos A|`` at a turning point ``A``. So each move spans ``d = deficit /
(m l |dc/dt|)``, at most the full ``2 offset`` and at least ``0.01 offset``,
between set-points ``±d/2``.

The last few per cent are finer than moves can dose. Once the energy error
is below ``_TRIM_SHARE`` of ``2 m g l``, the cart acceleration comes from the
energy law of :mod:`.swing_energy` (same settings) instead of from the
position loop: proportional near the target, aiming just above the upright
energy with the friction still to come added, so the pendulum arrives slowly
on the approach the catch window is centred on (:mod:`.catch`). That switch
(and back, below twice the share) is decided only while the pendulum is
within 60 degrees of upright, where its energy is measured well (far below,
the speed is high and the velocity estimate's noise dominates the energy),
and only with the cart still: a move that is still braking would add energy
the law does not know about. Inside ``energy_band = (below, above)`` of the
upright energy no new move starts; above it, moves run the other way and
take energy out.

Measured on the plant model with encoder noise of 0.5 counts, 64 seeds each
(bench/bench_swing_up.py prints the table), with the offset derived from the
track (daemon/config/derived.py; 0.126 m on Kestrel-1, 0.0595 m on Wren-2):
from hanging at rest to the catch in 5.1-5.4 s on Kestrel-1 and 4.2-5.9 s on
Wren-2, every seed caught and balanced for 30 s, the amplitude growing every
half swing until the trim. With three times that noise (1.5 counts) Kestrel-1
is unaffected, but on Wren-2 (2000-count pendulum encoder at 1 kHz) the moves are
sometimes mistimed and 1 of 32 seeds was not caught within 30 s: the
switching reads the sign of a velocity estimate that is mostly noise near the
turning points. The energy law caught all 32 at that noise.
"""

from __future__ import annotations

import math

from daemon.config.control import SwingUpSettings
from daemon.control.drive_model import AccelerationDrive, clamp
from daemon.control.encoders import wrap_angle
from daemon.control.swing_energy import EnergySwingUp
from daemon.control.track_guard import TrackGuard
from sim_device.plant import PlantParams, pendulum_energy_j

__all__ = ["PumpSwingUp"]

# Step response of a critically damped second-order loop reaches half way at wc*t = 1.678
# (solve 1 - (1 + s) exp(-s) = 1/2): the lead before any move has been measured.
_HALF_RISE_WC = 1.678
# A crossing of the hanging position counts only after the swing has gone this far out.
_CROSSING_HYSTERESIS_RAD = math.radians(2.0)
_HALF_PI = 0.5 * math.pi
# Energy errors below this share of 2 m g l are trimmed by the energy law, not by moves.
_TRIM_SHARE = 0.1
# Whether to trim is decided only with the pendulum this high (cos th above this) and the cart this slow.
_TRIM_DECIDE_COS = 0.5
_TRIM_DECIDE_SPEED_MPS = 0.1


class PumpSwingUp:
    """Per-sample set-point pumping: ``update(x, v, theta, omega) -> drive``."""

    __slots__ = (
        "_2wc",
        "_a_max",
        "_armed",
        "_band_above",
        "_band_below",
        "_drive",
        "_dt",
        "_guard",
        "_jp",
        "_last_crossing_t",
        "_last_p",
        "_mgl",
        "_ml",
        "_moved_this_half",
        "_offset",
        "_peak",
        "_set_point",
        "_switch_t",
        "_switch_x",
        "_t",
        "_travel_pending",
        "_trim",
        "_trim_j",
        "_trimming",
        "_wc2",
        "amplitude_rad",
        "half_period_s",
        "last_drive",
        "lead_s",
        "switches",
    )

    def __init__(self, params: PlantParams, settings: SwingUpSettings, travel_limit_m: float,
                 dt_s: float, energy_band_j: tuple[float, float]):
        if settings.pump_offset_m >= travel_limit_m:
            raise ValueError(
                f"swing_up.pump_offset_m: {settings.pump_offset_m} m is not inside the swing-up "
                f"travel limit ±{travel_limit_m:.3f} m"
            )
        self._drive = AccelerationDrive(params)
        self._a_max = settings.max_accel_mps2
        self._guard = TrackGuard(travel_limit_m, 0.8 * settings.max_accel_mps2)
        wc = 2.0 * math.pi * settings.pump_bandwidth_hz
        self._wc2 = wc * wc
        self._2wc = 2.0 * wc
        self._offset = settings.pump_offset_m
        self._dt = dt_s
        self._ml = params.pendulum_mass_kg * params.com_distance_m
        self._jp = params.pivot_inertia_kgm2
        self._mgl = self._ml * params.gravity_mps2
        self._band_below, self._band_above = energy_band_j
        self._trim = EnergySwingUp(params, settings, travel_limit_m)
        self._trim_j = _TRIM_SHARE * 2.0 * params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
        self.lead_s = _HALF_RISE_WC / wc
        self.half_period_s = math.pi * math.sqrt(params.pivot_inertia_kgm2 / self._mgl)
        self.last_drive = 0.0
        self.reset((0.0, 0.0, math.pi, 0.0), 0.0)

    def reset(self, state: tuple[float, float, float, float], last_drive: float) -> None:
        """Start pumping from the measured state; the set-point starts where the cart is."""
        self._t = 0.0
        self._set_point = state[0]
        self._switch_t = 0.0
        self._switch_x = state[0]
        self._travel_pending = False
        self._last_crossing_t = None
        self._armed = False
        self._last_p = wrap_angle(state[2] - math.pi)
        self._moved_this_half = False
        self.amplitude_rad = abs(self._last_p)
        self._peak = 0.0
        self._trimming = False
        self._trim.reset(state, last_drive)
        self.last_drive = last_drive
        self.switches = 0

    def energy(self, theta: float, omega: float) -> float:
        """Pendulum energy relative to upright at rest, joules."""
        return pendulum_energy_j(self._jp, self._mgl, theta, omega)

    @property
    def set_point_m(self) -> float:
        return self._set_point

    def _track_swing(self, p: float) -> None:
        """Crossings of the hanging position: half period and amplitude of the swing just ended."""
        magnitude = abs(p)
        self._peak = max(self._peak, magnitude)
        if magnitude > _CROSSING_HYSTERESIS_RAD:
            self._armed = True
        if self._armed and (p >= 0.0) != (self._last_p >= 0.0):
            if self._last_crossing_t is not None:
                half = self._t - self._last_crossing_t
                if 0.3 * self.half_period_s < half < 3.0 * self.half_period_s:
                    self.half_period_s = half
            self._last_crossing_t = self._t
            self.amplitude_rad = self._peak
            self._peak = 0.0
            self._armed = False
            self._moved_this_half = False
        self._last_p = p

    def _track_move(self, x: float, energy: float) -> None:
        """Lead: time from a switch until the cart passes the middle of its move."""
        if not self._travel_pending:
            return
        midpoint = 0.5 * (self._switch_x + self._set_point)
        if (x - midpoint) * (self._set_point - self._switch_x) >= 0.0:
            if abs(self._set_point - self._switch_x) > self._offset:
                self.lead_s = self._t - self._switch_t
            self._travel_pending = False

    def _switch(self, direction: float, energy: float) -> None:
        """Move toward ``direction``; the travel sized for the energy still missing (module docstring)."""
        distance = 2.0 * self._offset
        rate = self._sign_change_rate(energy)
        if rate > 0.0:
            distance = min(distance, max(abs(energy) / (self._ml * rate), 0.01 * self._offset))
        self._switch_x = self._set_point
        self._set_point = direction * 0.5 * distance
        self._switch_t = self._t
        self._travel_pending = True
        self._moved_this_half = True
        self.switches += 1

    def _sign_change_rate(self, energy: float) -> float:
        """``|d(w cos th)/dt|`` of the free pendulum with this energy where ``w cos th`` changes sign.

        Past horizontal that is the horizontal crossing (``w^2`` there); otherwise
        the turning point at angle ``A`` (``(m g l / J) |sin A cos A|``).
        """
        if energy + self._mgl > 0.0:
            return 2.0 * (energy + self._mgl) / self._jp
        cos_a = 1.0 + energy / self._mgl
        return self._mgl / self._jp * abs(cos_a) * math.sqrt(max(0.0, 1.0 - cos_a * cos_a))

    def _due(self, p: float, omega: float, energy: float) -> bool:
        """Whether this half swing's move should start now (see the module docstring)."""
        if self._moved_this_half:
            return False
        if (omega >= 0.0) != (p >= 0.0):
            return False  # swinging back in: too late for this half swing
        lead = self.lead_s
        reach = energy + self._mgl
        if reach > 0.0:  # passes horizontal: time to get there at the mean of now and then speeds
            if abs(p) >= _HALF_PI:
                return True
            speed = 0.5 * (abs(omega) + math.sqrt(2.0 * reach / self._jp))
            return (_HALF_PI - abs(p)) <= speed * lead
        return abs(p) >= self.amplitude_rad * math.cos(math.pi * lead / self.half_period_s)

    def update(self, x: float, v: float, theta: float, omega: float) -> float:
        self._t += self._dt
        p = wrap_angle(theta - math.pi)
        energy = self.energy(theta, omega)
        self._track_swing(p)
        self._track_move(x, energy)
        # the energy estimate is good only high up; a move still braking would add to the energy
        if math.cos(theta) > _TRIM_DECIDE_COS and -_TRIM_DECIDE_SPEED_MPS < v < _TRIM_DECIDE_SPEED_MPS:
            self._trimming = energy > -(2.0 if self._trimming else 1.0) * self._trim_j
        if self._trimming:
            a = self._trim.accel_command(x, v, theta, omega)
        else:
            if not -self._band_below < energy < self._band_above and self._due(p, omega, energy):
                outward = 1.0 if p >= 0.0 else -1.0
                self._switch(-outward if energy < 0.0 else outward, energy)
            a = self._guard.limit(clamp(self._wc2 * (self._set_point - x) - self._2wc * v, self._a_max), x, v)
        drive = self._drive.command_for(a, v, math.sin(theta), math.cos(theta), omega)
        self.last_drive = drive
        return drive
