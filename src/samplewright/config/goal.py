"""The scenario's ``[goal]``: what the survey must achieve."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Goal:
    """What the survey must achieve: a margin of error and/or a budget (scenario ``[goal]``).

    ``confidence`` is the level of the margin (default: the run's); ``variable`` the target
    the goal is about (default: the first).
    """

    moe: float | None = None
    budget: float | None = None
    confidence: float | None = None
    variable: str | None = None
