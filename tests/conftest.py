"""Suite-wide test settings.

End-to-end tests run the daemon, the simulated rig, the dashboard and real
subprocesses on two shared cores. Their interlocks are real: a host process
starved for long enough trips the link and loop watchdogs, exactly as it
should on a real rig. Those modules may therefore rerun a failed test twice
(pytest-rerunfailures; every rerun is reported in the summary). Unit and
reference-check modules are never rerun.
"""

from __future__ import annotations

import pytest

END_TO_END_PREFIXES = ("test_daemon_", "test_session_", "test_dash_pilot", "test_demo_", "test_sim_wire")


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    for item in items:
        if item.path.name.startswith(END_TO_END_PREFIXES) and item.path.name != "test_daemon_support.py":
            item.add_marker(pytest.mark.flaky(reruns=2))
