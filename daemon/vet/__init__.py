"""`poise vet`: a conformance check of a rig's firmware against protocol/PROTOCOL.md.

The check acts as a host on the rig's port (:mod:`daemon.vet.probe`), drives the device
through every clause a host can observe (:mod:`daemon.vet.scenario`) and reports one line per
clause (:mod:`daemon.vet.clauses`). Time-based clauses are measured on the device's own clock
(Telemetry.t_us, :mod:`daemon.vet.timing`), so a loaded host does not fail them.
"""

from daemon.vet.clauses import CLAUSES, Report
from daemon.vet.scenario import VetOptions, vet

__all__ = ["CLAUSES", "Report", "VetOptions", "vet"]
