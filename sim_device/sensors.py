"""What the simulated rig's sensors report: quantised encoder counts and sample times.

Encoders are incremental, as on the real rig: the counts are zero where the
rig powered up. The simulated rig powers up with the cart at the track centre
and the pendulum hanging at rest, so the counts are the plant model's
:func:`sim_device.plant.cart_counts` and :func:`sim_device.plant.pendulum_counts`
(nearest count; cart 0 at the centre, pendulum 0 hanging, positive with ``+x``
and with ``theta`` in the angle convention of DEVELOPERS.md). Counts keep
counting over whole turns and wrap as signed 32-bit integers, like a hardware
counter. A device reset does not re-zero them (the counter keeps its power).

Optional imperfections, all drawn from one seeded generator so a run repeats
exactly: Gaussian noise added to each reading (in counts, before
quantisation) and sample-time jitter (each sample taken a little early or
late; the device reports the actual time and the plant is integrated to it).
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass

from sim_device.plant import cart_counts, pendulum_counts

__all__ = ["SensorParams", "Sensors", "wrap_i32"]

TWO_PI = 2.0 * math.pi


@dataclass(frozen=True)
class SensorParams:
    """Encoder resolutions and the optional imperfections of the sensors."""

    cart_counts_per_m: float
    pendulum_counts_per_rev: int
    cart_noise_counts: float = 0.0
    pendulum_noise_counts: float = 0.0
    jitter_us: float = 0.0
    supply_v: float | None = None  # the supply voltage the device measures; None: not fitted

    def __post_init__(self) -> None:
        if not self.cart_counts_per_m > 0.0:
            raise ValueError(f"sensors.cart_counts_per_m must be > 0 (got {self.cart_counts_per_m!r})")
        if self.pendulum_counts_per_rev < 4:
            raise ValueError(
                f"sensors.pendulum_counts_per_rev must be >= 4 (got {self.pendulum_counts_per_rev!r})"
            )
        for name in ("cart_noise_counts", "pendulum_noise_counts", "jitter_us"):
            if not getattr(self, name) >= 0.0:
                raise ValueError(f"sensors.{name} must be >= 0 (got {getattr(self, name)!r})")
        if self.supply_v is not None and not (math.isfinite(self.supply_v) and self.supply_v > 0.0):
            raise ValueError(f"sensors.supply_v must be > 0 (got {self.supply_v!r})")


I32_MIN, I32_MAX = -0x8000_0000, 0x7FFF_FFFF


def wrap_i32(value: int) -> int:
    """``value`` as a signed 32-bit counter would hold it."""
    if I32_MIN <= value <= I32_MAX:
        return value
    return (value + 0x8000_0000) % 0x1_0000_0000 - 0x8000_0000


class Sensors:
    """Turns the plant's true state into encoder counts and sample times."""

    #: The random draws restart from a seed of their own every this much simulated time, so what
    #: the sensors read at a given simulated time depends on the seed and that time only, not on
    #: how many samples came before (a host that starts its work a few samples later, as the
    #: wall clock has it, still sees the same noise from a given instant on).
    BLOCK_US = 1_000_000

    def __init__(self, params: SensorParams, seed: int = 0):
        self.params = params
        self._seed = seed
        self._rng = random.Random(seed)
        self.next_block_us = self.BLOCK_US  # when the next block of draws begins (simulated µs)
        self.cart_offset_counts = 0
        self.pendulum_offset_counts = 0
        self.cart_dead_at_m: float | None = None
        self.pendulum_dead_at_rad: float | None = None
        self._cart_counts_per_m = params.cart_counts_per_m
        self._pendulum_counts_per_rev = params.pendulum_counts_per_rev
        self._cart_noise_m = params.cart_noise_counts / params.cart_counts_per_m
        self._pendulum_noise_rad = params.pendulum_noise_counts * TWO_PI / params.pendulum_counts_per_rev

    def start_block(self, sim_time_us: int) -> None:
        """Begin the block of draws that ``sim_time_us`` falls in (the device calls this on time)."""
        block = sim_time_us // self.BLOCK_US
        self._rng.seed(hash((self._seed, block)))
        self.next_block_us = (block + 1) * self.BLOCK_US

    def glitch(self, encoder: str, counts: int) -> None:
        """The ``"cart"`` or ``"pendulum"`` encoder miscounts by ``counts`` and stays off by that much."""
        if encoder == "cart":
            self.cart_offset_counts += counts
        elif encoder == "pendulum":
            self.pendulum_offset_counts += counts
        else:
            raise ValueError(f"encoder must be 'cart' or 'pendulum' (got {encoder!r})")

    def stop_cart_counting(self, x_m: float) -> None:
        """The cart encoder stops counting (unplugged, or its belt slipped): it reads ``x_m`` from now on."""
        self.cart_dead_at_m = x_m

    def stop_pendulum_counting(self, theta_rad: float) -> None:
        """The pendulum encoder stops counting: it reads ``theta_rad`` from now on."""
        self.pendulum_dead_at_rad = theta_rad

    @property
    def jittery(self) -> bool:
        return self.params.jitter_us > 0.0

    def encoder_counts(self, x_m: float, theta_rad: float) -> tuple[int, int]:
        """``(cart_counts, pendulum_counts)`` for the true cart position and pendulum angle.

        Noise is added to the true position before quantisation, so it shows as
        the occasional one-count flicker a real encoder on a vibrating rig gives.
        """
        if self._cart_noise_m:
            x_m += self._rng.gauss(0.0, self._cart_noise_m)
        if self._pendulum_noise_rad:
            theta_rad += self._rng.gauss(0.0, self._pendulum_noise_rad)
        if self.cart_dead_at_m is not None:
            x_m = self.cart_dead_at_m
        if self.pendulum_dead_at_rad is not None:
            theta_rad = self.pendulum_dead_at_rad
        cart = cart_counts(x_m, self._cart_counts_per_m) + self.cart_offset_counts
        pendulum = pendulum_counts(theta_rad, self._pendulum_counts_per_rev) + self.pendulum_offset_counts
        if I32_MIN <= cart <= I32_MAX and I32_MIN <= pendulum <= I32_MAX:  # wrap_i32 has nothing to do
            return cart, pendulum
        return wrap_i32(cart), wrap_i32(pendulum)

    def sample_offset_us(self, period_us: int) -> int:
        """How far (µs) the next sample is taken from its nominal time.

        Gaussian with standard deviation ``jitter_us``, clipped to a quarter
        period so samples never swap order.
        """
        jitter = self.params.jitter_us
        if not jitter:
            return 0
        bound = self.max_sample_offset_us(period_us)
        return max(-bound, min(bound, round(self._rng.gauss(0.0, jitter))))

    def max_sample_offset_us(self, period_us: int) -> int:
        """The largest offset :meth:`sample_offset_us` gives, either way: a quarter period."""
        return period_us // 4 if self.params.jitter_us > 0.0 else 0
