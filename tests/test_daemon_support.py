"""Helpers for the daemon tests: a rig config in a temporary folder, the service on the simulated rig.

The simulated rig runs in the test's event loop on a real pty; the daemon talks
to it through pyserial and the pty's file descriptor, exactly as to hardware.
What the device received is read back from its own frame decoder's ring of
raw frames (the last 100), so a test checks the bytes that reached the rig.
"""

from __future__ import annotations

import contextlib
import json
from collections import deque
from collections.abc import AsyncIterator
from pathlib import Path

from daemon.config import parse_config
from daemon.errors import CommandRefused
from daemon.recording.schema import SAMPLE_COLUMN_NAMES
from daemon.recording.store import get_run, open_for_reading, run_events, sample_chunks
from daemon.runtime.embedded_sim import RigLink, SimOptions
from daemon.runtime.service import PoiseService
from daemon.runtime.session import swing_up_when_still
from daemon.supervisor import Output, State
from protocol import Drive, FrameDecoder, Message, Stop
from sim_device.faults import FaultPlan

REPO = Path(__file__).resolve().parent.parent
KESTREL = REPO / "configs" / "kestrel-1.toml"
WREN = REPO / "configs" / "wren-2.toml"


def rig_config_text(
    tmp_path: Path, base: Path = KESTREL, extra: str = "", edits: dict[str, str] | None = None,
    api: str = "",
) -> str:
    """``base`` with its run store and control socket moved into ``tmp_path``, plus ``extra`` sections.

    ``edits`` maps a key to its new value text, for keys already in ``base`` (``"device_watchdog_ms"``);
    ``api`` is more lines for the ``[api]`` section.
    """
    lines = []
    for line in base.read_text().splitlines():
        key = line.split("=")[0].strip()
        if edits and key in edits:
            line = f"{key} = {edits[key]}"
        elif line.startswith("db_path"):
            line = f'db_path = "{tmp_path / "runs.db"}"'
        elif line == "[api]":
            line += f'\nsocket_path = "{tmp_path / "poise.sock"}"\n{api}'.rstrip()
        lines.append(line)
    return "\n".join(lines) + "\n" + extra


def write_rig_config(
    tmp_path: Path, base: Path = KESTREL, extra: str = "", edits: dict[str, str] | None = None
) -> Path:
    path = tmp_path / "rig.toml"
    path.write_text(rig_config_text(tmp_path, base, extra, edits))
    return path


@contextlib.asynccontextmanager
async def running_service(
    tmp_path: Path, *, base: Path = KESTREL, extra: str = "", faults: FaultPlan | None = None,
    serve_api: bool = False, lockstep: bool = True, edits: dict[str, str] | None = None,
    supply_v: float | None = None, encoder_noise_counts: float = 0.0, link: RigLink = "pty",
    api: str = "", power_up_reset: bool = True, uptime_us: int = 0,
) -> AsyncIterator[PoiseService]:
    """The daemon on the built-in simulated rig; ``supply_v`` fits the rig a supply measurement.

    A freshly powered-up rig holds F_RESET, so the daemon comes up in FAULT (``device.reset``);
    with ``power_up_reset`` the operator's reset that takes the rig into use is made here, as
    its own step, and the service is handed over IDLE.

    The rig's encoders have no noise beyond quantisation unless ``encoder_noise_counts`` is given,
    so a test's figures do not depend on a seed.
    """
    text = rig_config_text(tmp_path, base, extra, edits, api)
    options = SimOptions(
        lockstep=lockstep, faults=faults or FaultPlan(), supply_v=supply_v,
        encoder_noise_counts=encoder_noise_counts, link=link, uptime_us=uptime_us,
    )
    service = PoiseService(parse_config(text), text, sim=options, serve_api=serve_api)
    await service.start()
    try:
        if power_up_reset:
            assert latched(service) == ["device.reset"], service.supervisor.machine.faults
            await reset_to_idle(service)
        yield service
    finally:
        await service.close()


async def wait_for(service: PoiseService, *states: State) -> State:
    return await service.cycle.waiters.wait_for_state(set(states))


async def run_for(service: PoiseService, seconds: float) -> None:
    """Let ``seconds`` of rig time pass."""
    await service.cycle.waiters.wait_until(service.cycle.t_s + seconds)


