"""The chance of completion on the dashboard: the semester's simulations, for the page partials.

Registers three template globals (``init_app``), shown to reviewers and admins only
(a simulation speaks of every proposal of the semester):
``latest_simulation(semester)``, the newest simulation of the semester that finished;
``chance_overview(semester)``, what the overview's section shows (that simulation, the
one before it and how each proposal's chance moved between them, a newer one still
queued or running, and the settings the form starts from); and
``proposal_chance(simulation, proposal_id)``, one proposal's rows of a simulation.
The partials ``_chance_overview.html`` and ``_chance_proposal.html`` show them; the
form that asks for a simulation posts to :mod:`feasibility.web.dashboard.chance_form`.
"""

from __future__ import annotations

from typing import Any

from flask import Flask
from sqlalchemy import select

from feasibility.service import access
from feasibility.service.simulations import SimulationSettings
from feasibility.store.models import Simulation
from feasibility.web.auth_pages import current_user, db

__all__ = ["chance_changes", "chance_overview", "init_app", "latest_simulation", "proposal_chance", "ranks_text"]

#: States of a simulation not finished yet.
PENDING_STATES = ("queued", "running")


def init_app(app: Flask) -> None:
    """Make the functions available to every template."""
    app.jinja_env.globals.update(latest_simulation=latest_simulation, proposal_chance=proposal_chance, chance_overview=chance_overview)


def _may_see() -> bool:
    user = current_user()
    return access.may(user, access.SEE_SEMESTER)


def latest_simulation(semester: str) -> Simulation | None:
    """The newest finished simulation of ``semester``, for a signed-in reviewer or admin; else None."""
    if not _may_see():
        return None
    finished = _finished(semester, 1)
    return finished[0] if finished else None


def _finished(semester: str, count: int) -> list[Simulation]:
    query = select(Simulation).where(Simulation.semester == semester, Simulation.state == "done").order_by(Simulation.id.desc()).limit(count)
    return list(db().scalars(query))


def chance_overview(semester: str) -> dict[str, Any] | None:
    """What the overview's chance section shows a reviewer or admin; None to anyone else.

    ``latest`` and ``previous``: the two newest finished simulations; ``changes``: each
    proposal's move between them in percentage points (:func:`chance_changes`);
    ``pending``: a newer simulation still queued or running; ``failed``: a newer one that
    failed; ``settings``: what the form starts from (the latest simulation's, else the defaults).
    """
    if not _may_see():
        return None
    finished = _finished(semester, 2)
    latest = finished[0] if finished else None
    previous = finished[1] if len(finished) > 1 else None
    newer = select(Simulation).where(Simulation.semester == semester)
    if latest is not None:
        newer = newer.where(Simulation.id > latest.id)
    pending = db().scalars(newer.where(Simulation.state.in_(PENDING_STATES)).order_by(Simulation.id.desc()).limit(1)).first()
    failed = db().scalars(newer.where(Simulation.state == "failed").order_by(Simulation.id.desc()).limit(1)).first()
    source = pending or latest
    settings = dict(source.settings) if source is not None and source.settings else SimulationSettings().model_dump()
    return {
        "latest": latest,
        "previous": previous,
        "changes": chance_changes(latest, previous),
        "pending": pending,
        "failed": failed,
        "settings": settings,
        "ranks_text": ranks_text(settings.get("ranks") or {}),
        "limits": realisation_limits(),
    }


def chance_changes(latest: Simulation | None, previous: Simulation | None) -> dict[str, int | None]:
    """Per proposal of ``latest``: its chance of completion minus that in ``previous``, in percentage points.

    The difference of the two percentages as shown (each rounded to a whole percent), so
    the column agrees with the numbers beside it; None for a proposal not in ``previous``.
    """
    if latest is None or previous is None or not latest.result or not previous.result:
        return {}
    before = {row["proposal_id"]: row["chance_of_completion"] for row in previous.result.get("proposals", [])}
    changes: dict[str, int | None] = {}
    for row in latest.result.get("proposals", []):
        old = before.get(row["proposal_id"])
        changes[row["proposal_id"]] = None if old is None else round(100 * row["chance_of_completion"]) - round(100 * old)
    return changes


def ranks_text(ranks: dict[str, float]) -> str:
    """Ranks as the form's text: one ``PROPOSAL-ID rank`` per line, best rank first."""
    return "\n".join(f"{pid} {rank:g}" for pid, rank in sorted(ranks.items(), key=lambda item: (item[1], item[0])))


def realisation_limits() -> tuple[int, int]:
    """The smallest and largest number of realisations one may ask for (the settings model's bounds)."""
    field = SimulationSettings.model_fields["realisations"]
    low = next(m.ge for m in field.metadata if getattr(m, "ge", None) is not None)
    high = next(m.le for m in field.metadata if getattr(m, "le", None) is not None)
    return int(low), int(high)


def proposal_chance(simulation: Simulation | None, proposal_id: str) -> dict[str, Any] | None:
    """One proposal's line of ``simulation`` with its requests' lines under ``requests``, or None when it was not in it."""
    result = simulation.result if simulation is not None else None
    if not result:
        return None
    line = next((row for row in result.get("proposals", []) if row.get("proposal_id") == proposal_id), None)
    if line is None:
        return None
    return {**line, "requests": [row for row in result.get("requests", []) if row.get("proposal_id") == proposal_id]}
