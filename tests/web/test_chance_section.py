"""The chance of completion on the dashboard: the semester overview and a proposal's page, on SQLite and PostgreSQL.

The figures shown must be those of the stored simulation (computed by the real engine,
tested against outside references in tests/engine/test_simulate.py); proposers never see it.
"""

from __future__ import annotations

import html

import pytest
from flask import Flask

from feasibility.service.simulations import SimulationSettings, ask_for_simulation, execute_simulation
from feasibility.store.db import session_scope
from feasibility.store.models import Simulation
from tests.simulation_apps import simulation_grid_cache  # noqa: F401 (a fixture)

from .support import add_user, demo_doc, sign_in, store_checked

pytestmark = pytest.mark.usefixtures("simulation_grid_cache")


def _simulate(app: Flask) -> dict:
    with app.app_context():
        with session_scope() as session:
            simulation_id = ask_for_simulation(session, "2027A", SimulationSettings(realisations=80, seed=5), None).id
        assert execute_simulation(simulation_id) == "done"
        with session_scope() as session:
            return session.get(Simulation, simulation_id).result


def _semester(app: Flask) -> None:
    add_user(app, "rita", "reviewer")
    add_user(app, "pablo", "proposer")
    store_checked(app, demo_doc("001"), "pablo")
    store_checked(app, demo_doc("005"), "pablo")


def test_the_overview_shows_the_latest_simulation(app: Flask) -> None:
    _semester(app)
    reviewer = app.test_client()
    sign_in(reviewer, "rita")
    before = reviewer.get("/semesters/2027A").get_data(as_text=True)
    assert "Chance of completion" in before and "No finished simulation of this semester yet" in before

    result = _simulate(app)
    page = html.unescape(reviewer.get("/semesters/2027A").get_data(as_text=True))
    assert "No finished simulation of this semester yet" not in page
    for row in result["proposals"]:
        assert row["proposal_id"] in page
        assert f"{100 * row['chance_of_completion']:.0f} %" in page
    for row in result["time"]:
        assert f"{row['hours_offered']:.1f}" in page


def test_a_proposal_page_shows_its_chance_to_reviewers_only(app: Flask) -> None:
    _semester(app)
    reviewer = app.test_client()
    sign_in(reviewer, "rita")
    assert "Chance of completion" not in reviewer.get("/proposals/SQ-2027A-005").get_data(as_text=True)  # none simulated yet
    result = _simulate(app)
    own = html.unescape(reviewer.get("/proposals/SQ-2027A-005").get_data(as_text=True))
    line = next(row for row in result["proposals"] if row["proposal_id"] == "SQ-2027A-005")
    assert "Chance of completion" in own
    assert f"all requests are done in {100 * line['chance_of_completion']:.0f} %" in own
    for row in (r for r in result["requests"] if r["proposal_id"] == "SQ-2027A-005"):
        assert row["label"] in own and f"{row['hours_to_obtain']:.1f}" in own

    proposer = app.test_client()
    sign_in(proposer, "pablo")
    assert "Chance of completion" not in proposer.get("/proposals/SQ-2027A-005").get_data(as_text=True)
    assert proposer.get("/semesters/2027A").status_code == 403


def test_an_infeasible_request_is_shown_as_not_simulated(app: Flask) -> None:
    _semester(app)
    store_checked(app, demo_doc("002"), "pablo")  # the demo's infeasible proposal (the engine's verdict, asserted below)
    reviewer = app.test_client()
    sign_in(reviewer, "rita")
    result = _simulate(app)
    rows = [row for row in result["requests"] if row["proposal_id"] == "SQ-2027A-002"]
    assert rows and all(not row["dispatched"] and row["chance_of_completion"] == 0.0 for row in rows)
    page = html.unescape(reviewer.get("/proposals/SQ-2027A-002").get_data(as_text=True))
    assert "Not simulated: the engine found it infeasible" in page
    overview = html.unescape(reviewer.get("/semesters/2027A").get_data(as_text=True))
    assert f"{len(rows)} infeasible request{'' if len(rows) == 1 else 's'}, not simulated" in overview
