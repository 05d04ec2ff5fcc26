"""The dashboard driven by Textual's headless pilot against the real daemon and the simulated rig.

The daemon service runs in the test's event loop with the simulated rig in
lockstep on a real pty; the dashboard talks to it only through the control
socket, exactly as `poise dash` does. Waits are on conditions (state reached,
screen shown), each bounded so a broken build fails instead of hanging.
"""

from __future__ import annotations

import asyncio
import io
import re
from collections.abc import Callable

import pytest
from rich.console import Console
from test_daemon_support import (
    REPO,
    device_received,
    homed_and_ready,
    keep_every_device_frame,
    run_for,
    running_service,
    wait_for,
)

from daemon.runtime.session import swing_up_when_still
from daemon.supervisor import State
from daemon.supervisor.fault_hints import FAULT_HINTS
from daemon.ui.app import PoiseDash
from daemon.ui.confirm import ConfirmScreen
from daemon.ui.connection import Backoff
from daemon.ui.keys import key_table_markdown
from daemon.ui.layout import FULL_COLUMNS, FULL_ROWS, MIN_COLUMNS, MIN_ROWS
from daemon.ui.palette import GOOD
from daemon.ui.safety import SafetyScreen
from daemon.ui.widgets.keybar import KeyBar
from daemon.ui.widgets.link import LinkHealth
from daemon.ui.widgets.notice import Notice
from daemon.ui.widgets.state_panel import StatePanel
from protocol import Drive, Stop
from sim_device.faults import DriverFault

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


async def homed(service) -> None:
    """Home the rig through the daemon's API (before the dashboard starts: see above)."""
    service.execute("home", {}, "api")
    assert await reached(service, State.IDLE, State.FAULT) is State.IDLE


async def until_arm_allowed(pilot, app: PoiseDash) -> None:
    await until(pilot, lambda: "arm" in (app.status.get("allowed") or []), "arm allowed")


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
        await homed(service)
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until_arm_allowed(pilot, app)
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
        await homed(service)
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until_arm_allowed(pilot, app)
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


def state_lines(app: PoiseDash) -> list[str]:
    """The state panel's lines as drawn (before the panel wraps them to its width)."""
    return [line.plain for line in app.query_one(StatePanel).render().renderables]


def screen_text(app: PoiseDash) -> str:
    """Everything on the terminal now, as plain text: what the operator sees at this size.

    Made as App.export_screenshot makes its picture: the screen's compositor renders the
    whole screen, and a recording console turns it into text.
    """
    width, height = app.size
    console = Console(width=width, height=height, file=io.StringIO(), record=True)
    screen = app.screen._compositor.render_update(full=True, screen_stack=app._background_screens)
    console.print(screen)
    return console.export_text()


def every_state_panel(app: PoiseDash) -> list[list[str]]:
    """From now on, the state panel's lines each time what it shows changes (filled in as it goes).

    Polling would miss short phases: a lockstep rig runs many times faster than real time.
    """
    drawn: list[list[str]] = []
    panel = app.query_one(StatePanel)
    panel.watch(panel, "shown", lambda: drawn.append(state_lines(app)), init=False)
    return drawn


def first_key(app: PoiseDash) -> tuple[str, str, str]:
    """(key, title, look) of the key bar's first key after the e-stop."""
    chip = app.query_one(KeyBar).chips()[0]
    return chip.label, chip.title, chip.style


