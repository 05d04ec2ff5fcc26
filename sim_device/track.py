"""The rail the cart runs on: hard end stops at ``±length_m/2`` and limit switches.

Positions are measured from the track centre. The limit switch at either end
is active when ``|x| >= length_m/2 - switch_inset_m`` on that side.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["TrackParams", "limit_switches", "switch_trip_m"]


@dataclass(frozen=True)
class TrackParams:
    length_m: float
    switch_inset_m: float
    has_limit_switches: bool = True

    def __post_init__(self) -> None:
        if not self.length_m > 0.0:
            raise ValueError(f"track.length_m must be > 0 (got {self.length_m!r})")
        if not 0.0 <= self.switch_inset_m < self.length_m / 2:
            raise ValueError(
                f"track.switch_inset_m must be in [0, length_m/2) (got {self.switch_inset_m!r})"
            )

    @property
    def half_length_m(self) -> float:
        """Distance from the track centre to either end stop."""
        return self.length_m / 2


def switch_trip_m(track: TrackParams) -> float:
    """How far from the centre either limit switch trips; infinity on a track without switches."""
    if not track.has_limit_switches:
        return math.inf
    return track.length_m / 2 - track.switch_inset_m


def limit_switches(track: TrackParams, x_m: float) -> tuple[bool, bool]:
    """``(negative-end switch active, positive-end switch active)`` at cart position ``x_m``."""
    trip_m = switch_trip_m(track)
    return x_m <= -trip_m, x_m >= trip_m
