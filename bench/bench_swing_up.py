"""Swing-up reliability: per encoder-noise seed, from hanging at rest to the catch and 30 s of balance.

Runs the closed-loop harness (daemon/control/simulate.py: plant model, quantised
noisy encoders, the configured estimator, one sample of command delay) for each
example rig and swing-up law, and prints one line per seed: whether it passed
(caught once within the deadline, never fell, within 2 degrees of upright at the
end, cart inside the soft limits, no end stop, command inside the drive limit,
swing amplitude growing every half swing until the last 10 % of energy), the
time to the catch, the largest cart excursion and the state at the catch; then
the distribution of catch times. Prints figures, asserts nothing.

    .venv/bin/python bench/bench_swing_up.py [--seeds N] [--noise-counts SIGMA] [--rig PATH] [--law pump|energy]
"""

from __future__ import annotations

import argparse
import itertools
import math
import statistics
import time

from daemon.config import load_config
from daemon.control.encoders import wrap_angle
from daemon.control.rig_setup import build_control_set
from daemon.control.simulate import ClosedLoop, SwingUpThenBalance, swing_up_until_caught
from sim_device.sensors import SensorParams

RIGS = ("configs/kestrel-1.toml", "configs/wren-2.toml")
LAWS = ("pump", "energy")
DEADLINE_S = 30.0
BALANCE_S = 30.0


def run_once(path: str, law: str, seed: int, noise_counts: float) -> dict:
    config = load_config(path)
    cs = build_control_set(config, law)
    sensors = SensorParams(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev,
                           noise_counts, noise_counts)
    loop = ClosedLoop(cs.params, sensors, cs.estimator, config.sampling.rate_hz, seed=seed)
    sequence = SwingUpThenBalance(cs.swing_up, cs.balance, cs.window)
    amplitudes = swing_up_until_caught(loop, sequence, DEADLINE_S)
    caught_s, caught_state = (loop.t_s, loop.plant.state) if sequence.balancing else (None, None)
    if caught_s is not None:
        loop.run(sequence, BALANCE_S)
    monotonic = all(b > a for a, b in itertools.pairwise(amplitudes))
    passed = (caught_s is not None and (sequence.catches, sequence.falls) == (1, 0)
              and abs(wrap_angle(loop.plant.state[2])) < math.radians(2) and monotonic
              and loop.max_abs_x_m < cs.soft_limit_m and not loop.end_stop_touched
              and loop.max_abs_command <= cs.params.drive.limit)
    return {"passed": passed, "caught_s": caught_s, "state": caught_state, "max_x_m": loop.max_abs_x_m,
            "soft_m": cs.soft_limit_m, "max_u": loop.max_abs_command, "limit": cs.params.drive.limit,
            "half_swings": len(amplitudes), "monotonic": monotonic, "falls": sequence.falls}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=16)
    parser.add_argument("--noise-counts", type=float, default=0.5)
    parser.add_argument("--rig", choices=RIGS, action="append")
    parser.add_argument("--law", choices=LAWS, action="append")
    args = parser.parse_args()
    for path in args.rig or RIGS:
        for law in args.law or LAWS:
            start = time.perf_counter()
            passed, times = 0, []
            for seed in range(args.seeds):
                r = run_once(path, law, seed, args.noise_counts)
                passed += r["passed"]
                caught = "   never" if r["caught_s"] is None else f"{r['caught_s']:6.2f} s"
                at = ""
                if r["state"] is not None:
                    times.append(r["caught_s"])
                    x, v, th, w = r["state"]
                    at = (f"  at catch x {x:+.3f} m v {v:+.2f} m/s th {math.degrees(wrap_angle(th)):+5.1f} deg "
                          f"w {math.degrees(w):+4.0f} deg/s")
                print(f"{path:24s} {law:6s} seed {seed:3d} {'pass' if r['passed'] else 'FAIL'}  catch {caught}  "
                      f"max|x| {r['max_x_m']:.3f}/{r['soft_m']:.3f} m  max|u| {r['max_u']:5.2f}/{r['limit']:.0f}  "
                      f"half swings {r['half_swings']:2d} monotonic {'yes' if r['monotonic'] else 'NO'}  "
                      f"falls {r['falls']}{at}", flush=True)
            spread = (f"catch min {min(times):.2f} s, median {statistics.median(times):.2f} s, max {max(times):.2f} s"
                      if times else "never caught")
            print(f"{path} {law}: {passed}/{args.seeds} passed; {spread}; noise {args.noise_counts} counts; "
                  f"{time.perf_counter() - start:.0f} s wall\n", flush=True)


if __name__ == "__main__":
    main()