async def test_homing_shows_its_phase_and_distance_then_the_travel_it_measured_and_arm_comes_next(
    tmp_path,
):
    # A slow seek, so that homing spans many status lines however fast the lockstep rig runs.
    slow = "[homing]\nspeed_mps = 0.06\n"
    async with running_service(tmp_path, serve_api=True, extra=slow) as service:
        track = service.config.track
        # Switch to switch: the track length less both switch insets (the config's own numbers).
        expected_m = track.length_m - 2.0 * track.switch_inset_m
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state == "IDLE", "the dashboard to show IDLE")
            assert "next    h  home" in state_lines(app)
            assert "cart    not homed" in state_lines(app)
            assert first_key(app) == ("h", "home", "next")  # the key bar agrees with the panel
            drawn = every_state_panel(app)
            await pilot.press("h", "enter", "y")
            await until(pilot, lambda: bool(app.status.get("homed")), "homing to end")
            seeking = re.compile(rf"cart    seeking \+ end: (\d\.\d\d) of {expected_m:.2f} m")
            while_seeking = [lines for lines in drawn if any(map(seeking.fullmatch, lines))]
            assert while_seeking, f"the seek toward the + end was never shown: {drawn}"
            matches = [seeking.fullmatch(line) for lines in while_seeking for line in lines]
            distances = [float(match[1]) for match in matches if match]
            assert distances == sorted(distances) and 0.0 <= distances[0] <= expected_m
            assert any(line.startswith("cart    seeking − end: ") for lines in drawn for line in lines)
            # Nothing to do but wait (or stop) while homing: no next step is offered.
            assert not any(line.startswith("next") for line in while_seeking[0])
            measured_m = service.cycle.homing.measured_travel_m
            assert abs(measured_m - expected_m) <= service.config.homing.length_tolerance_m
            await until(pilot, lambda: app.state == "IDLE", "the dashboard to show IDLE again")
            lines = state_lines(app)
            assert f"cart    homed · switches {measured_m:.4f} m apart" in lines
            assert "next    a  arm" in lines  # homing is not offered as the next step again
            assert any(line.startswith("also") and " h  home" in line for line in lines)
            assert first_key(app) == ("a", "arm", "next")
            chips = app.query_one(KeyBar).chips()
            assert [chip.style for chip in chips if chip.label == "h"] == ["on"]


async def test_the_rig_link_panel_shows_loop_lag_and_the_worst_read_gap_against_their_limits(
    tmp_path,
):
    async with running_service(
        tmp_path, serve_api=True, extra="[interlocks]\nloop_stall_ms = 5000\n"
    ) as service:
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state == "IDLE", "the dashboard to show IDLE")
            await until(pilot, lambda: app.status["loop"]["lag_ms_max"] > 0, "a lag figure")
            loop = app.status["loop"]
            text = app.query_one(LinkHealth).render()
            lines = text.plain.split("\n")
            lag = f"loop lag   p99 {loop['lag_ms_p99']:.1f}  max {loop['lag_ms_max']:.1f} / 5000 ms"
            assert lag in lines
            gap_ms, timeout_ms = loop["read_gap_ms_worst"], loop["link_timeout_ms"]
            gap = f"read gap   worst {gap_ms:.1f} / {timeout_ms:.0f} ms"
            assert gap in lines
            # Far under a 5 s stall limit (a pilot's loop lags by milliseconds): shown green.
            start = text.plain.index(lag) + lag.index("max ") + len("max ")
            max_style = [span.style for span in text.spans if span.start == start]
            assert max_style == [f"bold {GOOD}"]


async def test_a_latched_fault_shows_its_hint_and_says_plainly_when_it_has_latched_again(tmp_path):
    # The simulated motor driver reports a fault, is reset from the dashboard, then reports one
    # again. Each is scheduled on the rig's clock only once the step before it is done (the
    # power-up reset, the dashboard showing the reset), however fast or slow the lockstep rig
    # runs against the test.
    hint = FAULT_HINTS["device.driver"]
    async with running_service(tmp_path, serve_api=True) as service:
        service.rig.schedule_fault(service.rig.sim_time_s + 0.5, DriverFault())
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state == "FAULT", "the first fault")
            lines = state_lines(app)
            assert "✖ device.driver: rig reports fault device.driver" in lines
            assert f"  {hint}" in lines
            assert not any("has latched" in line for line in lines)
            await pilot.press("c")  # reset: no question, it never starts motion
            await until(pilot, lambda: app.state == "IDLE", "the reset")
            assert notice(app) == "reset: FAULT → IDLE"
            service.rig.schedule_fault(service.rig.sim_time_s + 0.5, DriverFault())
            await until(pilot, lambda: app.state == "FAULT", "the second fault")
            assert service.status()["faults"][0]["count"] == 2
            assert f"  device.driver has latched 2 times: {hint}" in state_lines(app)
            assert first_key(app) == ("c", "reset", "next")


