"""`poise <verb>` run as a real process against the real daemon (lockstep rig) in the test's loop."""

from __future__ import annotations

import asyncio
import json
import socket

import pytest
from test_api_support import poise
from test_daemon_support import execute_when_still, homed_and_ready, running_service

from daemon.commands.ctl import VERBS
from daemon.config import demo_config_path
from daemon.operator_commands import COMMANDS, SERVER_COMMANDS
from daemon.recording.store import get_run, open_for_reading


@pytest.fixture
def socket_path(tmp_path):
    return tmp_path / "poise.sock"


@pytest.fixture
async def daemon(tmp_path):
    """The real daemon on the built-in lockstep rig, its control API on the config's socket."""
    async with running_service(tmp_path, serve_api=True) as service:
        yield service


def test_every_api_command_has_a_cli_verb():
    sent = {verb.command for verb in VERBS}
    assert sent == set(COMMANDS) - (SERVER_COMMANDS - {"status"})


def cli_events(service) -> list[str]:
    """What the supervisor logged from CLI requests (transitions and refusals), without causes."""
    return [
        entry.text.split(":")[0] for entry in service.supervisor.machine.events if entry.source == "cli"
    ]


async def still_hanging(service) -> None:
    """Let the pendulum settle after homing, so the swing-up's pre-arm checks pass (rig time)."""
    await execute_when_still(service, "disarm", {})
    service.execute("arm", {}, "api")


async def prepare(service, before: str) -> None:
    if before in ("homed", "ready", "ready and still"):
        await homed_and_ready(service)
        if before == "homed":
            service.execute("disarm", {}, "api")
        if before == "ready and still":
            await still_hanging(service)
    elif before == "estop":
        service.execute("estop", {}, "api")


@pytest.mark.parametrize(
    ("verb", "before", "transition"),
    [
        ("home", "idle", "IDLE -> HOMING on home"),
        ("arm", "homed", "IDLE -> READY on arm"),
        ("disarm", "ready", "READY -> IDLE on disarm"),
        ("swing-up", "ready and still", "READY -> SWING_UP on swing_up"),
        ("stop", "ready", "READY -> STOPPING on stop"),
        ("estop", "idle", "IDLE -> ESTOP on estop"),
        ("reset", "estop", "ESTOP -> IDLE on reset"),
    ],
)
async def test_verb_sends_its_command_and_the_supervisor_carries_it_out(
    daemon, verb, before, transition
):
    await prepare(daemon, before)
    previous, state = transition.split(" on ")[0].split(" -> ")
    code, out, err = await poise(verb, "--socket", str(daemon.socket_path))
    assert (code, out, err) == (0, f"{verb}: ok state={state} previous={previous}\n", "")
    assert cli_events(daemon) == [transition]


async def test_setpoint_reaches_the_supervisor_in_metres(daemon):
    await homed_and_ready(daemon)
    for text, x_m in (("0.15", 0.15), ("-0.2", -0.2)):
        code, _, err = await poise("setpoint", text, "--socket", str(daemon.socket_path))
        assert (code, err) == (0, "")
        assert daemon.supervisor.machine.setpoint_m == x_m


@pytest.mark.parametrize(
    ("argv", "amplitude"),
    [
        (["--kind", "chirp", "--amplitude", "0.3", "--duration", "10"], 0.3),
        (["--kind", "prbs", "--duration", "5"], None),  # no --amplitude: sized by the daemon
    ],
)
async def test_excite_arguments_reach_the_supervisor(daemon, argv, amplitude):
    await homed_and_ready(daemon)
    await still_hanging(daemon)
    code, _, err = await poise("excite", *argv, "--socket", str(daemon.socket_path))
    assert (code, err) == (0, "")
    args = daemon.supervisor.machine.excite_args
    assert (args["kind"], args["duration_s"]) == (argv[1], float(argv[-1]))
    if amplitude is None:
        assert 0.0 < args["amplitude"] < daemon.config.drive.limit
    else:
        assert args["amplitude"] == amplitude


async def test_record_on_with_a_note_and_off_start_and_end_a_stored_run(daemon):
    code, out, err = await poise(
        "record", "on", "--note", "first try", "--socket", str(daemon.socket_path)
    )
    assert (code, err) == (0, "")
    run_id = daemon.run_id
    assert out == f"record: ok run_id={run_id}\n"
    code, out, _ = await poise("record", "off", "--socket", str(daemon.socket_path))
    assert (code, out) == (0, "record: ok run_id=None\n")
    conn = open_for_reading(daemon.recorder.db_path)
    try:
        run = get_run(conn, run_id, daemon.recorder.db_path)
    finally:
        conn.close()
    assert run.operator_notes == "first try"


