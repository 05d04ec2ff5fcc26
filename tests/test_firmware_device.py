"""The C device core against the Python simulated device: the same scripted host traffic
gets the same replies, fault reports and telemetry state from both.

The reference is sim_device/device.py (the project's simulator) and, for each expected reply
code written out below, PROTOCOL.md sections 6 and 9. The C core runs behind a scripted port
(firmware/tests/device_driver.c) whose clock starts 7 s after power-up, so its t_us counts
from power-up as section 6 says, not from Configure.
"""

import asyncio
import json
from pathlib import Path

from daemon.config import load_config
from daemon.config.plant import rig_spec
from protocol import UNPROMPTED_HELLO_SEQ, FrameDecoder, encode
from protocol.messages import (
    F_ESTOP,
    F_RESET,
    F_WATCHDOG,
    ST_LOCKSTEP,
    Arm,
    ClearFaults,
    Configure,
    DeviceHello,
    Drive,
    FaultReport,
    Heartbeat,
    Identify,
    Reply,
    ReplyResult,
    Stop,
    Telemetry,
)
from sim_device.clocks import SampleClock
from sim_device.device import SimulatedDevice
from sim_device.faults import FaultSchedule
from sim_device.plant import Plant
from sim_device.rig import HANGING_AT_REST, NO_FAULTS
from sim_device.sensors import Sensors
from sim_device.transports import Transport
from tests.firmware_support import build, run

ROOT = Path(__file__).resolve().parent.parent
MALFORMED = {
    v["name"]: bytes.fromhex(v["stream_hex"])
    for v in json.loads((ROOT / "protocol" / "vectors.json").read_text())["malformed"]
}
POWERED_UP_BEFORE_US = 7_000_000

# (host bytes, or "sample", or ("estop", pressed)) and what the step is about
SCRIPT: list = [
    encode(Identify(0)),
    encode(Arm(1, 1)),  # NOT_NOW: not configured
    encode(Configure(1, 0, 50)),  # OUT_OF_RANGE: rate 0
    encode(Configure(2, 501, 50)),  # OUT_OF_RANGE: above the hello's 500 Hz
    encode(Configure(3, 500, 0)),  # OUT_OF_RANGE: watchdog 0
    encode(Configure(4, 500, 50)),  # ACCEPTED
    "sample", "sample",
    encode(Arm(2, 1)),  # FAULT_LATCHED: F_RESET since power-up
    encode(ClearFaults(1)),  # ACCEPTED
    encode(Arm(3, 2)),  # OUT_OF_RANGE
    encode(Arm(4, 1)),  # ACCEPTED
    encode(Drive(0, 1.5, 1)), "sample",  # applied from the next sample
    encode(Configure(5, 500, 50)),  # NOT_NOW: armed
    encode(Drive(1, -2.0, 1)), "sample",  # late: answers an older sample; still applied
    MALFORMED["unknown_type"],  # Reply UNKNOWN_TYPE, then a Heartbeat
    MALFORMED["payload_too_short"],  # Reply BAD_PAYLOAD
    encode(Telemetry(0, 0, 0, 0, 0, 0, 0, 0.0, 0.0, 0.0, 0)),  # a device type: UNKNOWN_TYPE
    encode(Heartbeat(1)), encode(Stop(1)), "sample",  # ACCEPTED, drive 0
    ("estop", True), "sample",  # FaultReport F_ESTOP
    encode(ClearFaults(2)),  # FAULT_LATCHED: the button is still down
    ("estop", False),
    encode(ClearFaults(3)),  # ACCEPTED
    encode(Configure(6, 500, 50)), "sample",  # a new stream: seq 0 again
    *(["sample"] * 30),  # no Drive or Heartbeat for 60 ms: F_WATCHDOG at 50 ms
    encode(Identify(1)),
]


def _summary(message: object) -> tuple:
    """What both devices must agree on (not t_us, counts or identity fields)."""
    if isinstance(message, Reply):
        return ("Reply", message.for_type, message.for_seq, ReplyResult(message.result).name)
    if isinstance(message, DeviceHello):
        return ("DeviceHello", message.seq)
    if isinstance(message, FaultReport):
        return ("FaultReport", message.seq, message.faults, message.code)
    assert isinstance(message, Telemetry)
    return (
        "Telemetry", message.seq, message.switches, message.faults,
        message.status & ~ST_LOCKSTEP, message.drive_applied, message.late_commands,
    )


def _decode_all(data: bytes) -> list[tuple]:
    return [_summary(m) for m in FrameDecoder().feed(data)]


