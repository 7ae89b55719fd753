"""The base of every section of the experiment file and of every registered entry's settings."""
from __future__ import annotations

from pydantic import BaseModel, ConfigDict


class Settings(BaseModel):
    """Unknown keys are mistakes (a typo must not pass silently); values never change after loading."""

    model_config = ConfigDict(extra="forbid", frozen=True)