async def test_refused_command_prints_the_supervisors_reason_in_one_line_and_exits_2(daemon):
    code, out, err = await poise("swing-up", "--socket", str(daemon.socket_path))
    assert (code, out) == (2, "")
    assert (
        err
        == "poise: swing-up refused: swing_up: not allowed in IDLE: rig is disarmed (arm first)\n"
    )
    assert daemon.supervisor.machine.state.name == "IDLE"


async def test_bad_argument_is_reported_by_the_daemon_and_changes_nothing(daemon):
    socket_path = daemon.socket_path
    code, _, err = await poise("setpoint", "nan", "--socket", str(socket_path))
    assert (code, err) == (2, "poise: setpoint: argument 'x_m' must be a finite number (got nan)\n")
    code, _, err = await poise(
        "excite",
        "--kind",
        "prbs",
        "--amplitude",
        "-1",
        "--duration",
        "5",
        "--socket",
        str(socket_path),
    )
    assert code == 2
    assert (
        err
        == "poise: excite: argument 'amplitude' must be a finite number greater than 0 (got -1.0)\n"
    )
    assert cli_events(daemon) == []


async def test_no_daemon_running_prints_one_line_and_exits_2(socket_path):
    code, out, err = await poise("arm", "--socket", str(socket_path))
    assert (code, out) == (2, "")
    assert err == f"poise: no Poise daemon is running on {socket_path} (no socket file there)\n"


async def test_stale_socket_file_means_no_daemon_running(socket_path):
    leftover = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    leftover.bind(str(socket_path))
    leftover.close()
    code, _, err = await poise("status", "--socket", str(socket_path))
    assert (code, err) == (
        2,
        f"poise: no Poise daemon is running on {socket_path} (stale socket file)\n",
    )


async def test_a_daemon_that_never_answers_is_reported_after_the_timeout(socket_path):
    async def accept_and_ignore(reader, writer):
        await reader.read()  # until the CLI gives up and closes

    async with await asyncio.start_unix_server(accept_and_ignore, path=str(socket_path)):
        code, _, err = await poise("stop", "--socket", str(socket_path), "--timeout", "0.5")
    assert (code, err) == (
        2,
        f"poise: stop: no answer from the daemon on {socket_path} within 0.5 s\n",
    )


async def test_status_prints_a_table_of_the_status_keys(daemon):
    code, out, err = await poise("status", "--socket", str(daemon.socket_path))
    assert (code, err) == (0, "")
    for expected in (
        "Poise status",
        "state",
        "IDLE",
        "allowed",
        "arm, home",
        "link.rate_hz",
        "500",
    ):
        assert expected in out
    # each interlock is a row of a table of its own
    assert "interlocks" in out and "track.soft" in out and "inactive" in out  # disarmed: not checked


async def test_status_json_prints_the_daemons_snapshot(daemon):
    code, out, err = await poise("status", "--json", "--socket", str(daemon.socket_path))
    assert (code, err) == (0, "")
    status = json.loads(out)
    assert status["state"] == "IDLE" and status["rig"]["id"] == daemon.config.rig.id
    assert set(status) == set(daemon.status())


async def test_command_json_prints_the_result(daemon):
    code, out, _ = await poise("home", "--json", "--socket", str(daemon.socket_path))
    assert (code, json.loads(out)) == (0, {"state": "HOMING", "previous": "IDLE"})


async def test_socket_path_comes_from_the_config(tmp_path, daemon):
    config = tmp_path / "cli.toml"
    text = demo_config_path().read_text()
    config.write_text(text.replace("\n[api]\n", f'\n[api]\nsocket_path = "{daemon.socket_path}"\n'))
    code, out, err = await poise("estop", "--config", str(config))
    assert (code, out, err) == (0, "estop: ok state=ESTOP previous=IDLE\n", "")


async def test_a_bad_config_is_reported_with_its_field_path(tmp_path):
    config = tmp_path / "rig.toml"
    long_path = "/tmp/" + "x" * 120 + ".sock"
    config.write_text(
        demo_config_path()
        .read_text()
        .replace("\n[api]\n", f'\n[api]\nsocket_path = "{long_path}"\n')
    )
    code, _, err = await poise("status", "--config", str(config))
    assert code == 2
    assert err.startswith(
        f"poise: {config}: api.socket_path: a Unix socket path may be at most 107"
    )
    assert err.count("\n") == 1


def test_status_values_too_small_to_be_physical_print_as_zero():
    from daemon.commands.ctl import _show

    assert _show(5e-324) == "0"  # the smallest subnormal double (IEEE 754-2008)
    assert _show(-2.5e-13) == "0"
    assert _show(0.000123) == "0.000123"
    assert _show(12.0) == "12"
