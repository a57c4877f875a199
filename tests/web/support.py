"""Invented proposals, the real engine behind a gate, and helpers to fill a store for the page tests.

The pages are tested on what the real engine (``feasibility.engine.check_proposal``)
stores for invented proposals (the packaged demo proposals and a few made here)
against the invented demo observatory and its 2027A schedule. The reference of each
page assertion is the engine's own result for the same document (``engine_result``):
the pages must show what was computed. The invented inputs are never references.
"""

from __future__ import annotations

import copy
import os
import re
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from importlib import resources
from pathlib import Path
from typing import Any

import yaml
from flask import Flask
from flask.testing import FlaskClient

from feasibility.results import ProposalResult

__all__ = [
    "GatedEngine",
    "add_user",
    "csrf_from",
    "demo_doc",
    "engine_result",
    "private_grid_cache",
    "proposal_doc",
    "sign_in",
    "store_checked",
]

PASSWORD = "correct horse battery staple"


def proposal_doc(
    proposal_id: str,
    *,
    title: str = "Invented survey of nearby fields",
    target: str = "Invented field",
    instrument: str = "KESTREL",
    ra: Any = "14:30:00",
    dec: Any = "-30:00:00",
    hours: float = 3.0,
    semester: str = "2027A",
    pi: str = "Invented Person",
    requests: int = 1,
) -> dict[str, Any]:
    """An invented proposal fitting the demo observatory (one or more requests on the same setup)."""
    setup: dict[str, Any] = {"filter": "V"}
    band = "V"
    if instrument == "HERON":
        setup = {"grating": "R600", "slit_arcsec": 1.2, "central_wavelength_nm": 650}
    elif instrument == "OWL":
        setup, band = {"filter": "J"}, "J"
    items = [
        {
            "label": chr(ord("a") + k),
            "target": {"name": target if k == 0 else f"{target} {k + 1}", "ra": ra, "dec": dec},
            "instrument": instrument,
            "setup": setup,
            "brightness": {"magnitude": 16.0, "band": band},
            "goal": {"snr": 50},
            "hours_requested": hours,
        }
        for k in range(requests)
    ]
    return copy.deepcopy(
        {
            "id": proposal_id,
            "semester": semester,
            "title": title,
            "pi": {"name": pi, "email": "invented.person@example.org"},
            "requests": items,
        }
    )


class GatedEngine:
    """Wraps the real ``feasibility.engine.check_proposal``: counts its calls and can hold them back.

    ``gate`` (an event), when set on the wrapper, holds each run until the event is
    set, so a page can be seen while a run is in progress; the result is always the
    real engine's.
    """

    def __init__(self) -> None:
        self.gate: threading.Event | None = None
        self._lock = threading.Lock()
        self.calls: list[str] = []

    def __call__(self, proposal: Any, observatory: Any, schedule: Any) -> ProposalResult:
        from feasibility.engine import check_proposal

        with self._lock:
            self.calls.append(proposal.id)
        gate = self.gate
        if gate is not None:
            gate.wait(30)
        return check_proposal(proposal, observatory, schedule)


def demo_doc(number: str, **changes: Any) -> dict[str, Any]:
    """A packaged demo proposal (``"001"`` .. ``"007"``) as a dict, with top-level ``changes`` applied.

    Their header comments give their verdicts: 001 feasible, 005 marginal, the others infeasible.
    """
    path = resources.files("feasibility") / "data" / "proposals" / f"SQ-2027A-{number}.yaml"
    document: dict[str, Any] = yaml.safe_load(path.read_text(encoding="utf-8"))
    document.update(changes)
    return document


def engine_result(document: dict[str, Any]) -> ProposalResult:
    """What the real engine makes of ``document`` against the demo observatory and 2027A schedule (the tests' reference)."""
    from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document
    from feasibility.engine import check_proposal

    data = resources.files("feasibility") / "data"
    observatory = load_document(Observatory, Path(str(data / "observatory.yaml")))
    schedule = load_document(InstrumentSchedule, Path(str(data / "schedule-2027A.yaml")))
    return check_proposal(parse_document(Proposal, document, "proposal"), observatory, schedule)


@contextmanager
def private_grid_cache(base: Path) -> Iterator[Path]:
    """Point FEASIBILITY_CACHE_DIR (sky grids, semester offers) at a directory under ``base`` for the duration.

    ``base`` is the test session's base temporary directory, so the page tests and the
    browser tests share one directory, and with it the engine's in-process grid cache
    (keyed by the directory).
    """
    directory = base / "page-tests-cache"
    directory.mkdir(exist_ok=True)
    previous = os.environ.get("FEASIBILITY_CACHE_DIR")
    os.environ["FEASIBILITY_CACHE_DIR"] = str(directory)
    try:
        yield directory
    finally:
        if previous is None:
            os.environ.pop("FEASIBILITY_CACHE_DIR", None)
        else:
            os.environ["FEASIBILITY_CACHE_DIR"] = previous


def add_user(app: Flask, name: str, role: str, password: str = PASSWORD) -> int:
    """Store a user with a password; their id.

    The hash is a quick PBKDF2 one (werkzeug reads any method it wrote), so tests
    do not spend a third of a second per user on the default scrypt.
    """
    from werkzeug.security import generate_password_hash

    from feasibility.store.db import session_scope
    from feasibility.web.auth import create_user

    with app.app_context(), session_scope() as session:
        user = create_user(session, name, role)
        user.password_hash = generate_password_hash(password, method="pbkdf2:sha256:1000")
        return user.id


def store_checked(app: Flask, document: dict[str, Any], owner: str | None) -> int:
    """Submit ``document`` (as ``owner``, or unowned) and run its check now, in this thread; the run id."""
    from sqlalchemy import select

    from feasibility.service.runs import execute_run
    from feasibility.service.submissions import submit
    from feasibility.store.db import session_scope
    from feasibility.store.models import User

    with app.app_context():
        with session_scope() as session:
            user = session.scalars(select(User).where(User.name == owner)).one() if owner else None
            run_id = submit(session, document, user).run.id
        assert execute_run(run_id) in ("done", "skipped")
    return run_id


def csrf_from(html: str) -> str:
    """The CSRF token of the first form on a page."""
    match = re.search(r'name="csrf_token" value="([^"]+)"', html)
    assert match, "no CSRF token on the page"
    return match.group(1)


def sign_in(client: FlaskClient, name: str, password: str = PASSWORD) -> None:
    """Sign ``client`` in through the real form."""
    token = csrf_from(client.get("/sign-in").get_data(as_text=True))
    response = client.post("/sign-in", data={"name": name, "password": password, "csrf_token": token})
    assert response.status_code == 302, response.get_data(as_text=True)
