"""The handshake refuses a rig speaking another protocol version or message set, motor never powered."""

from __future__ import annotations

import asyncio
import os
import tty

import pytest
from test_daemon_support import reset_to_idle, rig_config_text

from daemon.config import parse_config
from daemon.errors import OperatorError
from daemon.runtime.service import PoiseService
from protocol import (
    PROTOCOL_VERSION,
    SCHEMA_FINGERPRINT,
    DeviceHello,
    FrameDecoder,
    Identify,
    encode,
)


class ForeignFirmware:
    """A device on a pty that answers Identify with a hello of another protocol or message set."""

    def __init__(self, protocol_version: int, fingerprint: int):
        self.master, slave = os.openpty()
        tty.setraw(slave)
        os.set_blocking(self.master, False)
        self.path = os.ttyname(slave)
        self._slave = slave
        self.decoder = FrameDecoder()
        self.received: list = []
        self.hello = DeviceHello(0, protocol_version, fingerprint, "old-rig", 0, 9, 1, 500,
                                 173852.0, 4096, 0.9, 12.0, 0, 13)
        asyncio.get_running_loop().add_reader(self.master, self._readable)

    def _readable(self) -> None:
        for message in self.decoder.feed(os.read(self.master, 4096)):
            self.received.append(message)
            if type(message) is Identify:
                os.write(self.master, encode(self.hello))

    def close(self) -> None:
        asyncio.get_running_loop().remove_reader(self.master)
        os.close(self.master)
        os.close(self._slave)


@pytest.mark.parametrize(
    "version, fingerprint",
    [(PROTOCOL_VERSION, SCHEMA_FINGERPRINT ^ 0x5A5A), (PROTOCOL_VERSION + 1, SCHEMA_FINGERPRINT)],
)
async def test_mismatched_rig_is_refused_in_one_line_naming_both_fingerprints(
    tmp_path, version, fingerprint
):
    device = ForeignFirmware(version, fingerprint)
    text = rig_config_text(tmp_path)
    service = PoiseService(parse_config(text), text, port_url=device.path, serve_api=False)
    try:
        with pytest.raises(OperatorError) as refused:
            await service.start()
    finally:
        device.close()
    message = str(refused.value)
    assert "\n" not in message
    assert f"0x{fingerprint:08X}" in message and f"0x{SCHEMA_FINGERPRINT:08X}" in message
    assert f"protocol version {version}" in message
    # The motor was never armed nor driven: the rig heard nothing but Identify.
    assert device.received and {type(m) for m in device.received} == {Identify}


async def test_a_port_that_cannot_be_opened_is_one_line_naming_it(tmp_path):
    text = rig_config_text(tmp_path)
    service = PoiseService(parse_config(text), text, port_url=str(tmp_path / "no-such-tty"),
                           serve_api=False)
    with pytest.raises(OperatorError, match="cannot open rig port .*no-such-tty"):
        await service.start()



# The wall-clock case keeps the default 30 ms link timeout, so it runs in the realtime phase,
# alone, as the other real-time tests do (under -n 2 beside the suite a stall tripped it).
@pytest.mark.parametrize("lockstep", [True, pytest.param(False, marks=pytest.mark.realtime)])
async def test_a_rig_powered_up_minutes_before_configure_is_accepted_and_homes(tmp_path, lockstep):
    """PROTOCOL.md section 6: Telemetry.t_us counts from the device's power-up, not from
    Configure. The host measures the telemetry rate from the stream itself (t_us deltas once
    telemetry flows), so a rig that has been on for minutes passes the link.rate pre-check from
    the first rate it reports (the one the service waits for before it takes commands).
    Source: the protocol's own definition of t_us; an uptime clock is common practice."""
    from test_daemon_support import homed_and_ready, running_service

    five_minutes_us = 5 * 60 * 1_000_000
    async with running_service(
        tmp_path, uptime_us=five_minutes_us, lockstep=lockstep, power_up_reset=False
    ) as service:
        configured_hz = service.config.sampling.rate_hz
        first_hz = service.supervisor.link_rate_hz
        assert abs(first_hz - configured_hz) < 0.05 * configured_hz, (first_hz, configured_hz)
        assert service.cycle.last_telemetry.t_us > five_minutes_us
        await reset_to_idle(service)
        await homed_and_ready(service)
