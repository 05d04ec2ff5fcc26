"""The dashboard driven by Textual's headless pilot against the real daemon and the simulated rig.

The daemon service runs in the test's event loop with the simulated rig in
lockstep on a real pty; the dashboard talks to it only through the control
socket, exactly as `poise dash` does. Waits are on conditions (state reached,
screen shown), each bounded so a broken build fails instead of hanging.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable

import pytest
from test_daemon_support import (
    device_received,
    homed_and_ready,
    keep_every_device_frame,
    run_for,
    running_service,
    wait_for,
)

from daemon.runtime.session import swing_up_when_still
from daemon.supervisor import State
from daemon.ui.app import PoiseDash
from daemon.ui.confirm import ConfirmScreen
from daemon.ui.connection import Backoff
from daemon.ui.safety import SafetyScreen
from daemon.ui.widgets.notice import Notice
from daemon.ui.widgets.state_panel import StatePanel
from protocol import Drive, Stop

SIZE = (140, 44)
WAIT_LIMIT_S = 60.0  # a hang guard, not a speed requirement
# The headless dashboard shares the test's event loop with the daemon, and drawing a whole
# screen can hold the loop for a few hundred milliseconds on a loaded machine. In lockstep
# that only pauses the rig (it samples when answered), and the host judges a lockstep rig's
# silence on a longer wall-clock limit (daemon/runtime/watchdog.py), so the defaults stand.
CATEGORY_0 = "[stop]\ncategory = 0\n"
QUICK_RECONNECT = Backoff(first_s=0.05, max_s=0.2)


def dashboard(service) -> PoiseDash:
    return PoiseDash(service.config.api.socket_path, backoff=QUICK_RECONNECT)


async def until(pilot, condition: Callable[[], bool], what: str) -> None:
    try:
        async with asyncio.timeout(WAIT_LIMIT_S):
            while not condition():
                await pilot.pause(0.02)
    except TimeoutError:
        pytest.fail(f"gave up waiting for {what}")


async def reached(service, *states: State) -> State:
    """The first of ``states`` the daemon's supervisor reaches (bounded like ``until``)."""
    try:
        async with asyncio.timeout(WAIT_LIMIT_S):
            return await wait_for(service, *states)
    except TimeoutError:
        pytest.fail(f"gave up waiting for the daemon to reach {', '.join(s.name for s in states)}")


def notice(app: PoiseDash) -> str:
    return app.query_one(Notice).message


def transitions_from(service, source: str) -> list[str]:
    return [
        e.text
        for e in service.supervisor.machine.events
        if e.kind == "transition" and e.source == source
    ]


async def test_estop_key_during_balance_latches_estop_and_the_next_command_frame_is_a_stop(
    tmp_path,
):
    async with running_service(tmp_path, extra=CATEGORY_0, serve_api=True) as service:
        # Up to balance before the dashboard starts: in lockstep the rig's time only advances
        # when the loop is free, and a drawing dashboard would make the swing-up slow.
        await homed_and_ready(service)
        await swing_up_when_still(service)
        assert await reached(service, State.BALANCE, State.FAULT, State.IDLE) is State.BALANCE
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state == "BALANCE", "the dashboard to show BALANCE")
            keep_every_device_frame(service)
            await pilot.press("space")
            assert await reached(service, State.ESTOP) is State.ESTOP
            await run_for(service, 0.1)
            frames = device_received(service)
            at = max(i for i, m in enumerate(frames) if type(m) is Stop)
            before, after = frames[:at], frames[at:]
            assert any(type(m) is Drive and m.drive != 0.0 for m in before[-5:])  # it was balancing
            assert type(after[0]) is Stop
            assert all(m.drive == 0.0 for m in after if type(m) is Drive)
            assert service.rig.device.armed is False
            assert transitions_from(service, "dashboard")[-1].startswith("BALANCE -> ESTOP")
            await until(pilot, lambda: app.state == "ESTOP", "the dashboard to show ESTOP")
            assert notice(app).startswith("e-stop latched")


