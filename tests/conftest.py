"""Suite-wide test settings.

No test is ever rerun: a test that fails only sometimes is a defect to fix.

Tests marked ``realtime`` run the daemon and the simulated rig on the wall
clock with the default timeouts (a starved process trips its watchdogs, as on
a real rig). They run on their own, after the rest (the README's test command:
``pytest -n 2 -m "not realtime"``, then ``pytest -m realtime``), so the suite's
own parallel load is not what they measure; the shared machine's load still is.
"""

import pytest


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption(
        "--restarts", type=int, default=None, metavar="N",
        help="kill -9 and restart the daemon N times in tests/test_daemon_restart.py "
        "(default: 20 in lockstep, 1 in real time, where each life takes about a minute)",
    )
