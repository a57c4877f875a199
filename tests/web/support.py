"""Invented proposals, a stand-in engine that stores plot series, and helpers to fill a store for the page tests.

The proposals, people and figures here are invented test input, never
references: the tests that use them check what the pages do with stored
results (access, escaping, exports, filters), not the engine's numbers.
"""

from __future__ import annotations

import copy
import math
import re
import threading
import time
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from feasibility.results import Finding, Level, ProposalResult, RequestResult

__all__ = ["StandInEngine", "add_user", "proposal_doc", "sign_in", "store_checked", "csrf_from"]

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


class StandInEngine:
    """Stands in for ``feasibility.engine.check_proposal``; returns a result with every plot series.

    ``levels`` maps a proposal id to the verdict its requests get (default feasible);
    ``failing_check`` names the check that carries the non-feasible level; ``delay``
    makes each run take that long, and ``gate`` (an event) holds each run until it is
    set, so a page can be seen while a run is in progress.
    """

    def __init__(self) -> None:
        self.levels: dict[str, Level] = {}
        self.failing_check = "moon"
        self.delay = 0.0
        self.gate: threading.Event | None = None
        self.figure_scale: dict[str, float] = {}
        self.with_series = True
        self._lock = threading.Lock()
        self.calls: list[str] = []

    def __call__(self, proposal: Any, observatory: Any, schedule: Any) -> ProposalResult:
        with self._lock:
            self.calls.append(proposal.id)
        if self.gate is not None:
            self.gate.wait(30)
        if self.delay:
            time.sleep(self.delay)
        level = self.levels.get(proposal.id, Level.FEASIBLE)
        scale = self.figure_scale.get(proposal.id, 1.0)
        requests = []
        for r in proposal.requests:
            findings = [
                Finding(check="visibility", level=Level.FEASIBLE, message=f"{r.target.name} is up for 120 hours.",
                        figures={"hours_observable": 120.0 * scale}, method="stand-in"),
                Finding(check=self.failing_check, level=level, message=f"Stand-in {self.failing_check} finding for {r.target.name}.",
                        figures={"hours_usable": 40.0 * scale, "moon_separation_min_deg": 35.5},
                        suggestion="Ask for grey time." if level != Level.FEASIBLE else None),
            ]
            requests.append(
                RequestResult(
                    label=r.label,
                    instrument=r.instrument,
                    target=r.target.name,
                    verdict=level,
                    findings=findings,
                    figures={"hours_requested": r.hours_requested, "hours_observable": 120.0 * scale, "hours_needed": 2.5 * scale,
                             "snr_expected": 75.0 * scale, "source_rate_e_s": 1234.5, "sky_rate_e_s_pix": 3.2, "airmass_median": 1.2},
                    series=_series(r.hours_requested) if self.with_series else {},
                )
            )
        return ProposalResult(
            proposal_id=proposal.id,
            semester=proposal.semester,
            verdict=level,
            requests=requests,
            engine_version="stand-in",
            observatory=observatory.name,
            observatory_version=observatory.version,
            schedule_version=schedule.version if schedule is not None else None,
            computed_at="2027-01-01T00:00:00+00:00",
        )


def _series(hours_requested: float) -> dict[str, Any]:
    hours = [h / 4 for h in range(-28, 29)]
    nights = [f"2027-04-{d:02d}" for d in range(1, 31)]
    exposure = [60.0 * 2**k for k in range(10)]
    return {
        "night_curve": {
            "night": "2027-05-15",
            "hours_from_midnight": hours,
            "target_alt_deg": [70 * math.cos(h / 6) - 5 for h in hours],
            "moon_alt_deg": [40 * math.sin(h / 5) for h in hours],
            "sun_alt_deg": [-50 * math.cos(h / 7.6) + 5 for h in hours],
        },
        "nights": nights,
        "hours_usable": [max(0.0, 6 + 3 * math.sin(k / 4)) for k in range(len(nights))],
        "moon_illumination": [0.5 + 0.5 * math.cos(2 * math.pi * k / 29.5) for k in range(len(nights))],
        "snr_curve": {"exposure_s": exposure, "snr": [math.sqrt(t) * 2 for t in exposure]},
        "goal_snr": 50.0,
        "requested_exposure_s": hours_requested * 3600 * 0.8,
    }


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
