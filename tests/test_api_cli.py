"""`poise <verb>` run as a real process against a real control API server in the test's loop."""

from __future__ import annotations

import asyncio
import json
import socket
import sys
from pathlib import Path

import pytest
from test_api_support import HANG_GUARD_S, RigDouble

from daemon.operator_commands import COMMANDS, SERVER_COMMANDS
from daemon.api.server import ApiServer
from daemon.commands.ctl import VERBS
from daemon.config import demo_config_path
from daemon.config.service import ApiSettings

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture
def socket_path(tmp_path):
    return tmp_path / "poise.sock"


@pytest.fixture
async def rig(socket_path):
    rig = RigDouble()
    async with ApiServer(rig, ApiSettings(socket_path=str(socket_path))):
        yield rig


async def poise(*argv: str) -> tuple[int, str, str]:
    process = await asyncio.create_subprocess_exec(
        sys.executable,
        "-m",
        "daemon.cli",
        *argv,
        cwd=REPO,
        stdout=asyncio.subprocess.PIPE,
        stderr=asyncio.subprocess.PIPE,
    )
    async with asyncio.timeout(HANG_GUARD_S):
        out, err = await process.communicate()
    return process.returncode, out.decode(), err.decode()


def test_every_api_command_has_a_cli_verb():
    sent = {verb.command for verb in VERBS}
    assert sent == set(COMMANDS) - (SERVER_COMMANDS - {"status"})


@pytest.mark.parametrize(
    ("verb", "command"),
    [
        ("arm", "arm"),
        ("disarm", "disarm"),
        ("home", "home"),
        ("swing-up", "swing_up"),
        ("balance", "balance"),
        ("stop", "stop"),
        ("estop", "estop"),
        ("reset", "reset"),
    ],
)
async def test_verb_sends_its_command_from_the_cli(socket_path, rig, verb, command):
    code, out, err = await poise(verb, "--socket", str(socket_path))
    assert (code, out, err) == (0, f"{verb}: ok accepted={command}\n", "")
    assert rig.executed == [(command, {}, "cli")]


@pytest.mark.parametrize(
    ("argv", "command", "args"),
    [
        (["setpoint", "0.15"], "setpoint", {"x_m": 0.15}),
        (["setpoint", "-0.2"], "setpoint", {"x_m": -0.2}),
        (
            ["excite", "--kind", "chirp", "--amplitude", "2", "--duration", "10"],
            "excite",
            {"kind": "chirp", "amplitude": 2.0, "duration_s": 10.0},
        ),
        # no --amplitude: the daemon sizes it for the rig, so none is sent
        (["excite", "--kind", "prbs", "--duration", "5"], "excite", {"kind": "prbs", "duration_s": 5.0}),
        (["record", "on", "--note", "first try"], "record", {"on": True, "note": "first try"}),
        (["record", "off"], "record", {"on": False}),
    ],
)
async def test_verb_arguments_reach_the_target(socket_path, rig, argv, command, args):
    code, _, err = await poise(*argv, "--socket", str(socket_path))
    assert (code, err) == (0, "")
    assert rig.executed == [(command, args, "cli")]


async def test_refused_command_prints_one_line_and_exits_2(socket_path, rig):
    rig.refusals["swing_up"] = "cart not homed"
    code, out, err = await poise("swing-up", "--socket", str(socket_path))
    assert (code, out, err) == (2, "", "poise: swing-up refused: cart not homed\n")
    assert rig.executed == []


async def test_bad_argument_is_reported_by_the_daemon_and_changes_nothing(socket_path, rig):
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
    assert rig.executed == []


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


async def test_status_prints_a_table_of_the_status_keys(socket_path, rig):
    code, out, err = await poise("status", "--socket", str(socket_path))
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
    assert "interlocks" in out and "track" in out and "armed" in out  # a table of its own


async def test_status_json_prints_the_snapshot(socket_path, rig):
    code, out, err = await poise("status", "--json", "--socket", str(socket_path))
    assert (code, err) == (0, "")
    status = json.loads(out)
    assert status["state"] == "IDLE" and status["status_calls"] == rig.status_calls == 1


async def test_command_json_prints_the_result(socket_path, rig):
    code, out, _ = await poise("home", "--json", "--socket", str(socket_path))
    assert (code, json.loads(out)) == (0, {"accepted": "home"})


async def test_socket_path_comes_from_the_config(tmp_path, socket_path, rig):
    config = tmp_path / "rig.toml"
    text = demo_config_path().read_text()
    config.write_text(text.replace("\n[api]\n", f'\n[api]\nsocket_path = "{socket_path}"\n'))
    code, out, err = await poise("stop", "--config", str(config))
    assert (code, out, err) == (0, "stop: ok accepted=stop\n", "")


async def test_a_bad_config_is_reported_with_its_field_path(tmp_path):
    config = tmp_path / "rig.toml"
    long_path = "/tmp/" + "x" * 120 + ".sock"
    config.write_text(
        demo_config_path().read_text().replace("\n[api]\n", f'\n[api]\nsocket_path = "{long_path}"\n')
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
