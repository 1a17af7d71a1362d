"""The scenario's ``[goal]`` (or several ``[[goal]]`` tables): what the survey must achieve."""

from __future__ import annotations

from dataclasses import dataclass

#: default practical tolerance of coverage below nominal (one percentage point; common practice)
COVERAGE_TOLERANCE = 0.01
#: default bootstrap rounds of the pick's stability (decision/stability.py)
STABILITY_ROUNDS = 200
#: most bootstrap rounds accepted: each recomputes every measure of every point (a share's MCSE is then at
#: most 0.005; a sanity bound, no published source)
MAX_STABILITY_ROUNDS = 10_000
#: keys that belong to the whole design, not to one goal: given once, or the same in every [[goal]]
DESIGN_WIDE = ("budget", "coverage_tolerance", "stability_rounds")


@dataclass(frozen=True)
class Goal:
    """What the survey must achieve for one variable (or one domain of it): a margin and/or a budget.

    ``moe`` is the margin of error to reach; ``relative_moe`` the same as a fraction of the true
    mean (margin = relative_moe x |truth|; exclusive with ``moe``).  ``confidence`` is the level
    of the margin (default: the run's); ``variable`` the target the goal is about (default: the
    first); ``domain`` a value of the frame's domain column (the goal is then about the domain
    mean).  ``budget`` (mean cost of the design), ``coverage_tolerance`` (how far below nominal a
    coverage may be) and ``stability_rounds`` belong to the whole design: every goal of a scenario
    carries the same values.
    """

    moe: float | None = None
    budget: float | None = None
    confidence: float | None = None
    variable: str | None = None
    relative_moe: float | None = None
    domain: str | None = None
    coverage_tolerance: float = COVERAGE_TOLERANCE
    stability_rounds: int = STABILITY_ROUNDS

    @property
    def has_margin(self) -> bool:
        return self.moe is not None or self.relative_moe is not None
