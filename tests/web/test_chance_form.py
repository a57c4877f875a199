"""Asking for a semester simulation from the overview's form, on SQLite and PostgreSQL.

The form goes through the same service as the API (stored, then computed by the real
engine in a thread of the app); the figures checked are those of the stored results.
"""

from __future__ import annotations

import html
import re
import threading

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import select

from feasibility.service.simulations import SimulationSettings, ask_for_simulation
from feasibility.store.db import session_scope
from feasibility.store.models import Simulation
from tests.simulation_apps import simulation_grid_cache  # noqa: F401 (a fixture)

from .support import add_user, csrf_from, demo_doc, sign_in, store_checked

pytestmark = pytest.mark.usefixtures("simulation_grid_cache")

PAGE = "/semesters/2027A"
FORM = "/semesters/2027A/simulations"


def _semester(app: Flask) -> FlaskClient:
    """Two checked proposals of 2027A (pablo's), and a reviewer signed in."""
    add_user(app, "rita", "reviewer")
    add_user(app, "pablo", "proposer")
    store_checked(app, demo_doc("001"), "pablo")
    store_checked(app, demo_doc("005"), "pablo")
    reviewer = app.test_client()
    sign_in(reviewer, "rita")
    return reviewer


def _ask(client: FlaskClient, **fields: str):  # type: ignore[no-untyped-def]
    token = csrf_from(client.get(PAGE).get_data(as_text=True))
    return client.post(FORM, data={"csrf_token": token, **fields})


def _simulations(app: Flask) -> list[Simulation]:
    with app.app_context(), session_scope(read_only=True) as session:
        rows = list(session.scalars(select(Simulation).order_by(Simulation.id)))
        session.expunge_all()
        return rows


def _finish(app: Flask, simulation_id: int) -> Simulation:
    """Wait for the thread computing the simulation (send_simulation's, without a broker) and return it."""
    for thread in threading.enumerate():
        if thread.name == f"feasibility-simulation-{simulation_id}":
            thread.join()
    row = next(s for s in _simulations(app) if s.id == simulation_id)
    assert row.state == "done", row.error
    return row


def test_the_form_asks_for_a_simulation_with_ranks(app: Flask) -> None:
    reviewer = _semester(app)
    page = reviewer.get(PAGE).get_data(as_text=True)
    assert 'action="/semesters/2027A/simulations"' in page and 'name="ranks"' in page
    response = _ask(reviewer, realisations="40", seed="7", hours="requested", ranks="SQ-2027A-005 1\n\nSQ-2027A-001, 2.5\n")
    assert response.status_code == 302 and response.headers["Location"].endswith("/semesters/2027A#chance-heading")
    (stored,) = _simulations(app)
    assert stored.settings == {"realisations": 40, "seed": 7, "hours": "requested", "ranks": {"SQ-2027A-005": 1.0, "SQ-2027A-001": 2.5}}
    done = _finish(app, stored.id)
    assert {row["proposal_id"]: row["rank"] for row in done.result["proposals"]} == {"SQ-2027A-005": 1.0, "SQ-2027A-001": 2.5}
    shown = html.unescape(reviewer.get(PAGE).get_data(as_text=True))
    assert f"Simulation #{stored.id}" in shown and "2 proposals ranked" in shown
    assert "SQ-2027A-005 1\nSQ-2027A-001 2.5" in shown  # the form starts from the latest settings, to edit and run again
    assert "Change since" not in shown  # one finished simulation: nothing to compare with


def test_a_simulation_under_way_is_shown_as_such(app: Flask) -> None:
    reviewer = _semester(app)
    with app.app_context(), session_scope() as session:
        queued = ask_for_simulation(session, "2027A", SimulationSettings(realisations=30, ranks={"SQ-2027A-001": 1}), None).id
    page = reviewer.get(PAGE).get_data(as_text=True)
    assert f"Simulation #{queued} is queued" in page and "No finished simulation of this semester yet" in page
    assert "SQ-2027A-001 1" in page  # the form starts from the settings of the one under way


def test_proposers_and_forged_posts_are_refused(app: Flask) -> None:
    reviewer = _semester(app)
    proposer = app.test_client()
    sign_in(proposer, "pablo")
    token = csrf_from(proposer.get("/proposals").get_data(as_text=True))
    assert proposer.post(FORM, data={"csrf_token": token, "realisations": "10"}).status_code == 403
    assert reviewer.post(FORM, data={"realisations": "10"}).status_code == 400  # no CSRF token
    assert app.test_client().post(FORM, data={"realisations": "10"}).status_code in (302, 400)  # not signed in
    assert _simulations(app) == []


@pytest.mark.parametrize(
    ("fields", "field", "words"),
    [
        ({"realisations": "0"}, "realisations", "must be at least 1 and at most 20000"),
        ({"realisations": "20001"}, "realisations", "must be at least 1 and at most 20000"),
        ({"realisations": "many"}, "realisations", "whole number"),
        ({"seed": "-1"}, "seed", "at least 0"),
        ({"hours": "all"}, "hours", "all"),
        ({"ranks": "SQ-2027A-001 first"}, "ranks", "line 1: the rank of SQ-2027A-001 must be a number"),
        ({"ranks": "SQ-2027A-001 1\nSQ-2099A-404 2"}, "ranks", "line 2: the semester has no proposal 'SQ-2099A-404'"),
        ({"ranks": "SQ-2027A-001 1 2"}, "ranks", "line 1: write a proposal id and its rank"),
        ({"ranks": "SQ-2027A-001 1\nSQ-2027A-001 2"}, "ranks", "line 2: SQ-2027A-001 is ranked twice"),
    ],
)
def test_bad_input_is_shown_back_naming_the_field(app: Flask, fields: dict[str, str], field: str, words: str) -> None:
    reviewer = _semester(app)
    response = _ask(reviewer, **{"realisations": "20", "seed": "1", "hours": "needed", **fields})
    page = html.unescape(response.get_data(as_text=True))
    assert response.status_code == 422
    assert "The simulation was not asked for" in page
    assert re.search(rf"<code>{field}</code></th><td>[^<]*{re.escape(words)}", page), page[page.find("problems") :][:800]
    for value in fields.values():
        assert value in page  # what was sent is shown back to correct
    assert _simulations(app) == []


def test_the_change_column_shows_how_each_chance_moved(app: Flask) -> None:
    reviewer = _semester(app)
    first = _ask(reviewer, realisations="60", seed="2", hours="needed", ranks="SQ-2027A-001 1\nSQ-2027A-005 2")
    assert first.status_code == 302
    _finish(app, _simulations(app)[-1].id)
    second = _ask(reviewer, realisations="60", seed="2", hours="needed", ranks="SQ-2027A-005 1\nSQ-2027A-001 2")
    assert second.status_code == 302
    older, newer = _simulations(app)[0], _finish(app, _simulations(app)[-1].id)

    page = html.unescape(reviewer.get(PAGE).get_data(as_text=True))
    assert f"Change since #{older.id}" in page
    before = {row["proposal_id"]: row["chance_of_completion"] for row in older.result["proposals"]}
    for row in newer.result["proposals"]:
        # The difference of the two percentages as shown, each rounded to a whole percent.
        moved = round(100 * row["chance_of_completion"]) - round(100 * before[row["proposal_id"]])
        expected = "±0" if moved == 0 else f"{moved:+d}"
        assert f'data-change="{row["proposal_id"]}">{expected}</td>' in page
