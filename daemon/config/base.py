"""Common base for every config section: unknown keys are errors, values are frozen."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict


class Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
