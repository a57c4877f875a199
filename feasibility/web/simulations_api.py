"""The API for semester simulations, the chance of completion (under /api/v1; reviewers and admins).

``POST /semesters/NAME/simulations`` stores a simulation and hands it to the workers
(202 with its id); ``GET /semesters/NAME/simulations/ID`` gives its state and, when
done, the result of :func:`feasibility.engine.simulate.simulate_semester`;
``GET /semesters/NAME/simulations`` lists the semester's simulations, newest first.
"""

from __future__ import annotations

from typing import Any

from flask import Blueprint, abort, url_for
from sqlalchemy import select

from feasibility.documents.loading import DocumentError, Problem, parse_document
from feasibility.service import access
from feasibility.service.current import current_observatory, observatory_of
from feasibility.service.simulations import SimulationSettings, ask_for_simulation, send_simulation, simulation_json
from feasibility.store.db import session_scope
from feasibility.store.models import Simulation
from feasibility.web.auth import current_user, require
from feasibility.web.bodies import problem_status, read_request_data, request_body

__all__ = ["bp"]

bp = Blueprint("simulations_api", __name__, url_prefix="/api/v1")

#: Most simulations listed by one request.
_MAX_LISTED = 100


@bp.errorhandler(DocumentError)
def _invalid(error: DocumentError) -> tuple[dict[str, Any], int]:
    return error.as_dict(), problem_status(error)


@bp.post("/semesters/<semester>/simulations")
@require(access.ASK_SIMULATION)
def post_simulation(semester: str) -> tuple[dict[str, Any], int]:
    """Ask for a simulation of ``semester``; optional JSON body ``{"realisations", "seed", "hours", "ranks"}``."""
    raw = request_body("simulation")
    data = read_request_data(raw, "simulation") if raw.strip() else {}
    if not isinstance(data, dict):
        raise DocumentError([Problem("", "must be a JSON object")], "simulation")
    settings = parse_document(SimulationSettings, data, "simulation")
    user = current_user()
    with session_scope() as session:
        observatory = current_observatory(session)
        if observatory is None or observatory_of(observatory).semester_named(semester) is None:
            abort(404, description=f"the observatory has no semester {semester!r}")
        simulation = ask_for_simulation(session, semester, settings, user.id if user is not None else None)
        session.flush()
        answer = simulation_json(simulation, with_result=False)
    send_simulation(answer["id"])
    answer["url"] = url_for("simulations_api.get_simulation", semester=semester, simulation_id=answer["id"])
    return answer, 202


@bp.get("/semesters/<semester>/simulations/<int:simulation_id>")
@require(access.SEE_SEMESTER)
def get_simulation(semester: str, simulation_id: int) -> dict[str, Any]:
    """One simulation: its state, settings and, when done, its result."""
    with session_scope(read_only=True) as session:
        simulation = session.get(Simulation, simulation_id)
        if simulation is None or simulation.semester != semester:
            abort(404, description=f"no simulation {simulation_id} of semester {semester!r}")
        return simulation_json(simulation)


@bp.get("/semesters/<semester>/simulations")
@require(access.SEE_SEMESTER)
def list_simulations(semester: str) -> dict[str, Any]:
    """The semester's simulations, newest first, without their results."""
    with session_scope(read_only=True) as session:
        rows = session.scalars(select(Simulation).where(Simulation.semester == semester).order_by(Simulation.id.desc()).limit(_MAX_LISTED)).all()
        return {"semester": semester, "items": [simulation_json(row, with_result=False) for row in rows]}
