"""Invented proposals and a stand-in engine for the service's unit tests.

The proposals are invented test input (not references). The stand-in engine
returns a well-formed ProposalResult quickly, so queue and store behaviour can be
tested without the sky computations; the integration tests use the real engine.
"""

from __future__ import annotations

import copy
import threading
from typing import Any

from feasibility.results import Finding, Level, ProposalResult, RequestResult

__all__ = ["FakeEngine", "auth", "proposal"]


def auth(token: str) -> dict[str, str]:
    """Headers carrying a bearer token (RFC 6750)."""
    return {"Authorization": f"Bearer {token}"}


def proposal(
    proposal_id: str = "T-001", *, instrument: str = "KESTREL", ra: Any = "14:30:00", dec: Any = "-30:00:00", hours: float = 3.0, semester: str = "2027A"
) -> dict[str, Any]:
    """An invented proposal with one request (fits the demo observatory)."""
    setup: dict[str, Any] = {"filter": "V"}
    band = "V"
    if instrument == "HERON":
        setup = {"grating": "R600", "slit_arcsec": 1.2, "central_wavelength_nm": 650}
    elif instrument == "OWL":
        setup, band = {"filter": "J"}, "J"
    return copy.deepcopy(
        {
            "id": proposal_id,
            "semester": semester,
            "title": "Invented test programme",
            "pi": {"name": "Test Person", "email": "test.person@example.org"},
            "requests": [
                {
                    "label": "a",
                    "target": {"name": "Invented field", "ra": ra, "dec": dec},
                    "instrument": instrument,
                    "setup": setup,
                    "brightness": {"magnitude": 16.0, "band": band},
                    "goal": {"snr": 50},
                    "hours_requested": hours,
                }
            ],
        }
    )


class FakeEngine:
    """Stands in for ``feasibility.engine.check_proposal``: counts calls, can block or fail on demand."""

    def __init__(self, level: Level = Level.FEASIBLE) -> None:
        self.level = level
        self.calls: list[str] = []
        self.gate: threading.Event | None = None
        self.error: Exception | None = None
        self._lock = threading.Lock()

    def __call__(self, proposal: Any, observatory: Any, schedule: Any) -> ProposalResult:
        with self._lock:
            self.calls.append(proposal.id)
        if self.gate is not None:
            self.gate.wait(10)
        if self.error is not None:
            raise self.error
        requests = [
            RequestResult(
                label=r.label,
                instrument=r.instrument,
                target=r.target.name,
                verdict=self.level,
                findings=[
                    Finding(check="visibility", level=self.level, message="stand-in", figures={"hours_observable": 100.0}),
                    Finding(check="moon", level=Level.FEASIBLE, message="stand-in moon", figures={}),
                ],
                figures={"hours_requested": r.hours_requested, "hours_observable": 100.0, "hours_needed": 1.5, "snr_expected": 80.0},
            )
            for r in proposal.requests
        ]
        return ProposalResult(
            proposal_id=proposal.id,
            semester=proposal.semester,
            verdict=self.level,
            requests=requests,
            engine_version="test",
            observatory=observatory.name,
            observatory_version=observatory.version,
            schedule_version=schedule.version if schedule is not None else None,
            computed_at="2027-01-01T00:00:00+00:00",
        )