async def homed_and_ready(service: PoiseService) -> None:
    """Home, arm, and hold the cart at the centre (state READY)."""
    service.execute("home", {}, "api")
    reached = await wait_for(service, State.IDLE, State.FAULT)
    assert reached is State.IDLE, f"homing ended in {reached.name}: {service.supervisor.machine.faults}"
    service.execute("arm", {}, "api")
    assert service.supervisor.machine.state is State.READY
    await run_for(service, 0.2)


async def execute_when_still(service: PoiseService, command: str, args: dict, within_s: float = 30.0) -> dict:
    """Send ``command`` once the pendulum hangs still enough for its pre-arm checks (rig time)."""
    deadline_s = service.cycle.t_s + within_s
    while True:
        try:
            return service.execute(command, args, "api")
        except CommandRefused as refused:
            if "pendulum.hanging_still" not in refused.reason or service.cycle.t_s > deadline_s:
                raise
        await run_for(service, 0.1)


async def balancing(service: PoiseService) -> None:
    """Home, arm, swing up, and balance for half a second of rig time."""
    await homed_and_ready(service)
    await swing_up_when_still(service)
    assert await wait_for(service, State.BALANCE, State.FAULT, State.IDLE) is State.BALANCE
    await run_for(service, 0.5)


def frames_from_last_stop(service: PoiseService) -> tuple[list, list]:
    """(frames before the last Stop the device received, frames from that Stop on)."""
    frames = device_received(service)
    at = max(i for i, m in enumerate(frames) if type(m) is Stop)
    return frames[:at], frames[at:]


def recorded_samples(service: PoiseService) -> list[dict]:
    """Every sample of the open run as stored in the run store, one dict per row."""
    service.recorder.flush()
    conn = open_for_reading(service.recorder.db_path)
    try:
        run = get_run(conn, service.run_id, service.recorder.db_path)
        rows = [row for chunk in sample_chunks(conn, run) for row in chunk]
    finally:
        conn.close()
    return [dict(zip(SAMPLE_COLUMN_NAMES, row, strict=True)) for row in rows]


def keep_every_device_frame(service: PoiseService) -> None:
    """From now on keep every frame the simulated device receives, not only the last 100:
    a lockstep rig answers hundreds of samples while a test awaits a client round trip."""
    service.rig.device.decoder.counters.rx_frames = deque()


def device_received(service: PoiseService) -> list[Message]:
    """The frames the simulated device received most recently (up to 100), decoded, oldest first."""
    decoder = FrameDecoder()
    chunks = service.rig.device.decoder.counters.rx_frames
    return [message for _, chunk, _ in chunks for message in decoder.feed(chunk + b"\x00")]


def latched(service) -> list[str]:
    """Names of the latched faults; a lost link adds its own ``link_down`` after the trip."""
    names = [fault["reason"].split(":")[0] for fault in service.supervisor.status()["faults"]]
    return [name for name in names if name != "link_down"]


def drives_after_trip(service, name: str) -> list[float]:
    """Drive values the device received answering the trip's sample and every later one."""
    trip_seq = next(seq for trip, _t, seq in service.trips if trip == name)
    return [m.drive for m in device_received(service) if type(m) is Drive and m.answers_seq >= trip_seq]


async def stored_trips(service) -> list[dict]:
    service.recorder.flush()
    conn = open_for_reading(service.recorder.db_path)
    try:
        events = run_events(conn, service.run_id)
    finally:
        conn.close()
    return [json.loads(data) for _t, kind, _s, data in events if kind == "interlock.trip"]


async def reset_to_idle(service) -> None:
    service.execute("reset", {}, "api")
    await run_for(service, 0.1)
    machine = service.supervisor.machine
    assert machine.state is State.IDLE
    assert machine.output is Output.OFF
    assert not service.cycle.device_armed
    assert service.rig.device.armed is False


async def check_drive_off_trip(service, name: str) -> None:
    await run_for(service, 0.05)
    assert latched(service) == [name]
    assert service.supervisor.machine.state is State.FAULT
    drives = drives_after_trip(service, name)
    assert drives and all(drive == 0.0 for drive in drives)
    assert any(type(m) is Stop for m in device_received(service))
    trips = await stored_trips(service)
    assert trips[0]["name"] == name  # a fault that persists may be recorded again, same name
    assert {trip["name"] for trip in trips} == {name}
    assert trips[0]["rx_frames"] and trips[0]["tx_frames"]
