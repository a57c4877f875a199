"""What a check run produces: findings, each request's verdict and the proposal's verdict.

Levels combine worst-wins. ``unchecked`` ranks above ``marginal``: a request that
could not be evaluated cannot be called feasible, but a definite ``infeasible``
elsewhere still decides the proposal.
"""

from __future__ import annotations

from enum import Enum
from typing import Any

from pydantic import BaseModel, Field

__all__ = ["COMPETING_LEVELS", "Finding", "Level", "ProposalResult", "RequestResult", "worst"]

Figure = float | int | str | bool | None | list[float] | list[int] | list[str]


class Level(str, Enum):  # noqa: UP042 - StrEnum would change str(level) from "Level.FEASIBLE" to "feasible"
    """How a check, a request or a proposal came out."""

    FEASIBLE = "feasible"
    MARGINAL = "marginal"
    UNCHECKED = "unchecked"
    INFEASIBLE = "infeasible"

    @property
    def rank(self) -> int:
        return _RANK[self]

    @property
    def exit_code(self) -> int:
        """The command line's exit code for a verdict at this level."""
        return _EXIT[self]


#: The request verdicts that compete for the time offered: the semester overview's pressure and the
#: simulation's dispatch count these; an infeasible request will not be scheduled, an unchecked one cannot be.
COMPETING_LEVELS = (Level.FEASIBLE.value, Level.MARGINAL.value)

_RANK = {Level.FEASIBLE: 0, Level.MARGINAL: 1, Level.UNCHECKED: 2, Level.INFEASIBLE: 3}
_EXIT = {Level.FEASIBLE: 0, Level.MARGINAL: 3, Level.INFEASIBLE: 4, Level.UNCHECKED: 5}


def worst(levels: list[Level]) -> Level:
    """The worst of ``levels``; feasible when there are none."""
    return max(levels, key=lambda level: level.rank, default=Level.FEASIBLE)


class Finding(BaseModel):
    """The outcome of one check on one observation request."""

    check: str
    level: Level
    message: str
    figures: dict[str, Figure] = Field(default_factory=dict)
    suggestion: str | None = None
    method: str | None = Field(default=None, description="How the figures were computed, with the published source.")
    cause: bool = Field(
        default=False,
        description="True when this finding is the cause of other findings of the same request (they name it in 'see').",
    )
    see: str | None = Field(
        default=None,
        description="The check whose finding causes this one (e.g. 'sensitivity'); resolve that one first.",
    )


class RequestResult(BaseModel):
    """One observation request's findings, verdict and key figures."""

    label: str
    instrument: str
    target: str
    verdict: Level
    findings: list[Finding]
    figures: dict[str, Figure]
    series: dict[str, Any] = Field(
        default_factory=dict,
        description="Per-night series for plots: night dates, hours usable, Moon illumination.",
    )


class ProposalResult(BaseModel):
    """The result of one check run on one proposal."""

    proposal_id: str
    semester: str
    verdict: Level
    requests: list[RequestResult]
    engine_version: str
    observatory: str
    observatory_version: str
    schedule_version: str | None
    computed_at: str