def _c_core() -> tuple[list[list[tuple]], list[int]]:
    """Each script step's output from the C core, and the t_us of every Telemetry."""
    lines = []
    for step in SCRIPT:
        if step == "sample":
            lines.append("sample")
        elif isinstance(step, tuple):
            lines.append(f"estop {int(step[1])}")
        else:
            lines.append("rx " + step.hex())
    out = run(build("device_driver", device=True), "\n".join(lines) + "\n", args=(str(POWERED_UP_BEFORE_US),))
    blocks, current, t_us = [], [], []
    for line in out.splitlines():
        if line == "end":
            blocks.append(current)
            current = []
        else:
            data = bytes.fromhex(line.split()[1])
            current.extend(_decode_all(data))
            t_us += [m.t_us for m in FrameDecoder().feed(data) if isinstance(m, Telemetry)]
    return blocks, t_us


class _Capture(Transport):
    """Collects what the simulated device writes."""

    def __init__(self) -> None:
        self.sent = b""

    @property
    def where(self) -> str:
        return "capture"

    def open(self, loop: asyncio.AbstractEventLoop, on_bytes: object) -> None:
        pass

    def write(self, data: bytes) -> None:
        self.sent += data

    def close(self) -> None:
        pass


class _ScriptedClock(SampleClock):
    """Samples only when the script says so."""

    lockstep = False

    def start(self, loop: asyncio.AbstractEventLoop, take_sample: object, period_s: float) -> None:
        pass

    def command_received(self) -> None:
        pass

    def stop(self) -> None:
        pass


def _python_sim() -> list[list[tuple]]:
    spec = rig_spec(load_config(ROOT / "configs" / "kestrel-1.toml"))
    transport = _Capture()
    device = SimulatedDevice(
        spec.identity, Plant(spec.plant, HANGING_AT_REST), Sensors(spec.sensors, 0), transport,
        _ScriptedClock(), FaultSchedule(NO_FAULTS), max_step_us=1000,
    )
    loop = asyncio.new_event_loop()
    try:
        device.start(loop)
        blocks = []
        for step in SCRIPT:
            transport.sent = b""
            if step == "sample":
                device.take_sample()
            elif isinstance(step, tuple):
                device.press_estop() if step[1] else device.release_estop()
            else:
                device.on_bytes(step)
            blocks.append(_decode_all(transport.sent))
    finally:
        loop.close()
    return blocks


def test_c_core_answers_the_script_as_the_simulator_does() -> None:
    c_blocks, _t_us = _c_core()
    py_blocks = _python_sim()
    assert len(c_blocks) == len(SCRIPT) + 1  # the power-up hello, then one block per step
    assert c_blocks[0] == [("DeviceHello", UNPROMPTED_HELLO_SEQ)]
    for index, (step, c_out, py_out) in enumerate(zip(SCRIPT, c_blocks[1:], py_blocks)):
        assert c_out == py_out, f"step {index} ({step!r:.60}): C {c_out} != Python {py_out}"


def test_replies_are_the_codes_the_spec_gives() -> None:
    """Independent of the simulator: PROTOCOL.md sections 6 and 9 name each of these."""
    c_blocks, _t_us = _c_core()
    replies = [m[1:] for block in c_blocks for m in block if m[0] == "Reply"]
    assert replies[:10] == [
        (0x11, 1, "NOT_NOW"), (0x10, 1, "OUT_OF_RANGE"), (0x10, 2, "OUT_OF_RANGE"),
        (0x10, 3, "OUT_OF_RANGE"), (0x10, 4, "ACCEPTED"), (0x11, 2, "FAULT_LATCHED"),
        (0x15, 1, "ACCEPTED"), (0x11, 3, "OUT_OF_RANGE"), (0x11, 4, "ACCEPTED"),
        (0x10, 5, "NOT_NOW"),
    ]
    assert (0x7F, 9, "UNKNOWN_TYPE") in replies
    assert (0x12, 10, "BAD_PAYLOAD") in replies
    assert (0x02, 0, "UNKNOWN_TYPE") in replies
    reports = [m for block in c_blocks for m in block if m[0] == "FaultReport"]
    assert [m[3] for m in reports] == [F_ESTOP, F_WATCHDOG]
    telemetry = [m for block in c_blocks for m in block if m[0] == "Telemetry"]
    assert telemetry[0][3] == F_RESET
    assert telemetry[-1][3] & F_WATCHDOG and telemetry[-1][5] == 0.0


def test_t_us_counts_from_power_up() -> None:
    """PROTOCOL.md section 6: t_us is microseconds since power-up, spaced by the period."""
    _blocks, t_us = _c_core()
    assert t_us[0] == POWERED_UP_BEFORE_US
    assert t_us[1] - t_us[0] == 2000  # 500 Hz
