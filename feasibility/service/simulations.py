"""Semester simulations in the service: asked for through the API, computed by a worker, kept as JSON.

:func:`ask_for_simulation` stores a queued :class:`~feasibility.store.models.Simulation`;
:func:`send_simulation` hands its id to the Celery workers (task :data:`SIMULATE_TASK`,
on the check queue) or, without a broker, to a thread of this process; either way
:func:`execute_simulation` runs it: the latest version of every proposal of the
semester, the observatory description and the semester's schedule in force, through
:func:`feasibility.engine.simulate.simulate_semester`, and stores the result.

A simulation whose worker dies stays ``running``: ask for a new one (nothing else
depends on it). Running the same id twice computes it twice and stores the same
result (the seed fixes it).
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Callable
from typing import Any

from pydantic import Field
from sqlalchemy import select

from feasibility.documents import Proposal
from feasibility.documents.base import DocumentModel
from feasibility.service.current import cached_document, current_observatory, current_schedule, observatory_of, schedule_of
from feasibility.service.dispatch import queue_names
from feasibility.service.runtime import current_runtime
from feasibility.store.db import session_scope
from feasibility.store.models import ProposalRecord, ProposalVersion, Simulation, utcnow
from feasibility.store.queries import latest_version

__all__ = ["SIMULATE_TASK", "SimulationSettings", "ask_for_simulation", "execute_simulation", "send_simulation", "simulation_json"]

log = logging.getLogger(__name__)

#: The registered name of the Celery task (sent by name, as the check runs are).
SIMULATE_TASK = "feasibility.simulate_semester"


class SimulationSettings(DocumentModel):
    """What may be asked of a simulation (the body of ``POST /api/v1/semesters/NAME/simulations``)."""

    realisations: int = Field(default=1000, ge=1, le=20_000)
    seed: int = Field(default=0, ge=0, le=2**63 - 1)
    hours: str = Field(default="needed", pattern="^(needed|requested)$")
    ranks: dict[str, float] = Field(default_factory=dict, max_length=10_000, description="Proposal id to rank, smaller first.")


def ask_for_simulation(session: Any, semester: str, settings: SimulationSettings, user_id: int | None) -> Simulation:
    """Store a queued simulation of ``semester`` (send it with :func:`send_simulation` after the commit)."""
    simulation = Simulation(semester=semester, settings=settings.model_dump(), state="queued", requested_by=user_id)
    session.add(simulation)
    session.flush()
    return simulation


def send_simulation(simulation_id: int) -> None:
    """Hand the simulation to the Celery workers, or to a thread of this process without a broker (needs a runtime bound)."""
    runtime = current_runtime()
    if runtime is None:
        raise RuntimeError("send_simulation() needs a runtime bound: an application context, a worker or a command")
    dispatcher = runtime.dispatcher
    if getattr(dispatcher, "mode", "") == "celery":
        dispatcher.celery.send_task(SIMULATE_TASK, args=[simulation_id], queue=queue_names(runtime.settings))
        return

    def work() -> None:
        with runtime.bound():
            execute_simulation(simulation_id)

    threading.Thread(target=work, name=f"feasibility-simulation-{simulation_id}", daemon=True).start()


def execute_simulation(simulation_id: int) -> str:
    """Compute simulation ``simulation_id`` and store its result (or why it failed); returns its final state."""
    from feasibility.engine.simulate import simulate_semester

    with session_scope() as session:
        simulation = session.get(Simulation, simulation_id)
        if simulation is None:
            return "missing"
        simulation.state, simulation.started_at = "running", utcnow()
        semester, settings = simulation.semester, SimulationSettings.model_validate(simulation.settings)
    try:
        with session_scope(read_only=True) as session:
            observatory_row = current_observatory(session)
            if observatory_row is None:
                raise ValueError("no observatory description is stored")
            observatory = observatory_of(observatory_row)
            schedule = schedule_of(current_schedule(session, semester))
            proposals = []
            for record in session.scalars(select(ProposalRecord).where(ProposalRecord.semester == semester).order_by(ProposalRecord.proposal_id)):
                version: ProposalVersion = latest_version(session, record)
                proposals.append(cached_document(Proposal, version.content_hash, _stored_document(version)))
        if not proposals:
            raise ValueError(f"semester {semester!r} has no proposals")
        result = simulate_semester(
            proposals,
            observatory,
            schedule,
            ranks=settings.ranks or None,
            realisations=settings.realisations,
            seed=settings.seed,
            hours=settings.hours,  # type: ignore[arg-type]
        )
        state, error = "done", None
    except Exception as exc:  # noqa: BLE001 - the asker gets the reason, the service goes on
        log.warning("simulation %s failed: %s: %s", simulation_id, type(exc).__name__, exc)
        result, state, error = None, "failed", f"{type(exc).__name__}: {exc}"
    with session_scope() as session:
        simulation = session.get(Simulation, simulation_id)
        if simulation is not None:
            simulation.state, simulation.result, simulation.error, simulation.finished_at = state, result, error, utcnow()
    return state


def _stored_document(version: ProposalVersion) -> Callable[[], Any]:
    """Reads the version's stored document, called only when the parsed-document cache misses."""
    return lambda: version.document


def simulation_json(simulation: Simulation, *, with_result: bool = True) -> dict[str, Any]:
    """A simulation as the API shows it."""
    data: dict[str, Any] = {
        "id": simulation.id,
        "semester": simulation.semester,
        "state": simulation.state,
        "settings": simulation.settings,
        "queued_at": simulation.queued_at.isoformat(),
        "finished_at": simulation.finished_at.isoformat() if simulation.finished_at else None,
        "error": simulation.error,
    }
    if with_result:
        data["result"] = simulation.result
    return data
