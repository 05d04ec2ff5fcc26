"""Where the daemon keeps its recordings and serves its control API."""

from __future__ import annotations

from pydantic import Field

from daemon.config.base import Section


class RecordingSettings(Section):
    db_path: str = Field(default="poise-runs.db", min_length=1)


class ApiSettings(Section):
    socket_path: str = Field(default="/tmp/poise.sock", min_length=1)
    status_rate_hz: float = Field(default=10.0, gt=0.0, le=200.0)
