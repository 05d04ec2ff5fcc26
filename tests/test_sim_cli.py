"""`poise sim`: serves a simulated rig until stopped, says where to connect, refuses bad options."""

from __future__ import annotations

import re
import signal
import subprocess
import sys

import pytest
import serial

import protocol as p

READ_TIMEOUT_S = 10.0  # a guard against a hung test, not a timing requirement


def start_sim(*options: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "daemon.cli", "sim", *options],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )


def read_until_hello(port: serial.SerialBase) -> p.DeviceHello:
    decoder = p.FrameDecoder()
    while True:
        chunk = port.read_until(b"\x00")
        assert chunk, "no DeviceHello from the simulated rig"
        for message in decoder.feed(chunk):
            if type(message) is p.DeviceHello:
                return message


@pytest.mark.parametrize("where", [["--pty"], ["--tcp", "0"]], ids=["pty", "tcp"])
def test_sim_prints_where_to_connect_and_answers_identify(where):
    sim = start_sim(*where, "--lockstep", "--seed", "3", "--impulse", "1.5:0.02")
    try:
        line = sim.stdout.readline()
        found = re.search(r"connect to (\S+)$", line.strip())
        assert found, line
        address = found.group(1)
        if where[0] == "--pty":
            assert address.startswith("/dev/pts/")
            port = serial.Serial(address, timeout=READ_TIMEOUT_S)
        else:
            assert re.fullmatch(r"socket://127\.0\.0\.1:\d+", address)
            port = serial.serial_for_url(address, timeout=READ_TIMEOUT_S)
        with port:
            port.write(b"\x00" + p.encode(p.Identify(0)))
            hello = read_until_hello(port)
    finally:
        sim.send_signal(signal.SIGINT)
        _out, err = sim.communicate(timeout=READ_TIMEOUT_S)
    assert hello.device_id == "kestrel-1" and hello.capabilities & p.CAP_SIMULATED
    assert "kestrel-1" in line and "lockstep" in line
    assert sim.returncode == 0, err


@pytest.mark.parametrize(
    ("option", "message"),
    [
        (["--stall", "1.0"], "poise: --stall: expected AT_S:DURATION_MS, got '1.0'"),
        (["--stall", "1.0:x"], "poise: --stall: 'x' is not a number"),
        (["--drop-rate", "1.5"], "poise: --drop-rate: '1.5' must be between 0 and 1"),
        (["--glitch", "2:12:wheel"], "poise: --glitch: expected AT_S:COUNTS[:cart|pendulum], got '2:12:wheel'"),
        (["--glitch", "2:1.5"], "poise: --glitch: '1.5' is not a whole number of counts"),
        (["--impulse=-1:0.1"], "poise: --impulse: '-1' must be >= 0"),
        (["--impulse", "1:inf"], "poise: --impulse: 'inf' is not a finite number"),
        (["--noisy-switch", "up:0.1"], "poise: --noisy-switch: expected neg|pos:P, got 'up:0.1'"),
        (["--initial-angle-deg", "4000"], "poise: --initial-angle-deg: '4000' must be between -3600 and 3600"),
    ],
)
def test_malformed_fault_options_get_one_line_naming_the_option(option, message):
    result = subprocess.run(
        [sys.executable, "-m", "daemon.cli", "sim", "--pty", *option],
        capture_output=True,
        text=True,
        timeout=READ_TIMEOUT_S,
        check=False,
    )
    assert result.returncode == 2
    assert result.stderr.strip() == message
    assert result.stdout == ""
