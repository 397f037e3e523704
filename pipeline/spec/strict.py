"""The base of every spec section."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict


class StrictModel(BaseModel):
    """A spec section: unknown keys are refused, values are immutable."""

    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)
