"""The summary a run stores when it ends, computed from what the store holds of the run.

``Recorder.end_run`` stores it for every run it ends (completed, stopped, a run
closed with the recorder, a run cut short by a write failure), and a run found
left open by a dead writer gets it when it is marked aborted, so no caller has
to build one. Its keys:

- ``samples``, ``samples_dropped``, ``events``, ``events_dropped``: the run's counters.
- ``first_t_device_us``, ``last_t_device_us``, ``sample_time_s``: device time of
  the first and last committed samples and the span between them; ``wall_time_s``:
  start to end on the host's clock.
- ``modes_seen`` (names, in code order), ``mode_reached`` (the most advanced,
  see :mod:`daemon.recording.modes`) and ``last_mode`` (the mode it ended in).
- ``trips``: interlock trips by name, counted from the run's ``interlock.trip``
  events; ``device_fault_reports``: its ``device.fault_report`` events. These
  are the kinds the daemon stores (daemon/runtime/service.py).
- ``link``: the link's counters over the run (``frames_rx``, ``gaps``,
  ``lost_frames``, ``crc_failures``, ``resyncs``, ... as in
  :class:`protocol.link_stats.LinkStats`), from its ``link.counters`` events:
  the daemon stores the counters when a run starts on a live link, when a link
  is lost and when a run ends on a live link, and each link's counters start
  at zero. ``lost_frames`` are telemetry samples the rig sent that never
  arrived whole (sequence gaps): with ``samples`` they account for every
  sample the rig sent during the run.
- ``reported``: only if the caller of ``end_run`` handed over figures of its own.
"""

from __future__ import annotations

import json
import sqlite3
from collections import Counter
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from daemon.recording.store import RunRecord

TRIP_EVENT = "interlock.trip"
DEVICE_FAULT_EVENT = "device.fault_report"
LINK_COUNTERS_EVENT = "link.counters"
LINK_AT_RUN_START = "run start"  # the counters a run on a live link starts from


def link_counters_over_run(conn: sqlite3.Connection, run_id: int) -> dict[str, int]:
    """The link counters summed over each stretch of link within the run (module docstring)."""
    totals: Counter[str] = Counter()
    start: dict[str, int] = {}
    rows = conn.execute(
        "SELECT data_json FROM events WHERE run_id = ? AND kind = ? ORDER BY event_id",
        (run_id, LINK_COUNTERS_EVENT),
    )
    for (data_json,) in rows:
        data = json.loads(data_json)
        counters = data["counters"]
        if data["at"] == LINK_AT_RUN_START:
            start = counters
            continue
        totals.update({name: value - start.get(name, 0) for name, value in counters.items()})
        start = {}
    return dict(totals)


def run_summary(conn: sqlite3.Connection, run: RunRecord) -> dict:
    """The summary of ``run`` (as read from the store on ``conn``): see the module docstring."""
    trips: Counter[str] = Counter()
    device_faults = 0
    events = conn.execute(
        "SELECT kind, data_json FROM events WHERE run_id = ? AND kind IN (?, ?) ORDER BY event_id",
        (run.run_id, TRIP_EVENT, DEVICE_FAULT_EVENT),
    )
    for kind, data_json in events:
        if kind == DEVICE_FAULT_EVENT:
            device_faults += 1
        else:
            trips[str(json.loads(data_json).get("name", "unnamed"))] += 1
    return {
        "samples": run.samples_written,
        "samples_dropped": run.samples_dropped,
        "events": run.events_written,
        "events_dropped": run.events_dropped,
        "first_t_device_us": run.first_t_device_us,
        "last_t_device_us": run.last_t_device_us,
        "sample_time_s": run.sample_time_s,
        "wall_time_s": run.wall_time_s,
        "modes_seen": [run.mode_names.get(code, f"mode {code}") for code in sorted(run.modes_seen)],
        "mode_reached": run.mode_reached,
        "last_mode": run.last_mode,
        "trips": dict(trips),
        "device_fault_reports": device_faults,
        "link": link_counters_over_run(conn, run.run_id),
    }