async def test_q_on_a_question_cancels_it_and_quits_when_the_rig_is_at_rest(tmp_path):
    async with running_service(tmp_path, serve_api=True) as service:
        await homed(service)
        app = dashboard(service)
        async with app.run_test(size=SIZE) as pilot:
            await until_arm_allowed(pilot, app)
            await pilot.press("a")
            assert isinstance(app.screen, SafetyScreen)
            await pilot.press("q")
            await until(pilot, lambda: app.return_code is not None, "the dashboard to quit")
        assert service.supervisor.machine.state is State.IDLE
        assert transitions_from(service, "dashboard") == []


async def test_q_on_a_question_while_the_rig_moves_asks_to_stop_and_q_again_stops_and_quits(
    tmp_path,
):
    async with running_service(tmp_path, serve_api=True) as service:
        await homed_and_ready(service)
        app = dashboard(service)
        app.caution_acknowledged = True
        async with app.run_test(size=SIZE) as pilot:
            await until(pilot, lambda: app.state == "READY", "the dashboard to show READY")
            await pilot.press("u")
            assert isinstance(app.screen, ConfirmScreen) and not app.screen.about_quitting
            await pilot.press("q")  # the swing-up question closes; quitting asks its own
            await until(
                pilot,
                lambda: isinstance(app.screen, ConfirmScreen) and app.screen.about_quitting,
                "the stop-and-quit question",
            )
            await pilot.press("q")
            await until(pilot, lambda: app.return_code is not None, "the dashboard to quit")
        assert transitions_from(service, "dashboard")[0].startswith("READY -> STOPPING on stop")
        assert not any("SWING_UP" in text for text in transitions_from(service, "dashboard"))


async def test_at_80_by_24_the_compact_layout_shows_state_values_interlocks_caution_and_keys(
    tmp_path,
):
    async with running_service(tmp_path, serve_api=True) as service:
        app = dashboard(service)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.state == "IDLE", "the dashboard to show IDLE")
            await pilot.pause()
            screen = screen_text(app)
            for shown in (
                "IDLE    rig linked, drive off",  # the state
                "next    h  home",  # and the next step
                "cart        +0.000 m",  # the live values
                "pendulum",
                "drive",
                "○ 6 off  none tripped",  # the interlock summary
                "A hardware e-stop that cuts motor power is mandatory",  # the caution
                "SPACE e-stop",  # the key bar, e-stop first
                "h  home",
                "q  quit",
            ):
                assert shown in screen, f"{shown!r} is not on the 80x24 screen:\n{screen}"
            assert "last 10 s" not in screen  # the plots give way
            await pilot.press("space")
            assert await reached(service, State.ESTOP) is State.ESTOP


async def test_below_the_minimum_size_the_dashboard_asks_for_a_larger_terminal_and_the_estop_works(
    tmp_path,
):
    async with running_service(tmp_path, serve_api=True) as service:
        await homed(service)
        app = dashboard(service)
        async with app.run_test(size=(60, 16)) as pilot:
            await until_arm_allowed(pilot, app)
            await pilot.pause()
            screen = screen_text(app)
            assert f"Enlarge the terminal to at least {MIN_COLUMNS}×{MIN_ROWS}" in screen
            assert "(it is 60×16)" in screen
            assert "SPACE" in screen and "e-stop works" in screen
            await pilot.press("a")  # a command that would ask first is not sent at this size
            assert not isinstance(app.screen, SafetyScreen | ConfirmScreen)
            await pilot.press("space")
            assert await reached(service, State.ESTOP) is State.ESTOP
            estop = "IDLE -> ESTOP on estop: operator estop"
            assert transitions_from(service, "dashboard") == [estop]
            await pilot.resize_terminal(*SIZE)
            await until(pilot, lambda: app.state == "ESTOP", "the dashboard to show ESTOP")
            await pilot.pause()
            assert "Enlarge the terminal" not in screen_text(app)
            assert "reset with c when safe" in notice(app)


def test_readme_lists_the_dashboards_keys_as_the_key_bar_names_them_and_its_layout_sizes():
    readme = (REPO / "README.md").read_text()
    assert key_table_markdown() in readme
    assert f"At {FULL_COLUMNS}×{FULL_ROWS} or more every panel is shown" in readme
    assert f"down to\n{MIN_COLUMNS}×{MIN_ROWS}" in readme
