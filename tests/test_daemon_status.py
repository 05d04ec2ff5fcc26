"""What the daemon's status tells an operator: homing progress and result, the next step, loop lag, fault hints."""

from __future__ import annotations

import json

import pytest
from test_daemon_support import run_for, running_service, wait_for

from daemon.api.wire import encode_line
from daemon.errors import CommandRefused
from daemon.supervisor import State


async def test_homing_reports_its_phase_and_travel_then_homed_and_arm_as_the_next_step(tmp_path):
    async with running_service(tmp_path) as service:
        before = service.status()
        assert (before["homed"], before["next"], before["homing"]["phase"]) == (False, "home", None)
        service.execute("home", {}, "api")
        phases = []
        while service.supervisor.machine.state is State.HOMING:
            await run_for(service, 0.2)
            homing = service.status()["homing"]
            if not phases or phases[-1][0] != homing["phase"]:
                phases.append((homing["phase"], homing["travel_m"]))
        assert await wait_for(service, State.IDLE) is State.IDLE
        after = service.status()
        assert [phase for phase, _ in phases][:3] == ["seek_negative", "seek_positive", "to_centre"]
        assert after["homed"] is True and after["next"] == "arm"
        assert after["homing"]["phase"] == "done"
        assert abs(after["homing"]["measured_travel_m"] - after["homing"]["expected_travel_m"]) < 0.02
        assert "homed" in after["homing"]["message"]


async def test_status_carries_loop_lag_and_the_longest_wait_between_reads(tmp_path):
    async with running_service(tmp_path, lockstep=False) as service:
        await run_for(service, 0.5)
        loop = service.status()["loop"]
        assert 0.0 <= loop["lag_ms_p50"] <= loop["lag_ms_p99"] <= loop["lag_ms_max"] <= loop["lag_ms_worst"]
        assert loop["stall_limit_ms"] == 30.0 and loop["link_timeout_ms"] == 30.0
        # 500 Hz: reads at least one sample period apart, on average exactly that
        assert loop["read_gap_ms_worst"] >= 2.0 * 0.9
        json.loads(encode_line({"status": service.status()}))  # strict JSON throughout


async def test_a_fault_that_latches_again_says_so_and_carries_its_hint(tmp_path):
    async with running_service(tmp_path) as service:
        for press in (1, 2):
            service.rig.press_estop()
            await wait_for(service, State.ESTOP)
            fault = service.status()["faults"][0]
            assert (fault["name"], fault["count"]) == ("estop.button", press)
            assert "release the button" in fault["hint"]
            service.rig.release_estop()
            await run_for(service, 0.1)
            service.execute("reset", {}, "api")
            await run_for(service, 0.2)  # the device has cleared its latch
        assert service.status()["faults"] == []


async def test_refusals_give_the_operator_the_right_reason(tmp_path):
    async with running_service(tmp_path) as service:
        with pytest.raises(CommandRefused, match="nothing to reset: no fault or e-stop is latched"):
            service.execute("reset", {}, "cli")
        service.execute("estop", {}, "cli")  # a software e-stop: no button to release
        with pytest.raises(CommandRefused) as refused:
            service.execute("home", {}, "cli")
        assert refused.value.reason == "home: not allowed in ESTOP: e-stop latched (reset first)"
        service.execute("reset", {}, "cli")
        service.rig.press_estop()
        await wait_for(service, State.ESTOP)
        with pytest.raises(CommandRefused, match=r"latched by the rig's button \(release it, then reset\)"):
            service.execute("arm", {}, "cli")
