"""Helpers for the daemon tests: a rig config in a temporary folder, the service on the simulated rig.

The simulated rig runs in the test's event loop on a real pty; the daemon talks
to it through pyserial and the pty's file descriptor, exactly as to hardware.
What the device received is read back from its own frame decoder's ring of
raw frames (the last 100), so a test checks the bytes that reached the rig.
"""

from __future__ import annotations

import contextlib
from collections.abc import AsyncIterator
from pathlib import Path

from daemon.config import parse_config
from daemon.runtime.embedded_sim import SimOptions
from daemon.runtime.service import PoiseService
from daemon.supervisor import State
from protocol import FrameDecoder, Message
from sim_device.faults import FaultPlan

REPO = Path(__file__).resolve().parent.parent
KESTREL = REPO / "configs" / "kestrel-1.toml"
WREN = REPO / "configs" / "wren-2.toml"


def rig_config_text(
    tmp_path: Path, base: Path = KESTREL, extra: str = "", edits: dict[str, str] | None = None
) -> str:
    """``base`` with its run store and control socket moved into ``tmp_path``, plus ``extra`` sections.

    ``edits`` maps a key to its new value text, for keys already in ``base`` (``"device_watchdog_ms"``).
    """
    lines = []
    for line in base.read_text().splitlines():
        key = line.split("=")[0].strip()
        if edits and key in edits:
            line = f"{key} = {edits[key]}"
        elif line.startswith("db_path"):
            line = f'db_path = "{tmp_path / "runs.db"}"'
        elif line.startswith("socket_path"):
            line = f'socket_path = "{tmp_path / "poise.sock"}"'
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
) -> AsyncIterator[PoiseService]:
    text = rig_config_text(tmp_path, base, extra, edits)
    service = PoiseService(
        parse_config(text), text,
        sim=SimOptions(lockstep=lockstep, faults=faults or FaultPlan()), serve_api=serve_api,
    )
    await service.start()
    try:
        yield service
    finally:
        await service.close()


async def wait_for(service: PoiseService, *states: State) -> State:
    return await service.cycle.wait_for_state(set(states))


async def run_for(service: PoiseService, seconds: float) -> None:
    """Let ``seconds`` of rig time pass."""
    await service.cycle.wait_until(service.cycle.t_s + seconds)


async def homed_and_ready(service: PoiseService) -> None:
    """Home, arm, and hold the cart at the centre (state READY)."""
    service.execute("home", {}, "api")
    assert await wait_for(service, State.IDLE, State.FAULT) is State.IDLE
    service.execute("arm", {}, "api")
    assert service.supervisor.machine.state is State.READY
    await run_for(service, 0.2)


def device_received(service: PoiseService) -> list[Message]:
    """The frames the simulated device received most recently (up to 100), decoded, oldest first."""
    decoder = FrameDecoder()
    chunks = service.rig.device.decoder.counters.rx_frames
    return [message for _, chunk, _ in chunks for message in decoder.feed(chunk + b"\x00")]
