"""The same integration scenarios over every link the daemon reads: a pty, TCP, a socket pair.

The daemon holds one kind of port whatever the peer (daemon/link/port.py); the
built-in rig sits on a pseudo-terminal (pyserial opens its path), on a loopback
TCP port (pyserial's socket:// URL) or on a socket pair in the same process.
Each scenario runs over each, in lockstep on the rig's clock.
"""

from __future__ import annotations

import itertools

import pytest
from test_daemon_support import (
    balancing,
    device_received,
    frames_from_last_stop,
    homed_and_ready,
    latched,
    recorded_samples,
    run_for,
    running_service,
    stored_trips,
    wait_for,
)

from daemon.api.client import ApiClient
from daemon.runtime.embedded_sim import RIG_LINKS
from daemon.supervisor import Output, State
from protocol import Drive, Stop
from sim_device.faults import Stall

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


async def test_an_api_estop_while_balancing_makes_the_next_frame_a_stop(tmp_path, link):
    async with running_service(tmp_path, extra=CATEGORY_0, serve_api=True, link=link) as service:
        await balancing(service)
        async with await ApiClient.connect(service.socket_path) as client:
            assert (await client.request("estop"))["state"] == "ESTOP"
        assert service.supervisor.machine.output is Output.OFF
        await run_for(service, 0.1)
        before, after = frames_from_last_stop(service)
        assert any(type(m) is Drive and m.drive != 0.0 for m in before[-5:])
        assert type(after[0]) is Stop
        assert all(m.drive == 0.0 for m in after if type(m) is Drive)
        assert service.rig.device.armed is False


async def test_a_stalled_rig_trips_the_link_timeout_and_is_sent_a_stop(tmp_path, link):
    async with running_service(tmp_path, link=link) as service:
        await homed_and_ready(service)
        service.rig.schedule_fault(service.rig.sim_time_s, Stall(duration_ms=1500))
        await wait_for(service, State.FAULT)
        assert latched(service) == ["link.timeout"]
        await run_for(service, 0.1)  # telemetry is back after the stall
        assert any(type(m) is Stop for m in device_received(service))


async def test_a_cut_link_trips_link_lost_and_reset_leaves_it_disconnected(tmp_path, link):
    async with running_service(tmp_path, link=link) as service:
        service.start_recording("links")
        await homed_and_ready(service)
        service.rig.transport.close()  # the cable is pulled
        await wait_for(service, State.FAULT)
        assert latched(service) == ["link.lost"]
        assert [trip["name"] for trip in await stored_trips(service)] == ["link.lost"]
        service.execute("reset", {}, "api")
        assert service.supervisor.machine.state is State.DISCONNECTED
