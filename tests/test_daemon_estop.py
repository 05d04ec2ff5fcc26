"""E-stop through the control API and by signal while the pendulum is balancing."""

from __future__ import annotations

import os
import signal

import pytest
from test_daemon_support import (
    balancing,
    device_received,
    frames_from_last_stop,
    run_for,
    running_service,
    wait_for,
)

from daemon.api.client import ApiClient
from daemon.runtime.embedded_sim import RIG_LINKS
from daemon.supervisor import Output, State
from protocol import Drive, Stop

CATEGORY_0 = "[stop]\ncategory = 0\n"


@pytest.mark.parametrize("link", RIG_LINKS)
async def test_estop_through_the_api_during_balance_makes_the_next_command_frame_a_stop(tmp_path, link):
    async with running_service(tmp_path, extra=CATEGORY_0, serve_api=True, link=link) as service:
        await balancing(service)
        async with await ApiClient.connect(service.config.api.socket_path) as client:
            result = await client.request("estop")
        assert result["state"] == "ESTOP"
        assert service.supervisor.machine.output is Output.OFF
        await run_for(service, 0.1)
        before, after = frames_from_last_stop(service)
        assert any(type(m) is Drive and m.drive != 0.0 for m in before[-5:])  # it was balancing
        assert type(after[0]) is Stop
        assert [m.drive for m in after if type(m) is Drive] and all(
            m.drive == 0.0 for m in after if type(m) is Drive
        )
        assert service.rig.device.armed is False
        status = service.status()
        assert status["faults"][0]["reason"].startswith("estop")


async def test_sigusr1_is_an_estop(tmp_path):
    async with running_service(tmp_path, extra=CATEGORY_0) as service:
        service.install_signal_handlers()
        await balancing(service)
        os.kill(os.getpid(), signal.SIGUSR1)
        assert await wait_for(service, State.ESTOP) is State.ESTOP
        await run_for(service, 0.05)
        _before, after = frames_from_last_stop(service)
        assert all(m.drive == 0.0 for m in after if type(m) is Drive)
        assert service.supervisor.machine.events[-1].source == "signal"


async def test_category_1_estop_ramps_the_cart_down_then_switches_the_drive_off(tmp_path):
    async with running_service(tmp_path) as service:  # the demo rig's default: category 1
        await balancing(service)
        service.execute("estop", {}, "api")
        assert service.supervisor.machine.output is Output.RAMP
        await run_for(service, 2.0)
        assert service.supervisor.machine.state is State.ESTOP
        assert service.supervisor.machine.output is Output.OFF
        assert service.cycle.last_drive == 0.0
        assert all(m.drive == 0.0 for m in device_received(service) if type(m) is Drive)
        assert service.rig.device.armed is False
