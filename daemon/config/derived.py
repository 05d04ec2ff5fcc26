"""Config values derived from the rig when the file leaves them out, filled in once as it is loaded.

:func:`resolve_derived` runs after validation (from :func:`daemon.config.parse_config`)
and returns the config with each value filled in (``model_copy``), so every reader
of ``config.stop.decel_mps2`` or ``config.swing_up.pump_offset_m`` sees a number.
The config remembers what was derived and from what (:attr:`PoiseConfig.derived`),
which ``poise check-config`` and ``poise design`` print.

- ``stop.decel_mps2``: from the plant model, the most the drive surely gives the
  category 1 stop at ``drive.limit``, bounded by what the track needs
  (:func:`daemon.control.stop_capability.derived_stop_decel`). An explicit value
  is checked against the drive where the daemon starts, as before.
- ``swing_up.pump_offset_m``: :data:`PUMP_OFFSET_SHARE` of the swing-up travel
  limit (the soft limit times ``swing_up.track_use_fraction``). The share is what
  caught fastest on both example rigs with the pumping law (bench/bench_swing_up.py,
  shares 0.5 to 0.7 tried, 16 seeds each; every seed caught at each share). An
  explicit value must lie inside the travel limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

__all__ = ["PUMP_OFFSET_SHARE", "DerivedValue", "resolve_derived", "swing_up_travel_m"]

#: Pumping set-points at ± this share of the swing-up travel limit, unless the config sets them.
PUMP_OFFSET_SHARE = 0.7


@dataclass(frozen=True, slots=True)
class DerivedValue:
    """One value the config left out: its field path, the value filled in, its unit and where it came from."""

    field: str
    value: float
    unit: str
    source: str

    def describe(self) -> str:
        return f"{self.field} = {self.value:g} {self.unit}, derived {self.source}"


def swing_up_travel_m(config: PoiseConfig) -> float:
    """How far from the centre swing-up may take the cart: ``swing_up.track_use_fraction`` of the soft limit."""
    return config.soft_limit_m * config.swing_up.track_use_fraction


def _upper_bound(section: type, name: str) -> float:
    """The ``le`` bound a section declares for a field (a derived value must respect it too)."""
    for rule in section.model_fields[name].metadata:
        if getattr(rule, "le", None) is not None:
            return float(rule.le)
    return math.inf


def resolve_derived(config: PoiseConfig) -> tuple[PoiseConfig, list[str]]:
    """``config`` with its derived values filled in, and the problems (one line each) that make it unusable."""
    from daemon.config.plant import (
        plant_params,  # the plant model (numpy), only once a config is read
    )
    from daemon.control.stop_capability import derived_stop_decel

    problems: list[str] = []
    derived: list[DerivedValue] = []
    stop, swing_up = config.stop, config.swing_up
    if stop.decel_mps2 is None:
        try:
            decel, source = derived_stop_decel(config, plant_params(config))
        except ValueError as exc:
            problems.append(str(exc))
        else:
            highest = _upper_bound(type(stop), "decel_mps2")
            if decel > highest:  # a drive far stronger than the cart needs
                decel, source = highest, f"at the field's upper bound (the drive allows {decel:.2f}: {source})"
            stop = stop.model_copy(update={"decel_mps2": decel})
            derived.append(DerivedValue("stop.decel_mps2", decel, "m/s^2", source))
    travel_m = swing_up_travel_m(config)
    travel = (
        f"the swing-up travel limit ±{travel_m:.3f} m, which is swing_up.track_use_fraction "
        f"{config.swing_up.track_use_fraction:g} of the soft limit ±{config.soft_limit_m:.3f} m"
    )
    offset_m = round(PUMP_OFFSET_SHARE * travel_m, 4)
    if swing_up.pump_offset_m is None and offset_m <= 0.0:  # the field's range is > 0
        problems.append(
            f"swing_up.pump_offset_m: {PUMP_OFFSET_SHARE:g} of {travel} rounds to 0 m: "
            "no room to pump (raise swing_up.track_use_fraction)"
        )
    elif swing_up.pump_offset_m is None:
        swing_up = swing_up.model_copy(update={"pump_offset_m": offset_m})
        source = f"from the track: {PUMP_OFFSET_SHARE:g} of {travel}"
        derived.append(DerivedValue("swing_up.pump_offset_m", offset_m, "m", source))
    elif swing_up.pump_offset_m >= travel_m:
        problems.append(
            f"swing_up.pump_offset_m: {swing_up.pump_offset_m:g} m is not inside {travel}; "
            f"leave it out to have it derived ({PUMP_OFFSET_SHARE:g} of the travel limit)"
        )
    if problems:
        return config, problems
    resolved = config.model_copy(update={"stop": stop, "swing_up": swing_up})
    resolved._derived = tuple(derived)
    return resolved, []
