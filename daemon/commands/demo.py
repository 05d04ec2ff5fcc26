"""`poise demo`: the simulated demo rig, its daemon and the dashboard together in one terminal.

The daemon runs as a child process (`poise run --sim`, real time, recording),
so the dashboard's drawing never delays the control cycle. It serves its
control API on a socket in the demo's own private folder, and the dashboard
connects to that one once it answers: a demo never attaches to another
daemon, and two users (or two demos) on one machine never meet. Quitting the dashboard (which stops
any motion first) shuts the daemon down with SIGTERM: a controlled stop, drive
off, the recording closed. The daemon's log goes to a file, not the terminal.

``--headless`` runs the scripted session of `poise session --sim` instead and
prints its summary, for machines without an interactive terminal.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import BinaryIO

from daemon.commands import add_config_argument, config_path

NAME = "demo"
HELP = "simulated demo rig + daemon + dashboard in one terminal (--headless: scripted session)"

# How long the daemon may take to serve its control socket after it is started.
START_TIMEOUT_S = 30.0
START_POLL_S = 0.1
# How long the daemon may take for its controlled stop and clean exit after SIGTERM.
SHUTDOWN_TIMEOUT_S = 20.0


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--headless",
        action="store_true",
        help="no dashboard: run the scripted session (as `poise session --sim`) and print its summary",
    )
    add_config_argument(parser)


def run(args: argparse.Namespace) -> int:
    if args.headless:
        return _headless(args.config)
    import asyncio
    import tempfile

    from daemon.config import load_config

    path = config_path(args)
    config = load_config(path)
    folder = Path(tempfile.mkdtemp(prefix="poise-demo-"))  # mode 0700: this user's alone
    log_path = folder / "daemon.log"
    print(
        f"poise demo: starting the simulated rig {config.rig.id} and its daemon (log: {log_path})"
    )
    with open(log_path, "wb") as log:
        return asyncio.run(_demo(config, path, log, log_path, folder / f"{config.rig.id}.sock"))


def _headless(config: str | None) -> int:
    """`poise session --sim` exactly, through its own argument parser and run()."""
    from daemon.commands import session

    parser = argparse.ArgumentParser(prog="poise demo --headless")
    session.add_arguments(parser)
    return session.run(parser.parse_args(["--sim", *(["--config", config] if config else [])]))


async def _demo(
    config, config_path: Path, log: BinaryIO, log_path: Path, socket_path: Path
) -> int:
    import asyncio
    import os
    import signal
    import subprocess
    import sys

    from daemon.commands.dash import drive_unit
    from daemon.ui.app import PoiseDash

    daemon = await asyncio.create_subprocess_exec(
        *(sys.executable, "-m", "daemon.cli", "run", "--sim", "--config", str(config_path),
          "--socket", str(socket_path)),
        stdin=subprocess.DEVNULL,
        stdout=log,
        stderr=subprocess.STDOUT,
        start_new_session=True,  # the terminal's signals go to the dashboard, not the daemon
    )
    app = PoiseDash(socket_path, drive_unit=drive_unit(config.drive.kind))
    loop = asyncio.get_running_loop()

    # The daemon is in its own session, so the terminal closing (SIGHUP) or a plain kill
    # (SIGTERM) of the demo does not reach it: pass it on at once (the daemon makes its own
    # controlled stop). After SIGTERM the dashboard ends as after `q`; after SIGHUP there is
    # no terminal left to restore, so the demo leaves once the daemon has finished.
    def terminated() -> None:
        if daemon.returncode is None:
            daemon.terminate()
        app.exit()

    async def hung_up() -> None:
        status = await _shut_down(daemon)
        os._exit(0 if status == 0 else 1)

    loop.add_signal_handler(signal.SIGTERM, terminated)
    loop.add_signal_handler(signal.SIGHUP, lambda: loop.create_task(hung_up()))
    try:
        await _wait_until_serving(daemon, socket_path, log_path)
        await app.run_async()
    finally:
        exit_status = await _shut_down(daemon)
    recording = app.status.get("recording") or {}
    if exit_status != 0:
        print(f"poise demo: the daemon exited with status {exit_status}; see {log_path}")
        return 1
    run_id = recording.get("run_id")
    where = f"run {run_id} in {recording.get('path')}" if run_id is not None else "no run"
    print(f"poise demo: daemon stopped, rig at rest; recorded {where} (see `poise runs`)")
    return 0


async def _wait_until_serving(daemon, socket_path: Path, log_path: Path) -> None:
    """Return once the daemon's control socket answers; OperatorError if it exits or takes too long."""
    import asyncio

    from daemon.api.client import ApiClient, ApiError
    from daemon.errors import OperatorError

    try:
        async with asyncio.timeout(START_TIMEOUT_S):
            while daemon.returncode is None:
                try:
                    client = await ApiClient.connect(socket_path, source="dashboard")
                except ApiError:
                    await asyncio.sleep(START_POLL_S)
                    continue
                await client.close()
                return
    except TimeoutError:
        raise OperatorError(
            f"the demo daemon did not serve {socket_path} within {START_TIMEOUT_S:g} s; "
            f"see {log_path}"
        ) from None
    raise OperatorError(
        f"the demo daemon exited with status {daemon.returncode} before serving: "
        f"{_last_line(log_path)} (log: {log_path})"
    )


async def _shut_down(daemon) -> int:
    """SIGTERM (controlled stop, recording closed), then wait; SIGKILL only if it hangs."""
    import asyncio

    if daemon.returncode is None:
        daemon.terminate()
        try:
            async with asyncio.timeout(SHUTDOWN_TIMEOUT_S):
                return await daemon.wait()
        except TimeoutError:
            daemon.kill()
    return await daemon.wait()


def _last_line(path: Path) -> str:
    lines = path.read_text(encoding="utf-8", errors="replace").strip().splitlines()
    return lines[-1] if lines else "(no output)"
