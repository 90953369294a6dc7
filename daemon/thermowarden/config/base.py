"""The base of every configuration model."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict


class Strict(BaseModel):
    """Base of every configuration model: unknown keys are errors, values are frozen."""

    model_config = ConfigDict(extra="forbid", frozen=True)
