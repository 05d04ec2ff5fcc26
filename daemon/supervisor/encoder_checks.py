"""Encoder plausibility: glitches and dead encoders, judged on the raw readings against the plant's physics.

The other interlocks take the encoders' word for where the cart and the
pendulum are. These checks ask whether that word can be true. They run every
sample in the motion states and during a stop ramp, on the raw rates (plain
differences of successive readings over one sample period: the estimator's
``raw_v_mps`` and ``raw_omega_radps``), never on the Kalman estimate, and
every trip switches the drive off at once (IEC 60204-1 stop category 0): a stop
that follows a velocity it cannot trust may push the cart instead of braking it.

**Glitch** (``encoder.cart_glitch``, ``encoder.pendulum_glitch``): a reading
that jumps. The change of a raw rate from one sample to the next is the second
difference of the readings, ``(p[k] - 2 p[k-1] + p[k-2]) / dt``. For the true
motion it is at most ``A dt``, where ``A`` is the largest acceleration the
plant can have (see :func:`largest_accelerations`). Each reading is the true
position rounded to a count (within half a count) plus at most ``f`` counts of
flicker (``interlocks.encoder_flicker_counts``: edge jitter, electrical noise),
so the second difference of the readings is off by at most
``(1/2 + f) (1 + 2 + 1) = 2 + 4 f`` counts. A change of raw rate beyond::

    A dt + (2 + 4 f) q / dt          (q: one count, in metres or radians)

cannot be motion: the encoder miscounted. For Kestrel-1 at 500 Hz with
``f = 2``: cart 0.30 m/s (104 counts of second difference), pendulum 8.5 rad/s
(11 counts). An encoder that stops counting while it turns faster than that
is seen as a glitch too. A smaller miscount passes; it is one sample's error of at most
that size, which no stop follows for long.

**Dead cart encoder** (``encoder.cart_dead``): the cart's reading stays put
while the drive must have moved the cart. While the reading stays within one
count of where it last moved to, a model cart runs beside it: it starts at the
raw velocity of that last movement and is driven by the drive the rig reports
it applied, with the measured pendulum angle and rate acting on it, through the
plant's own equations (:func:`sim_device.plant.acceleration_function`, back-EMF
and the stick test of Coulomb friction included) but with
``CART_FRICTION_MARGIN`` times the configured Coulomb friction, as a real
cart's breakaway friction exceeds its sliding friction. From rest with a drive
force ``F`` at rest (``gain (|u| - dead band)``), the model cart has moved at
least ``(F - 1.5 f_c) t^2 / (2 Mt)`` after ``t`` (less once its back-EMF grows).
When the model cart has gone ``CART_DEAD_DETECT_M`` (1 mm, 174 counts on
Kestrel-1) the encoder cannot be counting (or the cart is jammed): trip. The
true cart, driven by ``F`` against ``f_c``, has by then gone at most
``(F - f_c) / (F - 1.5 f_c)`` times as far; that is below 2 cm for every drive
force above ``29/19 f_c`` (0.53 N, 0.33 V on Kestrel-1). Below it the drive
barely overcomes friction, and the cart creeps at most ``(F - f_c) / b``
(10 mm/s on Kestrel-1, whose back-EMF damps it; 0.11 m/s on Wren-2's force
drive) while the check waits for it.

**Dead pendulum encoder** (``encoder.pendulum_dead``): the pendulum's reading
stays put while the cart's motion must have swung it. The pendulum's equation
(sim_device/plant.py) is ``J alpha = m l (cos th a + g sin th) - b_p w``, so
over an episode in which the reading stays within one count of where it
started (``th0``), with the cart's displacement ``X(t)`` since then (summed from
its raw rates)::

    th(t) - th0 = w0' t + (m l / J) D(t),   D(t) = cos th0 X(t) + g sin th0 t^2 / 2

where ``w0'`` lumps the unknown initial rates of pendulum and cart. The true
angle stays within ``3 q`` of ``th0`` (one count either side, plus rounding), so
``(m l / J) D`` lies within ``3 q`` of a line through the origin, and at the
half-way time::

    |D(t/2) - D(t)/2| <= 1.5 (J / m l) 3 q + 1.5 (2 q_x) + g (3/2) q t^2 / 2

(the last two for the cart's rounding and for the angle known to ``1.5 q``
in ``sin th0``). ``J / m l`` is trusted to ``PENDULUM_MODEL_MARGIN``. A larger
left side is a curvature of the cart's path the pendulum must have answered:
the encoder is not counting. This needs no rates at all, so neither the
quantised rate at the episode's start nor a pendulum still for long and then
struck can fool it. For Kestrel-1 the bound is 4.6 mm plus ``11 t^2`` mm, at
most 11 mm more at the episode's end (``PENDULUM_EPISODE_S``, which keeps the
gravity term bounded).
A pendulum hanging or balanced still on a cart that holds still or coasts is
consistent with a frozen reading, and stays so until the cart's path bends:
homing's start or end, swing-up, a stop's deceleration or a fall all bend it.

The checks forget their episodes whenever they pause (:meth:`EncoderChecks.pause`)
or a sample does not follow its predecessor by one period (telemetry lost on
the way: that sample's raw rates span several periods over one period's time,
so they are not rates at all), so a check that resumes starts from the readings
it then sees, and from the rates of the first sample whose predecessor it has.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

from daemon.supervisor.interlocks import Action, Trip
from sim_device.drive import drive_gains
from sim_device.plant import PlantParams, acceleration_function

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

_sin, _cos = math.sin, math.cos

__all__ = [
    "CART_DEAD_DETECT_M",
    "CART_FRICTION_MARGIN",
    "EncoderChecks",
    "EncoderLimits",
    "largest_accelerations",
]

#: The model cart's travel, with the reading still, at which the cart encoder is judged dead.
CART_DEAD_DETECT_M = 0.001
#: The model cart's Coulomb friction, as a multiple of the configured (breakaway exceeds sliding
#: friction); common practice, no source.
CART_FRICTION_MARGIN = 1.5
#: The pendulum's own parameters (J / m l) are trusted to a factor of this; common practice, no source.
PENDULUM_MODEL_MARGIN = 2.0
#: A pendulum episode is restarted after this long, so its gravity margin stays small.
PENDULUM_EPISODE_S = 1.0
#: The cart speed the glitch bound allows for: this multiple of the overspeed limit (the cart
#: overshoots it while a stop bites); common practice, no source. The pendulum's rate is taken at
#: its overspeed limit, which is far above what swing-up reaches.
SPEED_MARGIN = 2.0


def largest_accelerations(params: PlantParams, max_speed_mps: float, max_rate_radps: float) -> tuple[float, float]:
    """``(cart m/s^2, pendulum rad/s^2)``: the most the plant can accelerate, off the end stops.

    From the solved equations of motion (sim_device/plant.py) with every term at its largest
    magnitude at once: the drive's full force at rest ``gain limit``, its back-EMF and the viscous
    friction at ``max_speed_mps`` (reversing at speed doubles the drive's force), the Coulomb
    friction, the pendulum's centripetal force at ``max_rate_radps``, ``m g l sin th cos th <=
    m g l / 2`` and ``D = Mt J - (m l cos th)^2 >= Mt J - (m l)^2``::

        a     <= (J (Q + m l w^2) + m l (m g l / 2 + b_p w)) / D
        alpha <= (m l (Q + m l w^2) + Mt (m g l + b_p w)) / D
    """
    gain, damping = drive_gains(params.drive)
    ml = params.pendulum_mass_kg * params.com_distance_m
    mgl = ml * params.gravity_mps2
    jp, mt = params.pivot_inertia_kgm2, params.moving_mass_kg
    force_n = (
        gain * params.drive.limit
        + (damping + params.cart_viscous_n_per_mps) * max_speed_mps
        + params.cart_coulomb_n
        + ml * max_rate_radps * max_rate_radps
    )
    pivot_nm = params.pivot_viscous_nms_per_rad * max_rate_radps
    det = mt * jp - ml * ml
    return (jp * force_n + ml * (mgl / 2 + pivot_nm)) / det, (ml * force_n + mt * (mgl + pivot_nm)) / det


@dataclass(frozen=True, slots=True)
class EncoderLimits:
    """The bounds of the checks, worked out once from the rig (see the module docstring)."""

    dt_s: float
    cart_jump_mps: float  # largest change of the raw cart velocity in one sample
    pendulum_jump_radps: float  # ...of the raw pendulum rate
    cart_window_m: float  # "still": within this of where the reading last moved to
    pendulum_window_rad: float
    path_margin_m: float  # 1.5 ((J / m l) 3 q times the margin + 2 q_x): the half-way bound
    gravity_margin_mps2: float  # g (3/2) q / 2, times t^2
    gravity_mps2: float
    drive_gain: float  # force at rest per unit of effective command
    dead_band: float

    @classmethod
    def from_config(cls, config: PoiseConfig, params: PlantParams) -> EncoderLimits:
        lim = config.interlocks
        dt_s = 1.0 / config.sampling.rate_hz
        q_x = 1.0 / config.encoders.cart_counts_per_m
        q_th = 2.0 * math.pi / config.encoders.pendulum_counts_per_rev
        cart_a, pendulum_a = largest_accelerations(
            params,
            SPEED_MARGIN * lim.max_cart_speed_mps,
            math.radians(lim.max_pendulum_rate_dps),
        )
        reading_error = 2.0 + 4.0 * lim.encoder_flicker_counts  # counts, in a second difference
        ml = params.pendulum_mass_kg * params.com_distance_m
        return cls(
            dt_s=dt_s,
            cart_jump_mps=cart_a * dt_s + reading_error * q_x / dt_s,
            pendulum_jump_radps=pendulum_a * dt_s + reading_error * q_th / dt_s,
            cart_window_m=1.5 * q_x,
            pendulum_window_rad=1.5 * q_th,
            path_margin_m=1.5 * (PENDULUM_MODEL_MARGIN * params.pivot_inertia_kgm2 / ml * 3.0 * q_th
                                 + 2.0 * q_x),
            gravity_margin_mps2=params.gravity_mps2 * 1.5 * q_th / 2.0,
            gravity_mps2=params.gravity_mps2,
            drive_gain=drive_gains(params.drive)[0],
            dead_band=params.drive.dead_band,
        )


class EncoderChecks:
    """The per-sample glitch and dead-encoder checks; keeps the last rates and the still episodes."""

    __slots__ = (
        "_accel",
        "_active",
        "_cart_moved_m",
        "_last_t_s",
        "_model_m",
        "_model_v",
        "_path",
        "_pend_cos",
        "_pend_moved_rad",
        "_pend_sin",
        "_pend_t_s",
        "_pend_x",
        "_rates_known",
        "_v",
        "_w",
        "limits",
    )

    def __init__(self, limits: EncoderLimits, params: PlantParams):
        self.limits = limits
        # The model cart: the plant's equations with the friction margin.
        margin = replace(params, cart_coulomb_n=CART_FRICTION_MARGIN * params.cart_coulomb_n)
        self._accel = acceleration_function(margin)
        self._active = False
        self._rates_known = False
        self._v = self._w = 0.0
        self._cart_moved_m = self._model_m = self._model_v = 0.0
        self._last_t_s = 0.0
        self._pend_moved_rad = self._pend_t_s = self._pend_x = 0.0
        self._pend_sin, self._pend_cos = 0.0, -1.0
        self._path: list[float] = []  # D at each sample of the pendulum episode

    @classmethod
    def from_config(cls, config: PoiseConfig) -> EncoderChecks:
        from daemon.config.plant import (
            plant_params,  # the plant model (numpy), only once a config is read
        )

        params = plant_params(config)
        return cls(EncoderLimits.from_config(config, params), params)

    def pause(self) -> None:
        """The checks do not apply in this sample: forget the episodes (they restart when resumed)."""
        self._active = False

    def check(
        self, t_s: float, v_mps: float, theta_rad: float, omega_radps: float, drive_applied: float
    ) -> Trip | None:
        """This sample's encoder trip, or ``None``; ``v_mps`` and ``omega_radps`` are the raw rates."""
        lim = self.limits
        dt = lim.dt_s
        follows = t_s - self._last_t_s < 1.5 * dt
        self._last_t_s = t_s
        if not (self._active and follows):  # resuming: these readings are the start of everything
            self._active = True
            self._rates_known = follows  # after lost telemetry these "rates" span the gap
            self._v, self._w = v_mps, omega_radps
            self._start_cart(v_mps)
            self._start_pendulum(t_s, theta_rad)
            return None
        if not self._rates_known:  # the first rates over one period since the gap
            self._rates_known = True
            self._v, self._w = v_mps, omega_radps
            self._start_cart(v_mps)
            return None
        dv, dw = v_mps - self._v, omega_radps - self._w
        self._v, self._w = v_mps, omega_radps
        if not abs(dv) <= lim.cart_jump_mps:  # NaN trips too
            return self._glitch("cart", dv, lim.cart_jump_mps, "m/s")
        if not abs(dw) <= lim.pendulum_jump_radps:
            return self._glitch("pendulum", dw, lim.pendulum_jump_radps, "rad/s")
        # Dead cart encoder: the model cart beside a still reading.
        self._cart_moved_m += v_mps * dt
        if abs(self._cart_moved_m) > lim.cart_window_m:
            self._start_cart(v_mps)
        else:  # one Euler step of the model cart under the applied drive (inline: every sample)
            band = lim.dead_band
            effective = (
                drive_applied - band if drive_applied > band
                else drive_applied + band if drive_applied < -band
                else 0.0
            )
            v = self._model_v
            a, _alpha = self._accel(
                v, _sin(theta_rad), _cos(theta_rad), omega_radps, lim.drive_gain * effective
            )
            v_new = v + a * dt
            if v != 0.0 and (v_new > 0.0) != (v > 0.0):  # reversed within the step: friction stops it
                v_new = 0.0
            self._model_v = v_new
            self._model_m += v_new * dt
            if abs(self._model_m) > CART_DEAD_DETECT_M:
                return Trip(
                    "encoder.cart_dead",
                    Action.DRIVE_OFF,
                    f"cart encoder reads still while drive {drive_applied:+.2f} must have moved the cart "
                    f"{self._model_m * 1000:+.1f} mm",
                    {"model_m": self._model_m, "model_v_mps": self._model_v, "drive": drive_applied},
                )
        # Dead pendulum encoder: a still reading needs the cart's path to bend as gravity has it.
        self._pend_moved_rad += omega_radps * dt
        self._pend_x += v_mps * dt
        t_ep = t_s - self._pend_t_s
        if abs(self._pend_moved_rad) > lim.pendulum_window_rad or t_ep > PENDULUM_EPISODE_S:
            self._start_pendulum(t_s, theta_rad)
            return None
        path = self._path
        d = self._pend_cos * self._pend_x + lim.gravity_mps2 * self._pend_sin * t_ep * t_ep / 2.0
        path.append(d)
        k = len(path)
        half = k >> 1
        if not half:
            return None
        share = half / k
        bend = abs(path[half - 1] - share * d)
        allowed = (1.0 + share) / 1.5 * lim.path_margin_m + lim.gravity_margin_mps2 * t_ep * t_ep
        if bend > allowed:
            return Trip(
                "encoder.pendulum_dead",
                Action.DRIVE_OFF,
                f"pendulum encoder reads still for {t_ep:.3f} s while the cart's path bent "
                f"{bend * 1000:.1f} mm ({allowed * 1000:.1f} allowed): it must have swung the pendulum",
                {"still_s": t_ep, "bend_m": bend, "allowed_m": allowed},
            )
        return None

    def _start_cart(self, v_mps: float) -> None:
        self._cart_moved_m = self._model_m = 0.0
        self._model_v = v_mps

    def _start_pendulum(self, t_s: float, theta_rad: float) -> None:
        self._pend_moved_rad = self._pend_x = 0.0
        self._pend_t_s = t_s
        self._pend_sin, self._pend_cos = math.sin(theta_rad), math.cos(theta_rad)
        self._path.clear()

    @staticmethod
    def _glitch(which: str, change: float, limit: float, unit: str) -> Trip:
        return Trip(
            f"encoder.{which}_glitch",
            Action.DRIVE_OFF,
            f"{which} encoder jumped: its raw rate changed {change:+.3f} {unit} in one sample, "
            f"more than the {limit:.3f} {unit} the plant can give",
            {"change": change, "limit": limit},
        )