async def test_arm_asks_for_the_safety_caution_once_then_a_confirmation_and_cancel_sends_nothing(
    tmp_path,
):
    async with running_service(tmp_path, serve_api=True) as service:
        service.execute("home", {}, "api")
        assert await reached(service, State.IDLE, State.FAULT) is State.IDLE
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: "arm" in (app.status.get("allowed") or []), "arm allowed")
            await pilot.press("a")
            assert isinstance(app.screen, SafetyScreen)
            await pilot.press("escape")  # backing out of the caution sends nothing
            assert not isinstance(app.screen, SafetyScreen)
            await pilot.press("a")
            assert isinstance(app.screen, SafetyScreen)
            await pilot.press("enter")  # "I understand" has the focus
            assert isinstance(app.screen, ConfirmScreen)
            await pilot.press("n")
            await until(
                pilot, lambda: not isinstance(app.screen, ConfirmScreen), "the question closed"
            )
            assert notice(app) == "arm: cancelled, nothing sent"
            await pilot.press("a")  # the caution is shown once per session
            assert isinstance(app.screen, ConfirmScreen)
            await pilot.press("enter")  # Cancel has the focus: Enter alone never arms
            await until(
                pilot, lambda: not isinstance(app.screen, ConfirmScreen), "the question closed"
            )
            assert service.supervisor.machine.state is State.IDLE
            assert transitions_from(service, "dashboard") == []
            await pilot.press("a", "y")
            await until(pilot, lambda: app.state == "READY", "the dashboard to show READY")
            assert service.supervisor.machine.state is State.READY
            assert transitions_from(service, "dashboard") == ["IDLE -> READY on arm: operator arm"]
            assert notice(app) == "arm: IDLE → READY"


async def test_a_refused_command_is_shown_with_the_daemons_reason(tmp_path):
    async with running_service(tmp_path, serve_api=True) as service:
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state == "IDLE", "the dashboard to show IDLE")
            await pilot.press("a", "enter", "y")  # not homed: the pre-arm checks refuse
            await until(pilot, lambda: "refused" in notice(app), "the refusal")
            assert notice(app).startswith("arm refused: arm: pre-arm checks failed: ")
            assert "cart.homed: cart not homed" in notice(app)
            assert service.supervisor.machine.state is State.IDLE
            refusals = [e for e in service.supervisor.machine.events if e.kind == "refused"]
            assert [e.source for e in refusals] == ["dashboard"]


async def test_a_command_the_state_does_not_allow_is_explained_and_not_sent(tmp_path):
    async with running_service(tmp_path, serve_api=True) as service:
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state == "IDLE", "the dashboard to show IDLE")
            events_before = len(service.supervisor.machine.events)
            await pilot.press("b")
            assert not isinstance(app.screen, ConfirmScreen | SafetyScreen)
            assert notice(app).startswith("balance is not possible in IDLE (possible: ")
            assert len(service.supervisor.machine.events) == events_before


async def test_the_estop_key_works_on_a_question_and_closes_it(tmp_path):
    async with running_service(tmp_path, serve_api=True) as service:
        service.execute("home", {}, "api")
        assert await reached(service, State.IDLE, State.FAULT) is State.IDLE
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: "arm" in (app.status.get("allowed") or []), "arm allowed")
            await pilot.press("a", "enter")
            assert isinstance(app.screen, ConfirmScreen)
            await pilot.press("space")
            assert await reached(service, State.ESTOP) is State.ESTOP
            await until(pilot, lambda: app.state == "ESTOP", "the dashboard to show ESTOP")
            assert not isinstance(app.screen, ConfirmScreen)
            await pilot.press("y")  # the closed question cannot arm anything now
            await pilot.pause()
            assert service.supervisor.machine.state is State.ESTOP


async def test_the_dashboard_waits_for_the_daemon_shows_it_gone_and_reconnects_after_a_restart(
    tmp_path,
):
    app = PoiseDash(tmp_path / "poise.sock", backoff=QUICK_RECONNECT)  # rig_config_text's socket
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: app.link.attempts >= 1, "a failed connection attempt")
        assert "NO DAEMON" in panel_text(app)
        async with running_service(tmp_path, serve_api=True) as service:
            await until(pilot, lambda: app.state == "IDLE", "the dashboard to show IDLE")
            service.execute("estop", {}, "api")  # tells this daemon's status from the next one's
            await until(pilot, lambda: app.state == "ESTOP", "the dashboard to show ESTOP")
        await until(pilot, lambda: not app.link.connected, "the dashboard to notice")
        assert "NO DAEMON" in panel_text(app)
        assert app.state == ""
        await pilot.press("space")  # nothing to send it to: the operator is told so
        await until(pilot, lambda: "E-STOP NOT DELIVERED" in notice(app), "the e-stop warning")
        assert "use the hardware e-stop" in notice(app)
        async with running_service(tmp_path, serve_api=True):
            await until(pilot, lambda: app.link.connected, "the dashboard to reconnect")
            await until(pilot, lambda: app.state == "IDLE", "the new daemon's status")


def panel_text(app: PoiseDash) -> str:
    return str(app.query_one(StatePanel).render().renderables[0])
