"""The [api] section of the rig config: limits with one-line errors naming the field."""

from __future__ import annotations

import pytest

from daemon.config import ConfigError, demo_config_path, load_config, parse_config

# Linux struct sockaddr_un has sun_path[108], including the terminating NUL
# (Linux man-pages, unix(7)), so 107 bytes of path is the most that binds.
SUN_PATH_BYTES = 108


def demo_with(section_lines: str) -> str:
    text = demo_config_path().read_text()
    return text.replace(
        '[api]\nsocket_path = "/tmp/poise-kestrel-1.sock"', "[api]\n" + section_lines
    )


def test_demo_rig_serves_on_its_own_socket_with_default_limits():
    api = load_config(demo_config_path()).api
    assert api.socket_path == "/tmp/poise-kestrel-1.sock"
    assert api.status_rate_hz <= api.max_status_rate_hz
    assert api.max_line_bytes == 65536


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
