"""Fixtures for the re-check tests: a fresh store (SQLite and PostgreSQL) with the demo observatory, and invented proposals."""

from __future__ import annotations

import copy
import json
from collections.abc import Iterator
from datetime import timedelta
from importlib import resources
from typing import Any

import pytest
import yaml
from sqlalchemy.orm import Session

from feasibility.store import db
from feasibility.store.models import Base, CheckRun, utcnow


@pytest.fixture
def store(database_url: str) -> Iterator[str]:
    """A fresh store (a new SQLite file, or the emptied PostgreSQL test database) as the process default, with the demo observatory and schedule."""
    url = database_url
    engine = db.configure(url)
    Base.metadata.create_all(engine)
    from feasibility.service.current import seed_demo

    with db.session_scope() as session:
        seed_demo(session)
    yield url
    engine.dispose()


@pytest.fixture
def demo_schedule() -> dict[str, Any]:
    """The demo schedule of 2027A as a mapping, to edit."""
    text = (resources.files("feasibility") / "data" / "schedule-2027A.yaml").read_text()
    return json.loads(json.dumps(yaml.safe_load(text), default=str))


@pytest.fixture
def demo_observatory() -> dict[str, Any]:
    text = (resources.files("feasibility") / "data" / "observatory.yaml").read_text()
    return json.loads(json.dumps(yaml.safe_load(text), default=str))  # dates as ISO text, as a JSON body has them


#: One request setup per demo instrument (invented proposals; the setups exist in the demo observatory).
SETUPS: dict[str, dict[str, Any]] = {
    "KESTREL": {"filter": "V"},
    "HERON": {"grating": "R600", "slit_arcsec": 1.2, "central_wavelength_nm": 650},
    "OWL": {"filter": "J"},
}
BANDS = {"KESTREL": "V", "HERON": "V", "OWL": "J"}


def make_proposal(proposal_id: str, *instruments: str, hours: float = 2.0, magnitude: float = 15.0) -> dict[str, Any]:
    """An invented proposal with one request per instrument, on a target well placed in 2027A from the demo site."""
    requests = []
    for i, name in enumerate(instruments):
        requests.append(
            {
                "label": f"{name.lower()}-{i}",
                # RA 15h, Dec -40: transits near local midnight in May from latitude -26 (invented target).
                "target": {"name": f"Invented star {proposal_id}-{i}", "ra": "15:00:00", "dec": "-40:00:00"},
                "instrument": name,
                "setup": copy.deepcopy(SETUPS[name]),
                "brightness": {"magnitude": magnitude, "band": BANDS[name]},
                "goal": {"snr": 20},
                "hours_requested": hours,
            }
        )
    return {
        "id": proposal_id,
        "semester": "2027A",
        "title": f"Invented proposal {proposal_id}",
        "pi": {"name": "A. Nobody", "email": "nobody@example.org"},
        "requests": requests,
    }


def submit_done(session: Session, document: dict[str, Any], verdict: str = "feasible", finished_days_ago: float = 0.0) -> CheckRun:
    """Submit ``document`` and mark its run done (no engine needed), as if checked ``finished_days_ago``."""
    from feasibility.service.submissions import submit

    run = submit(session, document, None).run
    finished = utcnow() - timedelta(days=finished_days_ago)
    run.state, run.verdict, run.finished_at = "done", verdict, finished
    run.result = {
        "proposal_id": document["id"],
        "verdict": verdict,
        "requests": [
            {"label": r["label"], "instrument": r["instrument"], "target": r["target"]["name"], "verdict": verdict, "figures": {"hours_observable": 40.0}}
            for r in document["requests"]
        ],
    }
    session.flush()
    return run


@pytest.fixture
def proposal() -> Any:
    """:func:`make_proposal`, as a fixture."""
    return make_proposal


@pytest.fixture
def done() -> Any:
    """:func:`submit_done`, as a fixture."""
    return submit_done
