"""`poise session --port` against the reference firmware: home, swing up, balance 20 s, stop.

The rig is the firmware's portable core, unchanged, in its Linux host port (firmware/host:
the core on a pty with a C model of the cart and pendulum behind port.h), in lockstep
(PROTOCOL.md section 8.4) so the run keeps time on the rig's clock and a loaded machine
cannot trip it. The session is `poise session` in its own process on the real serial path,
held to what every session against the Python simulator must show
(:func:`session_checks.assert_balanced_with_every_sample_recorded`).
"""

from __future__ import annotations

import asyncio
import json
import subprocess

import pytest
from firmware_support import build_host_port
from rig_processes import POISE, firmware_command, rig_process
from session_checks import assert_balanced_with_every_sample_recorded
from test_daemon_support import KESTREL, WREN, write_rig_config

BALANCE_S = 20.0
HANG_GUARD_S = 300.0  # the session takes about 10 s of wall time in lockstep


@pytest.mark.parametrize("base", [KESTREL, WREN], ids=["kestrel-1", "wren-2"])
async def test_a_session_against_the_reference_firmware_balances_with_every_sample_recorded(tmp_path, base):
    config = write_rig_config(tmp_path, base)
    async with rig_process(firmware_command(config, lockstep=True)) as rig:
        session = await asyncio.create_subprocess_exec(
            *POISE, "session", "--port", rig.pty_path, "--config", str(config),
            "--duration", str(BALANCE_S), "--json",
            stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE,
        )
        async with asyncio.timeout(HANG_GUARD_S):
            out, err = await session.communicate()
    assert session.returncode == 0, err.decode()[-2000:]
    summary = json.loads(out)
    assert_balanced_with_every_sample_recorded(summary, BALANCE_S)
    assert summary["samples_unanswered"] == 0  # lockstep: the rig waits for every answer
    assert 0.0 < summary["swing_up_s"] < 60.0


@pytest.mark.parametrize(
    ("bad", "says"),
    [
        ("lockstep=2", "argument 1: bad or unknown lockstep=2"),
        ("cart_mass_kg=heavy", "argument 1: bad or unknown cart_mass_kg=heavy"),
        ("colour=red", "argument 1: bad or unknown colour=red"),
        ("sample_rate_hz", "argument 1 'sample_rate_hz' is not name=value"),
    ],
)
def test_a_bad_host_port_argument_is_one_line_naming_it_and_exit_2(bad, says):
    result = subprocess.run(
        [str(build_host_port()), bad], capture_output=True, text=True, timeout=30, check=False
    )
    assert result.returncode == 2 and result.stdout == ""  # no pty offered
    assert result.stderr == f"poise-fw-host: {says}\n"
