"""`poise demo` in a real terminal (a detached tmux session): it starts, draws, answers keys, quits cleanly.

The demo runs exactly as an operator would start it: the daemon as a child
process in real time with the simulated rig, the dashboard on the terminal. The
screen is read back with ``tmux capture-pane``; reading it is polled (a terminal
offers nothing to await), each wait bounded so a broken build fails, not hangs.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
from test_daemon_support import REPO, write_rig_config

from daemon.recording.store import get_run, open_for_reading

TMUX = shutil.which("tmux")
pytestmark = [pytest.mark.realtime, pytest.mark.skipif(
    TMUX is None, reason="tmux not found: the real-terminal check of `poise demo` needs tmux"
)]

COLUMNS, ROWS = 140, 44
WAIT_LIMIT_S = 60.0  # a hang guard, not a speed requirement
POLL_S = 0.2


class Terminal:
    """One detached tmux session on a private tmux server (its socket in the test's folder)."""

    def __init__(self, folder: Path):
        self.socket = folder / "tmux.sock"

    def tmux(self, *args: str) -> str:
        result = subprocess.run(
            [TMUX, "-S", str(self.socket), *args], capture_output=True, text=True, check=True
        )
        return result.stdout

    def start(self, command: str) -> None:
        self.tmux("new-session", "-d", "-s", "demo", "-x", str(COLUMNS), "-y", str(ROWS), command)

    def screen(self) -> str:
        return self.tmux("capture-pane", "-p", "-t", "demo")

    def normal_screen(self) -> str:
        """The terminal's normal screen, kept while the dashboard draws on the alternate one."""
        return self.tmux("capture-pane", "-p", "-a", "-t", "demo")

    def demo_socket(self) -> Path:
        """The control socket of the demo's daemon: in the private folder its first line names."""
        line = next(l for l in self.normal_screen().splitlines() if "(log: " in l)
        return Path(line.split("(log: ", 1)[1].rstrip(")")).parent / "kestrel-1.sock"

    def keys(self, *keys: str) -> None:
        self.tmux("send-keys", "-t", "demo", *keys)

    def wait_for(self, text: str) -> str:
        deadline = time.monotonic() + WAIT_LIMIT_S
        while time.monotonic() < deadline:
            screen = self.screen()
            if text in screen:
                return screen
            time.sleep(POLL_S)
        size = self.tmux("display", "-p", "-t", "demo", "#{window_width}x#{window_height}")
        pytest.fail(f"{text!r} never appeared; the {size.strip()} screen was:\n{self.screen()}")

    def close(self) -> None:
        subprocess.run(
            [TMUX, "-S", str(self.socket), "kill-server"], capture_output=True, check=False
        )


def wait_for_file(path: Path) -> str:
    deadline = time.monotonic() + WAIT_LIMIT_S
    while time.monotonic() < deadline:
        if path.exists() and path.read_text().strip():
            return path.read_text().strip()
        time.sleep(POLL_S)
    pytest.fail(f"{path.name} was never written: the demo did not exit")


def demo_command(tmp_path: Path) -> str:
    config = write_rig_config(tmp_path)  # control socket and run store inside tmp_path
    # tmux puts COLUMNS/LINES in the pane's environment, which Textual would read in
    # preference to the terminal's own size: leave them out so the pane's size is used.
    return (
        f"cd {REPO} && env -u COLUMNS -u LINES {sys.executable} -m daemon.cli demo "
        f"--config {config}"
    )


def recorded_run(tmp_path: Path):
    conn = open_for_reading(str(tmp_path / "runs.db"))
    try:
        return get_run(conn, 1, str(tmp_path / "runs.db"))
    finally:
        conn.close()


def test_poise_demo_starts_draws_answers_keys_and_quits_cleanly(tmp_path):
    exit_file = tmp_path / "exit-status"
    terminal = Terminal(tmp_path)
    terminal.start(f"{demo_command(tmp_path)}; echo $? > {exit_file}; sleep 600")
    try:
        screen = terminal.wait_for("rig link   up")
        socket_path = terminal.demo_socket()
        assert socket_path.exists() and str(socket_path) in screen  # its own daemon, in its folder
        assert "◆ POISE  kestrel-1" in screen
        assert "SPACE ▸ E-STOP" in screen  # the e-stop key, always on show
        assert any(0x2800 < ord(ch) <= 0x28FF for ch in screen)  # the rig drawn in braille
        assert "● REC" in screen  # the demo records its run

        terminal.keys("Space")
        terminal.wait_for("ESTOP    emergency stop latched")
        terminal.keys("a")  # a motion key in a latched state: explained, nothing sent
        terminal.wait_for("arm is not possible in ESTOP")

        terminal.keys("q")
        assert wait_for_file(exit_file) == "0"
        screen = terminal.screen()
        assert "poise demo: daemon stopped, rig at rest; recorded run 1 in" in screen
    finally:
        terminal.close()
    assert not socket_path.exists()  # the daemon closed its control socket
    run = recorded_run(tmp_path)
    assert run.samples_written > 0
    assert run.outcome == "completed"  # ended by the daemon's clean shutdown, not recovered


def test_closing_the_terminal_under_the_demo_shuts_its_daemon_down_cleanly(tmp_path):
    terminal = Terminal(tmp_path)
    terminal.start(demo_command(tmp_path))
    try:
        terminal.wait_for("rig link   up")
        socket_path = terminal.demo_socket()
        assert socket_path.exists()
    finally:
        terminal.close()  # the pane's processes get SIGHUP, as when a terminal window closes
    deadline = time.monotonic() + WAIT_LIMIT_S
    while socket_path.exists() and time.monotonic() < deadline:
        time.sleep(POLL_S)
    assert not socket_path.exists(), "the daemon outlived the demo's terminal"
    while recorded_run(tmp_path).outcome is None and time.monotonic() < deadline:
        time.sleep(POLL_S)
    assert recorded_run(tmp_path).outcome == "completed"
