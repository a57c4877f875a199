"""The overview's form that asks for a semester simulation (reviewers and admins, as the API).

The form is read here, field by field; the simulation is stored and sent by the same
service functions the API uses (:func:`feasibility.service.simulations.ask_for_simulation`
and :func:`~feasibility.service.simulations.send_simulation`). Refused input is shown
back on the overview with each problem's field named, and nothing is stored.
"""

from __future__ import annotations

import math
from typing import Any

from flask import abort, flash, g, redirect, request, url_for
from sqlalchemy import select

from feasibility.documents.loading import DocumentError, Problem, parse_document
from feasibility.service import access
from feasibility.service.current import current_observatory, observatory_of
from feasibility.service.simulations import SimulationSettings, ask_for_simulation, send_simulation
from feasibility.store.db import session_scope
from feasibility.store.models import ProposalRecord
from feasibility.web.auth_pages import current_user, db, sign_in_required
from feasibility.web.dashboard import bp

__all__ = ["read_simulation_form"]


@bp.post("/semesters/<semester>/simulations")
@sign_in_required(access.ASK_SIMULATION)
def ask_simulation(semester: str) -> Any:
    """Store a simulation of ``semester`` with the form's settings and hand it to the workers."""
    observatory = current_observatory(db())
    if observatory is None or observatory_of(observatory).semester_named(semester) is None:
        abort(404, description=f"The observatory has no semester {semester}.")
    known = set(db().scalars(select(ProposalRecord.proposal_id).where(ProposalRecord.semester == semester)))
    try:
        settings = read_simulation_form(request.form, known)
    except DocumentError as error:
        from feasibility.web.dashboard.views import overview

        g.chance_problems, g.chance_form = error, request.form
        return overview(semester), 422
    user = current_user()
    with session_scope() as session:
        simulation_id = ask_for_simulation(session, semester, settings, user.id if user is not None else None).id
    send_simulation(simulation_id)  # only after the commit
    flash(f"Simulation #{simulation_id} asked for; it shows here when it has finished (reload the page).")
    return redirect(url_for("dashboard.overview", semester=semester) + "#chance-heading")


def read_simulation_form(form: Any, known: set[str]) -> SimulationSettings:
    """The settings the form asks for; :class:`DocumentError` naming every field with a problem.

    ``ranks`` is text, one ``PROPOSAL-ID rank`` per line (smaller goes first; a grade
    works as well as a place); ``known`` are the semester's proposal ids.
    """
    problems: list[Problem] = []
    data: dict[str, Any] = {}
    for name in ("realisations", "seed"):
        text = (form.get(name) or "").strip()
        if not text:
            continue
        try:
            data[name] = int(text)
        except ValueError:
            problems.append(Problem(name, f"must be a whole number, got {text[:40]!r}"))
    if form.get("hours"):
        data["hours"] = form.get("hours")
    data["ranks"] = _ranks(form.get("ranks") or "", known, problems)
    try:
        settings = parse_document(SimulationSettings, data, "simulation")
    except DocumentError as error:
        problems.extend(error.problems)
        settings = None
    if problems or settings is None:
        raise DocumentError(problems, "simulation")
    return settings


def _ranks(text: str, known: set[str], problems: list[Problem]) -> dict[str, float]:
    ranks: dict[str, float] = {}
    for number, line in enumerate(text.splitlines(), start=1):
        parts = line.replace(",", " ").replace(";", " ").split()
        if not parts:
            continue
        where = f"line {number}"
        if len(parts) != 2:
            problems.append(Problem("ranks", f"{where}: write a proposal id and its rank, e.g. 'SQ-2027A-001 1', got {line.strip()[:60]!r}"))
            continue
        proposal_id, rank_text = parts
        try:
            rank = float(rank_text)
        except ValueError:
            rank = math.nan
        if not math.isfinite(rank):
            problems.append(Problem("ranks", f"{where}: the rank of {proposal_id} must be a number, got {rank_text[:40]!r}"))
        elif proposal_id not in known:
            problems.append(Problem("ranks", f"{where}: the semester has no proposal {proposal_id[:60]!r}"))
        elif proposal_id in ranks:
            problems.append(Problem("ranks", f"{where}: {proposal_id} is ranked twice"))
        else:
            ranks[proposal_id] = rank
    return ranks
