"""How far an excitation takes the cart with the hold loop running, and the amplitudes that keep it on the track.

The prediction is linear. The plant is linearised about hanging at rest
(:func:`sim_device.plant.linearise`) and the hold loop
(:class:`daemon.control.cart_loops.CartHold`) closed around it, its gains being
the slopes of ``CartHold.update`` there (central differences, on the model
without Coulomb friction and dead band: the hold's inverse model cancels both,
and neither is smooth at rest). The excitation adds to the drive command. The
loop is discretised (zero-order hold, PREDICTION_STEP_S) and the cart's position
and velocity for a unit-amplitude run of the requested kind and duration, plus
a tail of DIED_AWAY slowest time constants after it, are the signal convolved
with the loop's impulse response (by FFT). The command waits for it, and so does
the control cycle, so its cost is bounded (:meth:`ExcitationSizing.predicted_run`):
a few milliseconds for any run up to the longest ``excite`` takes.

Position and velocity scale with the amplitude ``A``; what the interlocks look
at toward the limit ahead, the position plus the stopping distance at
``stop.decel_mps2`` (:func:`daemon.supervisor.interlocks.stopping_distance_m`),
is ``A p + A^2 q`` at each instant, so the largest ``A`` that keeps it within a
share of the room from the set-point to that soft limit is a quadratic's root,
taken over every instant; the speed must stay as far below the overspeed limit.
The cart starts at rest at the set-point with the pendulum hanging still (the
pre-arm checks for ``excite`` ask for that).

- The largest safe amplitude also keeps the hold loop inside its acceleration
  limit, whatever the room: there the linear model is close, and what it leaves
  out (the dead band, friction, the estimator's lag, the command's one-sample
  delay) kept the plant model inside what it predicted on both example rigs
  (tests/test_excitation_sizing.py). An explicit amplitude above it is refused,
  naming the limit it would pass.
- The default amplitude uses DEFAULT_ROOM_SHARE of the room (and of the
  overspeed limit), well inside the soft limits, and never more than the drive
  limit.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from daemon.config.plant import plant_params
from daemon.control.cart_loops import CartHold
from daemon.control.excitation import PRBS_BIT_S, PRBS_BITS, unit_waveform
from daemon.control.lqr import discretise_zoh
from daemon.supervisor.stop_ramp import stop_lag_s
from sim_device.plant import PlantParams, linearise

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

__all__ = ["DEFAULT_ROOM_SHARE", "SAFE_ROOM_SHARE", "ExcitationSizing"]

PREDICTION_STEP_S = 0.005  # 40 steps per cycle at the chirp's 5 Hz end, 4 per PRBS bit
MAX_PREDICTION_STEPS = 24_000  # a longer chirp is predicted on a coarser step (600 s: 25 ms)
DIED_AWAY = 10.0  # the prediction runs on this many slowest time constants after the signal
SAFE_ROOM_SHARE = 1.0
DEFAULT_ROOM_SHARE = 0.5
_SLOPE_STEP = 1e-6
_HANGING = np.array([0.0, 0.0, math.pi, 0.0])


def _hold_slopes(params: PlantParams) -> tuple[np.ndarray, np.ndarray, float]:
    """The hold loop at hanging at rest: d(drive)/d(state), d(wanted acceleration)/d(state), its limit.

    Taken on the model without Coulomb friction and dead band (the loop's inverse model
    cancels both; neither has a slope at rest).
    """
    smooth = dataclasses.replace(
        params, cart_coulomb_n=0.0, drive=dataclasses.replace(params.drive, dead_band=0.0)
    )
    hold = CartHold(smooth)
    drive, accel = np.empty(4), np.empty(4)
    for i in range(4):
        step = np.zeros(4)
        step[i] = _SLOPE_STEP
        up, down = _HANGING + step, _HANGING - step
        drive[i] = (hold.update(*up) - hold.update(*down)) / (2.0 * _SLOPE_STEP)
        accel[i] = (hold.accel_command(*up) - hold.accel_command(*down)) / (2.0 * _SLOPE_STEP)
    return drive, accel, hold.max_accel_mps2


def _round_down(value: float, digits: int = 3) -> float:
    """``value`` rounded down to ``digits`` significant digits (so a named amplitude passes when given)."""
    if not math.isfinite(value) or value <= 0.0:
        return max(value, 0.0)
    scale = 10.0 ** (digits - 1 - math.floor(math.log10(value)))
    return math.floor(value * scale) / scale


@dataclass(frozen=True, eq=False)
class ExcitationSizing:
    """Predicted excursions for one rig; amplitudes in drive units (volts or newtons)."""

    closed: np.ndarray  # the hold loop closed around the plant linearised at hanging: d(state)/dt = closed state
    drive_in: np.ndarray  # ... + drive_in u, for the excitation u
    outputs: np.ndarray  # rows: position, velocity, the hold loop's wanted acceleration, from the state
    settle_s: float  # DIED_AWAY slowest time constants
    hold_max_accel_mps2: float
    soft_limit_m: float
    stop_decel_mps2: float
    stop_lag_s: float
    max_cart_speed_mps: float
    drive_limit: float
    unit: str
    _impulses: dict[float, np.ndarray] = field(default_factory=dict, repr=False)

    @classmethod
    def from_config(cls, config: PoiseConfig) -> ExcitationSizing:
        params = plant_params(config)
        a, b = linearise(params, "hanging")
        drive_slopes, accel_slopes, hold_max_accel_mps2 = _hold_slopes(params)
        closed = a + np.outer(b, drive_slopes)
        poles = np.linalg.eigvals(closed)
        if not np.all(poles.real < 0.0):  # cannot happen with a working hold loop; refuse every run
            raise ValueError(f"excite: the hold loop is not stable on this rig's model (poles {poles})")
        return cls(
            closed=closed,
            drive_in=b,
            outputs=np.vstack([np.eye(4)[:2], accel_slopes]),
            settle_s=DIED_AWAY / float(np.min(-poles.real)),
            hold_max_accel_mps2=hold_max_accel_mps2,
            soft_limit_m=config.soft_limit_m,
            stop_decel_mps2=config.stop.decel_mps2,
            stop_lag_s=stop_lag_s(config.interlocks.reaction_latency_s),
            max_cart_speed_mps=config.interlocks.max_cart_speed_mps,
            drive_limit=config.drive.limit,
            unit="V" if config.drive.kind == "voltage" else "N",
        )

    def impulse(self, step_s: float) -> np.ndarray:
        """The outputs, per unit drive held over step 0, at steps 0 .. ``settle_s`` (zero-order hold)."""
        if step_s not in self._impulses:
            taps = math.ceil(self.settle_s / step_s)
            ad, bd = discretise_zoh(self.closed, self.drive_in, step_s)
            # the states Ad^k Bd for k = 0 .. taps - 1, doubling the run each time (a dozen products)
            states, power = bd, ad
            while states.shape[1] < taps:
                states = np.hstack([states, power @ states])
                power = power @ power
            impulse = np.zeros((3, taps + 1))  # the drive held over step 0 shows from step 1 on
            impulse[:, 1:] = self.outputs @ states[:, :taps]
            self._impulses[step_s] = impulse
        return self._impulses[step_s]

    def predicted_run(self, kind: str, duration_s: float) -> tuple[float, float]:
        """The run to simulate, ``(duration_s, step_s)``, with the extremes of the whole run, at a bounded cost.

        A step is steady once the loop has settled; a PRBS repeats every period, so whole periods
        past the settling are left out (the end keeps its phase); a long chirp is predicted on a
        coarser step (at least 8 a cycle at its 5 Hz end for the longest run).
        """
        if kind == "step":
            return min(duration_s, self.settle_s), PREDICTION_STEP_S
        if kind == "prbs":
            period_s = len(PRBS_BITS) * PRBS_BIT_S
            repeats = max(0, math.floor((duration_s - self.settle_s - period_s) / period_s))
            return duration_s - repeats * period_s, PREDICTION_STEP_S
        return duration_s, max(PREDICTION_STEP_S, duration_s / MAX_PREDICTION_STEPS)

    def unit_response(self, kind: str, duration_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Cart position and velocity about the set-point, and the acceleration the hold loop wants,
        for a unit-amplitude run and the tail after it."""
        run_s, step_s = self.predicted_run(kind, duration_s)
        steps = max(1, math.ceil(run_s / step_s))
        signal = unit_waveform(kind, duration_s, np.arange(steps) * step_s)
        impulse = self.impulse(step_s)
        length = steps + impulse.shape[1] - 1
        size = 1 << (length - 1).bit_length()
        spectrum = np.fft.rfft(signal, size)
        x, v, accel = (np.fft.irfft(spectrum * np.fft.rfft(h, size), size)[:length] for h in impulse)
        return x, v, accel

    def largest_amplitude(self, kind: str, duration_s: float, setpoint_m: float,
                          room_share: float) -> tuple[float, str]:
        """The largest amplitude whose predicted run keeps within ``room_share`` of the room to the
        soft limits and of the overspeed limit, and what a larger one would do.

        Whatever the share, it also keeps the hold loop inside its acceleration limit: beyond it
        the loop saturates, the cart is no longer held and the linear prediction no longer holds.
        """
        x, v, accel = self.unit_response(kind, duration_s)
        ahead = np.sign(v)
        room = room_share * (self.soft_limit_m - ahead * setpoint_m)  # to the limit the cart heads for
        p = ahead * x + np.abs(v) * self.stop_lag_s
        q = v * v / (2.0 * self.stop_decel_mps2)
        # q A^2 + p A <= room, solved for A without cancellation: 2 room / (p + sqrt(p^2 + 4 q room))
        denominator = p + np.sqrt(p * p + 4.0 * q * np.maximum(room, 0.0))
        by_reach = np.divide(2.0 * room, denominator, out=np.full_like(x, math.inf),
                             where=(ahead != 0.0) & (denominator > 0.0))
        room_for_x = room_share * (self.soft_limit_m - np.sign(x) * setpoint_m)  # the position alone
        by_position = np.divide(room_for_x, np.abs(x), out=np.full_like(x, math.inf), where=x != 0.0)
        bounds = {  # what a larger amplitude would do, each with the amplitude where it starts
            f"take the cart past the soft limits ±{self.soft_limit_m:.3f} m":
                min(float(np.min(by_reach)), float(np.min(by_position))),
            f"drive the cart faster than the overspeed limit {self.max_cart_speed_mps:g} m/s":
                room_share * self.max_cart_speed_mps / max(float(np.max(np.abs(v))), 1e-12),
            f"ask the hold loop for more than its {self.hold_max_accel_mps2:g} m/s^2, so that it no "
            "longer holds the cart":
                self.hold_max_accel_mps2 / max(float(np.max(np.abs(accel))), 1e-12),
        }
        limit = min(bounds, key=bounds.get)
        return max(0.0, bounds[limit]), limit

    def default_amplitude(self, kind: str, duration_s: float, setpoint_m: float) -> float:
        """An amplitude that keeps the run well inside the soft limits (and within the drive limit)."""
        largest, _limit = self.largest_amplitude(kind, duration_s, setpoint_m, DEFAULT_ROOM_SHARE)
        return _round_down(min(largest, self.drive_limit))

    def problem(self, kind: str, amplitude: float, duration_s: float, setpoint_m: float) -> str | None:
        """One line if a run of ``amplitude`` is predicted to go past a limit, else None."""
        largest, limit = self.largest_amplitude(kind, duration_s, setpoint_m, SAFE_ROOM_SHARE)
        largest = _round_down(largest)
        if amplitude <= largest:
            return None
        return (
            f"excite: a {duration_s:g} s {kind} of amplitude {amplitude:g} {self.unit} is predicted to "
            f"{limit}; the largest safe amplitude here is {largest:g} {self.unit} (left out, "
            f"it is {self.default_amplitude(kind, duration_s, setpoint_m):g} {self.unit}, sized for the rig)"
        )
