"""Closed-loop harness: the plant model, its encoders, our estimator and a controller, sample by sample.

Like the real rig: the encoders are read at each sample (quantised, with
optional noise), the estimator and controller run, and the command reaches
the drive one sample later (it is held over the *next* sample period). The
estimator is told the drive that was actually applied over the period that
just ended. Pure floats throughout, so 30 s at 500 Hz takes about a second.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from daemon.control.balance import BalanceController
from daemon.control.catch import CatchWindow, WindowEvent
from daemon.control.drive_model import clamp
from daemon.control.encoders import wrap_angle
from daemon.control.estimation import StateEstimator
from sim_device.plant import Plant, PlantParams, pendulum_energy
from sim_device.sensors import SensorParams, Sensors

__all__ = ["ClosedLoop", "SwingUpThenBalance"]

State = tuple[float, float, float, float]


class ClosedLoop:
    """One simulated rig under control. ``advance(command)`` moves one sample and returns the new estimate."""

    def __init__(
        self,
        params: PlantParams,
        sensors: SensorParams,
        estimator: StateEstimator,
        rate_hz: int,
        state0: State = (0.0, 0.0, math.pi, 0.0),
        seed: int = 0,
        substeps: int = 2,
    ):
        self.plant = Plant(params, state0, substeps)
        self.sensors = Sensors(sensors, seed)
        self.estimator = estimator
        self.dt_s = 1.0 / rate_hz
        self.limit = params.drive.limit
        self.pending = 0.0
        self.applied = 0.0
        self.t_s = 0.0
        self.max_abs_x_m = abs(state0[0])
        self.max_abs_command = 0.0
        self.end_stop_touched = False
        counts = self.sensors.encoder_counts(state0[0], state0[2])
        self.measured = estimator.reset(*counts, state0[1], state0[3])

    def advance(self, command: float) -> State:
        self.max_abs_command = max(self.max_abs_command, abs(command))
        plant = self.plant
        plant.step(self.pending, self.dt_s)
        self.applied = self.pending
        self.pending = clamp(command, self.limit)
        self.t_s += self.dt_s
        x, _v, theta, _w = plant.state
        self.max_abs_x_m = max(self.max_abs_x_m, abs(x))
        self.end_stop_touched = self.end_stop_touched or plant.end_stop_touched
        self.measured = self.estimator.update(*self.sensors.encoder_counts(x, theta), self.applied)
        return self.measured

    def run(self, controller: Callable[[float, float, float, float], float], seconds: float,
            until: Callable[[State], bool] | None = None) -> bool:
        """Run ``controller`` for ``seconds``; stop early (returning True) once ``until(measured)`` holds."""
        for _ in range(round(seconds / self.dt_s)):
            self.advance(controller(*self.measured))
            if until is not None and until(self.measured):
                return True
        return False


class SwingUpThenBalance:
    """The swing-up -> catch -> balance sequence a supervisor runs, as one callable controller.

    On a fall it returns to swing-up (counting the fall); the daemon's
    supervisor decides this per config instead.
    """

    def __init__(self, swing_up, balance: BalanceController, window: CatchWindow):
        self.swing_up = swing_up
        self.balance = balance
        self.window = window
        self.balancing = False
        self.catches = 0
        self.falls = 0
        self.last_drive = 0.0
        self.biggest_step_at_catch = 0.0

    def __call__(self, x: float, v: float, theta: float, omega: float) -> float:
        event = self.window.update(theta, omega, self.balancing)
        if event is WindowEvent.CATCH:
            self.balance.reset((x, v, theta, omega), self.last_drive)
            self.balancing = True
            self.catches += 1
        elif event is WindowEvent.FALL:
            self.swing_up.reset((x, v, theta, omega), self.last_drive)
            self.balancing = False
            self.falls += 1
        controller = self.balance if self.balancing else self.swing_up
        drive = controller.update(x, v, theta, omega)
        if event is WindowEvent.CATCH:
            self.biggest_step_at_catch = abs(drive - self.last_drive)
        self.last_drive = drive
        return drive


def swing_up_until_caught(loop: ClosedLoop, sequence: SwingUpThenBalance, deadline_s: float) -> list[float]:
    """Run until balance takes over; the swing amplitudes (true angle from hanging) until the last 10 % of energy."""
    params = loop.plant.params
    climb = 2 * params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2  # hanging to upright
    amplitudes, peak, last_p, pumping = [], 0.0, 0.0, True
    for _ in range(round(deadline_s / loop.dt_s)):
        loop.advance(sequence(*loop.measured))
        if sequence.balancing:
            break
        if pumping:
            p = wrap_angle(loop.plant.state[2] - math.pi)
            if (p >= 0.0) != (last_p >= 0.0) and peak > math.radians(1.0):
                amplitudes.append(peak)
                peak = 0.0
            peak, last_p = max(peak, abs(p)), p
            pumping = pendulum_energy(params, loop.plant.state) < -0.1 * climb  # not yet 90 % of the way up
    return amplitudes
