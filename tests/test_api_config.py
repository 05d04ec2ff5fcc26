"""The [api] section of the rig config: limits with one-line errors naming the field."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest

from daemon.api.paths import control_socket_path, make_private_dir
from daemon.config import ConfigError, demo_config_path, load_config, parse_config
from daemon.errors import OperatorError

# Linux struct sockaddr_un has sun_path[108], including the terminating NUL
# (Linux man-pages, unix(7)), so 107 bytes of path is the most that binds.
SUN_PATH_BYTES = 108


def demo_with(section_lines: str) -> str:
    text = demo_config_path().read_text()
    assert "\n[api]\n" in text
    return text.replace("\n[api]\n", "\n[api]\n" + section_lines + "\n")


def test_demo_rig_serves_on_this_users_own_socket_with_default_limits(monkeypatch):
    config = load_config(demo_config_path())
    assert config.api.socket_path is None
    monkeypatch.delenv("XDG_RUNTIME_DIR", raising=False)
    assert control_socket_path(config) == Path(f"/tmp/poise-{os.getuid()}/kestrel-1.sock")
    monkeypatch.setenv("XDG_RUNTIME_DIR", "/run/user/1234")
    assert control_socket_path(config) == Path("/run/user/1234/poise/kestrel-1.sock")
    assert config.api.status_rate_hz <= config.api.max_status_rate_hz
    assert config.api.max_line_bytes == 65536


def test_the_runtime_folder_is_made_owner_only_and_refused_when_open_to_others(tmp_path):
    folder = tmp_path / "poise"
    make_private_dir(folder)
    assert stat.S_IMODE(folder.stat().st_mode) == 0o700
    folder.chmod(0o755)
    with pytest.raises(OperatorError, match=r"open to other users \(mode 755\); chmod 700"):
        make_private_dir(folder)


def test_longest_socket_path_that_fits_sockaddr_un_is_accepted():
    path = "/tmp/" + "x" * (SUN_PATH_BYTES - 1 - len("/tmp/"))
    assert parse_config(demo_with(f'socket_path = "{path}"')).api.socket_path == path


def test_socket_path_too_long_for_sockaddr_un_is_refused():
    path = "/tmp/" + "x" * (SUN_PATH_BYTES - len("/tmp/"))
    with pytest.raises(ConfigError) as caught:
        parse_config(demo_with(f'socket_path = "{path}"'), "rig.toml")
    [problem] = caught.value.problems
    assert problem.startswith(
        f"api.socket_path: a Unix socket path may be at most {SUN_PATH_BYTES - 1} bytes, "
        f"this one is {SUN_PATH_BYTES}"
    )


def test_stream_rate_cap_below_the_default_rate_is_refused():
    text = demo_with(
        'socket_path = "/tmp/p.sock"\nstatus_rate_hz = 100.0\nmax_status_rate_hz = 50.0'
    )
    with pytest.raises(ConfigError) as caught:
        parse_config(text)
    assert caught.value.problems == [
        "api.max_status_rate_hz: must be at least status_rate_hz (100) (got 50.0)"
    ]


def test_unknown_api_field_is_refused():
    with pytest.raises(ConfigError, match=r"api\.queue_lines: unknown field"):
        parse_config(demo_with('socket_path = "/tmp/p.sock"\nqueue_lines = 5'))
