"""Interlock limits and the stop behaviour."""

from __future__ import annotations

from typing import Literal

from pydantic import Field

from daemon.config.base import Section


class InterlockSettings(Section):
    soft_limit_inset_m: float = Field(default=0.06, ge=0.0, le=1.0, description="soft limits this far inside the switches")
    max_cart_speed_mps: float = Field(default=1.5, gt=0.0, le=20.0)
    max_pendulum_rate_dps: float = Field(default=1200.0, gt=0.0, le=20000.0)
    braking_decel_mps2: float = Field(default=8.0, gt=0.0, le=200.0)
    reaction_latency_s: float = Field(default=0.01, ge=0.0, le=1.0)


class StopSettings(Section):
    category: Literal[0, 1] = Field(default=1, description="IEC 60204-1 stop category")
    decel_mps2: float = Field(default=3.0, gt=0.0, le=100.0)
