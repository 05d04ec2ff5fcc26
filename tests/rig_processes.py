"""A rig in a process of its own on a pty: the built-in simulator (`poise sim --pty`) or the
reference firmware's host port (firmware/host), each printing "... connect to <pty path>".

Both serve the same protocol on the real serial path; a test drives either with the daemon in
another process and awaits the rig's stderr lines (the faults it latches).
"""

from __future__ import annotations

import asyncio
import contextlib
import sys
from collections.abc import AsyncIterator
from pathlib import Path

from firmware_host_args import host_args
from firmware_support import build_host_port

from daemon.config import load_config

POISE = [sys.executable, "-m", "daemon.cli"]
START_LIMIT_S = 60.0


def simulator_command(config: Path, *options: str) -> list[str]:
    """`poise sim --pty` for ``config``'s rig (``--lockstep`` among the options for lockstep)."""
    return [*POISE, "sim", "--pty", "--config", str(config), *options]


def firmware_command(config: Path, lockstep: bool) -> list[str]:
    """The reference firmware's host port, built with gcc, for ``config``'s rig."""
    args = host_args(load_config(config))
    return [str(build_host_port()), *args, f"lockstep={int(lockstep)}"]


class RigProcess:
    """A rig process; its stderr lines to await."""

    def __init__(self, process: asyncio.subprocess.Process, pty_path: str):
        self.process = process
        self.pty_path = pty_path
        self.lines: asyncio.Queue[str] = asyncio.Queue()
        self._reader = asyncio.create_task(self._read_stderr())

    @classmethod
    async def start(cls, command: list[str]) -> RigProcess:
        process = await asyncio.create_subprocess_exec(
            *command, stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE
        )
        async with asyncio.timeout(START_LIMIT_S):
            ready = (await process.stdout.readline()).decode()
        if "connect to " not in ready:
            process.kill()
            _out, err = await process.communicate()
            raise RuntimeError(f"{command[0]} did not start: {ready!r} {err.decode()[-2000:]}")
        return cls(process, ready.rsplit("connect to ", 1)[1].strip())

    async def _read_stderr(self) -> None:
        while line := await self.process.stderr.readline():
            await self.lines.put(line.decode())

    async def said(self, text: str) -> str:
        """The next stderr line containing ``text``."""
        async with asyncio.timeout(START_LIMIT_S):
            while text not in (line := await self.lines.get()):
                pass
        return line

    async def stop(self, final_words: str) -> str:
        """SIGTERM; returns its last words, the stderr line containing ``final_words``."""
        if self.process.returncode is None:
            self.process.terminate()
        line = await self.said(final_words)
        await self.process.wait()
        return line


@contextlib.asynccontextmanager
async def rig_process(command: list[str]) -> AsyncIterator[RigProcess]:
    """The rig running for the block, killed after it."""
    rig = await RigProcess.start(command)
    try:
        yield rig
    finally:
        if rig.process.returncode is None:
            rig.process.kill()
        await rig.process.wait()
        await rig._reader
