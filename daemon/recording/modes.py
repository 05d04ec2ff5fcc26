"""How far a run got: the supervisor modes in their order of progression.

A run works its way up ``IDLE < HOMING < READY < EXCITE < SWING_UP < BALANCE``
(an identification run, EXCITE, starts from READY; a swing-up ends in BALANCE).
The run's *mode reached* is the most advanced of these among its samples.
DISCONNECTED, STOPPING, FAULT and ESTOP are not steps on that way: they say how
a run was interrupted or ended, which the run's last mode and outcome show.

Modes are compared by name, not code: each run stores its own code -> name table
(``runs.mode_names_json``), so a store keeps its meaning if the codes change.
"""

from __future__ import annotations

from collections.abc import Iterable

MODE_PROGRESSION: tuple[str, ...] = ("IDLE", "HOMING", "READY", "EXCITE", "SWING_UP", "BALANCE")
_RANK = {name: rank for rank, name in enumerate(MODE_PROGRESSION)}


def most_advanced(names: Iterable[str]) -> str | None:
    """The name among ``names`` that comes last in MODE_PROGRESSION; None if none is in it."""
    ranked = [name for name in names if name in _RANK]
    return max(ranked, key=_RANK.__getitem__) if ranked else None
