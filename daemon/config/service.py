"""Where the daemon keeps its recordings and serves its control API."""

from __future__ import annotations

import os
from pathlib import Path

from pydantic import Field, ValidationInfo, field_validator

from daemon.config.base import Section

# Linux sockaddr_un.sun_path holds 108 bytes including the terminating NUL (unix(7)).
UNIX_SOCKET_PATH_MAX_BYTES = 107


class RecordingSettings(Section):
    """The rig's run store (one SQLite file per rig) and the recorder's queue in front of it."""

    db_path: str = Field(
        default="poise-runs.db",
        min_length=1,
        description="the run store file; ~ is the home folder; a relative path is from the folder "
        "of the config file (load_config), or from the working directory for a config given as "
        "text (parse_config) and for the built-in demo rig",
    )
    queue_capacity: int = Field(
        default=65_536, ge=1_000, le=10_000_000, description="samples held while the disk is slow"
    )
    flush_interval_ms: float = Field(
        default=50.0,
        gt=0.0,
        le=100.0,
        description="longest wait before queued samples are committed",
    )
    max_db_mb: float | None = Field(
        default=None,
        gt=0.0,
        description="stop recording (as for a full disk) beyond this size; the last 64 kB are "
        "kept to store the failure itself",
    )

    @field_validator("db_path")
    @classmethod
    def _expand_home(cls, value: str) -> str:
        return os.path.expanduser(value)

    def with_db_path_from(self, folder: Path) -> RecordingSettings:
        """A copy whose relative ``db_path`` is taken from ``folder`` (made absolute)."""
        return self.model_copy(update={"db_path": os.path.abspath(Path(folder) / self.db_path)})


class ApiSettings(Section):
    """The control API's Unix socket and the limits that keep one client from hurting the rest.

    ``status_rate_hz`` is the stream rate a subscriber gets when it names none;
    ``max_status_rate_hz`` caps what it may ask for. ``max_line_bytes`` bounds one
    request line (a longer line gets an error reply and the connection is closed).
    ``client_queue_lines`` bounds each client's outgoing queue: status lines beyond
    it are dropped and counted; when it is full of replies the client's further
    requests wait, and a client that reads nothing for ``stalled_client_timeout_s``
    is disconnected. ``client_requests_per_s`` and ``client_request_burst`` bound
    what one client may ask (a token bucket; its requests wait beyond it). Beyond
    ``max_clients`` connections, a new one may still send one e-stop.
    """

    socket_path: str | None = Field(
        default=None,
        min_length=1,
        description="unset: <runtime dir>/<rig id>.sock in an owner-only folder (daemon/api/paths.py)",
    )
    status_rate_hz: float = Field(default=10.0, gt=0.0, le=200.0)
    max_status_rate_hz: float = Field(default=50.0, gt=0.0, le=200.0)
    max_line_bytes: int = Field(default=65536, ge=1024, le=1 << 20)
    client_queue_lines: int = Field(default=64, ge=4, le=65536)
    max_clients: int = Field(default=16, ge=1, le=256)
    stalled_client_timeout_s: float = Field(default=10.0, gt=0.0, le=3600.0)
    client_requests_per_s: float = Field(
        default=200.0, gt=0.0, le=100_000.0,
        description="each client's sustained request rate; faster requests wait (not refused)",
    )
    client_request_burst: int = Field(
        default=50, ge=1, le=100_000, description="requests a client may send at once above that rate"
    )

    @field_validator("socket_path")
    @classmethod
    def _fits_in_sockaddr(cls, value: str | None) -> str | None:
        if value is None:
            return value
        size = len(value.encode())
        if size > UNIX_SOCKET_PATH_MAX_BYTES:
            raise ValueError(
                f"a Unix socket path may be at most {UNIX_SOCKET_PATH_MAX_BYTES} bytes, this one is {size}"
            )
        return value

    @field_validator("max_status_rate_hz")
    @classmethod
    def _cap_covers_default_rate(cls, value: float, info: ValidationInfo) -> float:
        default_rate = info.data.get("status_rate_hz")
        if default_rate is not None and value < default_rate:
            raise ValueError(f"must be at least status_rate_hz ({default_rate:g})")
        return value
