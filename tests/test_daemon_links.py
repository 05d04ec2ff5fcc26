"""The whole workflow over every link the daemon reads: a pty, TCP, a socket pair.

The daemon holds one kind of port whatever the peer (daemon/link/port.py); the
built-in rig sits on a pseudo-terminal (pyserial opens its path), on a loopback
TCP port (pyserial's socket:// URL) or on a socket pair in the same process.
This and the link-dependent safety tests (the API e-stop in test_daemon_estop.py,
a stalled rig and a cut link in test_daemon_interlocks.py) run over each, in
lockstep on the rig's clock.
"""

from __future__ import annotations

import itertools

import pytest
from test_daemon_support import (
    balancing,
    recorded_samples,
    run_for,
    running_service,
    wait_for,
)

from daemon.runtime.embedded_sim import RIG_LINKS
from daemon.supervisor import State

pytestmark = pytest.mark.parametrize("link", RIG_LINKS)

CATEGORY_0 = "[stop]\ncategory = 0\n"


async def test_home_swing_up_balance_and_stop_with_every_sample_recorded(tmp_path, link):
    async with running_service(tmp_path, link=link) as service:
        assert service.port.where == service.rig.where
        service.start_recording("links")
        await balancing(service)
        await run_for(service, 1.0)
        assert service.supervisor.machine.state is State.BALANCE
        service.execute("stop", {}, "api")
        assert await wait_for(service, State.IDLE, State.FAULT) is State.IDLE
        seqs = [row["seq"] for row in recorded_samples(service)]
        assert len(seqs) > 1000
        # telemetry seq counts each sample by one, modulo 2**16 (PROTOCOL.md section 5)
        assert all((b - a) % 65536 == 1 for a, b in itertools.pairwise(seqs))
