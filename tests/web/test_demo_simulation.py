"""``serve --demo`` asks for one simulation of the demo semester, sent only once no check run waits (SQLite and PostgreSQL)."""

from __future__ import annotations

import json
import threading

import pytest
from flask import Flask
from sqlalchemy import select

from feasibility.cli.demo import ask_demo_simulation, wait_for_check_runs
from feasibility.service.dispatch import enqueue
from feasibility.service.submissions import submit
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, Simulation
from tests.simulation_apps import simulation_grid_cache  # noqa: F401 (a fixture)

from .support import demo_doc

pytestmark = pytest.mark.usefixtures("simulation_grid_cache")


def _thread(name: str) -> threading.Thread | None:
    return next((t for t in threading.enumerate() if t.name == name), None)


def test_the_demo_simulation_waits_for_the_check_runs(app: Flask) -> None:
    with app.app_context():
        with session_scope() as session:
            run_id = submit(session, json.dumps(demo_doc("001")).encode(), None, reason="demo").run.id  # queued, not sent
        simulation_id = ask_demo_simulation(realisations=20)
        assert simulation_id is not None
        waiter = _thread(f"feasibility-demo-simulation-{simulation_id}")
        assert waiter is not None and waiter.is_alive()
        assert wait_for_check_runs(poll_s=0, at_most_s=0) is False  # the run still waits
        with session_scope(read_only=True) as session:
            assert session.get(Simulation, simulation_id).state == "queued"

        enqueue([run_id])  # the embedded pool computes the run; then the waiter sends the simulation
        waiter.join(300)
        assert not waiter.is_alive()
        worker = _thread(f"feasibility-simulation-{simulation_id}")
        if worker is not None:
            worker.join()
        with session_scope(read_only=True) as session:
            simulation, run = session.get(Simulation, simulation_id), session.get(CheckRun, run_id)
            assert run.state == "done" and simulation.state == "done", simulation.error
            assert simulation.settings["realisations"] == 20 and simulation.semester == "2027A"
            assert simulation.started_at >= run.finished_at  # it ran after the check run finished
            assert [row["proposal_id"] for row in simulation.result["proposals"]] == ["SQ-2027A-001"]
        assert ask_demo_simulation(realisations=20) is None  # a later start leaves the finished one alone
        with session_scope(read_only=True) as session:
            assert len(session.scalars(select(Simulation)).all()) == 1
