"""The chance of completion on the dashboard: the latest finished simulation of a semester, for the page partials.

Registers two template globals (``init_app``): ``latest_simulation(semester)``, the
newest simulation of the semester that finished, shown to reviewers and admins only
(it speaks of every proposal of the semester), else None; and
``proposal_chance(simulation, proposal_id)``, one proposal's rows of it. The partials
``_chance_overview.html`` and ``_chance_proposal.html`` show them; nothing here runs a
simulation (the API and ``feasibility simulate`` do).
"""

from __future__ import annotations

from typing import Any

from flask import Flask
from sqlalchemy import select

from feasibility.store.models import Simulation
from feasibility.web.auth_pages import current_user, db, sees_all

__all__ = ["init_app", "latest_simulation", "proposal_chance"]


def init_app(app: Flask) -> None:
    """Make the two functions available to every template."""
    app.jinja_env.globals.update(latest_simulation=latest_simulation, proposal_chance=proposal_chance)


def latest_simulation(semester: str) -> Simulation | None:
    """The newest finished simulation of ``semester``, for a signed-in reviewer or admin; else None."""
    user = current_user()
    if user is None or not sees_all(user):
        return None
    query = (
        select(Simulation)
        .where(Simulation.semester == semester, Simulation.state == "done")
        .order_by(Simulation.id.desc())
        .limit(1)
    )
    return db().scalars(query).first()


def proposal_chance(simulation: Simulation | None, proposal_id: str) -> dict[str, Any] | None:
    """One proposal's line of ``simulation`` with its requests' lines under ``requests``, or None when it was not in it."""
    result = simulation.result if simulation is not None else None
    if not result:
        return None
    line = next((row for row in result.get("proposals", []) if row.get("proposal_id") == proposal_id), None)
    if line is None:
        return None
    return {**line, "requests": [row for row in result.get("requests", []) if row.get("proposal_id") == proposal_id]}
