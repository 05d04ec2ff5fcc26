"""Print how fast the plant model steps: pure-float RK4 against a numpy RK4 of the same equations.

Usage: .venv/bin/python bench/bench_plant.py [--seconds 5]

Runs the demo rig (configs/kestrel-1.toml) at a 1 kHz step with a swinging
pendulum and a varying drive command. Figures are printed, never asserted; the
machines are shared, so compare the ratios within one run.
"""

from __future__ import annotations

import argparse
import math
import time
from pathlib import Path

import numpy as np

from daemon.config import load_config
from daemon.config.plant import plant_params
from sim_device.plant import Plant, PlantParams, drive_gains, effective_command, state_derivative

DT_S = 0.001
CONFIG = Path(__file__).resolve().parent.parent / "configs" / "kestrel-1.toml"


def commands(count: int) -> list[float]:
    return [3.0 * math.sin(0.01 * i) for i in range(count)]


def time_plant(params: PlantParams, substeps: int, drive: list[float]) -> float:
    plant = Plant(params, (0.0, 0.0, math.pi - 1.0, 0.0), substeps=substeps)
    step = plant.step
    start = time.perf_counter()
    for u in drive:
        step(u, DT_S)
    return time.perf_counter() - start


def time_numpy_reference(params: PlantParams, substeps: int, drive: list[float]) -> float:
    """Classic RK4 on a numpy state vector, as a vectorised implementation would write it."""
    gain, damping = drive_gains(params.drive)
    ml = params.pendulum_mass_kg * params.com_distance_m
    mgl = ml * params.gravity_mps2
    jp, mt = params.pivot_inertia_kgm2, params.moving_mass_kg
    b = params.cart_viscous_n_per_mps + damping
    bp = params.pivot_viscous_nms_per_rad

    def derivative(z: np.ndarray, f_rest: float) -> np.ndarray:
        _x, v, th, w = z
        s, c = np.sin(th), np.cos(th)
        mass = np.array([[mt, -ml * c], [-ml * c, jp]])
        q = np.array(
            [f_rest - b * v - params.cart_coulomb_n * np.sign(v) - ml * s * w * w, mgl * s - bp * w]
        )
        a, alpha = np.linalg.solve(mass, q)
        return np.array([v, a, w, alpha])

    z = np.array([0.0, 0.0, math.pi - 1.0, 0.0])
    h = DT_S / substeps
    start = time.perf_counter()
    for u in drive:
        f_rest = gain * effective_command(params.drive, u)
        for _ in range(substeps):
            k1 = derivative(z, f_rest)
            k2 = derivative(z + 0.5 * h * k1, f_rest)
            k3 = derivative(z + 0.5 * h * k2, f_rest)
            k4 = derivative(z + h * k3, f_rest)
            z = z + h / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=5.0, help="simulated seconds per run")
    args = parser.parse_args()
    params = plant_params(load_config(CONFIG))
    steps = int(args.seconds / DT_S)
    drive = commands(steps)
    state_derivative(params, (0.0, 0.0, 1.0, 0.0), 0.0)  # warm imports and caches
    print(f"plant step at {1 / DT_S:.0f} Hz, demo rig, {steps} steps per run")
    print(f"{'integrator':<22}{'substeps':>9}{'steps/s':>12}{'us/step':>10}{'x real time':>13}")
    pure_by_substeps = {}
    for substeps in (1, 2, 4):
        wall = time_plant(params, substeps, drive)
        pure_by_substeps[substeps] = wall
        print(
            f"{'pure-float RK4':<22}{substeps:>9}{steps / wall:>12.0f}{wall / steps * 1e6:>10.2f}"
            f"{args.seconds / wall:>13.1f}"
        )
    numpy_steps = max(steps // 10, 1)
    wall = time_numpy_reference(params, 4, drive[:numpy_steps]) * steps / numpy_steps
    print(
        f"{'numpy RK4 (reference)':<22}{4:>9}{steps / wall:>12.0f}{wall / steps * 1e6:>10.2f}"
        f"{args.seconds / wall:>13.1f}"
    )
    print(f"pure-float / numpy speed ratio at 4 substeps: {wall / pure_by_substeps[4]:.1f}x")


if __name__ == "__main__":
    main()
