"""Fixtures of the page tests: the real engine (behind a gate), a private sky-grid cache, users and a checked semester.

Every run in these tests is computed by the real engine. The sky grid of 2027A is
built once per test session in a temporary FEASIBILITY_CACHE_DIR (and kept in the
process), so after the first check each one takes milliseconds.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from flask import Flask

from .support import GatedEngine, add_user, demo_doc, engine_result, private_grid_cache, proposal_doc, store_checked

#: An invented proposal whose title and target carry markup; unowned (submitted without a user).
MARKUP_DOC = proposal_doc("M-1", title="Markup <b>test</b>", target="<script>alert(1)</script>", hours=1.0, ra="06:00:00")


@pytest.fixture(scope="session", autouse=True)
def grid_cache_dir(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    """A session-wide FEASIBILITY_CACHE_DIR so the page tests never touch the user's cache."""
    with private_grid_cache(tmp_path_factory.getbasetemp()) as directory:
        yield directory


@pytest.fixture
def engine(app: Flask, monkeypatch: pytest.MonkeyPatch) -> Iterator[GatedEngine]:
    """The real engine, wrapped so a test can count its calls or hold runs back with a gate.

    The app's embedded workers are stopped before the wrapper is taken away.
    """
    wrapper = GatedEngine()
    monkeypatch.setattr("feasibility.service.runs.check", wrapper)
    yield wrapper
    if wrapper.gate is not None:
        wrapper.gate.set()
    dispatcher = app.extensions["feasibility.dispatch"]
    if hasattr(dispatcher, "shutdown"):
        dispatcher.shutdown()


@pytest.fixture
def people(app: Flask) -> dict[str, int]:
    """A reviewer, an admin and two proposers, by name."""
    return {
        "rita": add_user(app, "rita", "reviewer"),
        "ada": add_user(app, "ada", "admin"),
        "pablo": add_user(app, "pablo", "proposer"),
        "petra": add_user(app, "petra", "proposer"),
    }


@pytest.fixture(scope="session")
def semester_documents() -> dict[str, dict[str, Any]]:
    """The documents of the checked semester, by proposal id."""
    return {
        "SQ-2027A-001": demo_doc("001"),  # feasible (its header): KESTREL, 4 + 3.5 h, RA 13h25m
        "SQ-2027A-002": demo_doc("002"),  # infeasible (sensitivity): HERON, 6 h, RA 19h45m
        "SQ-2027A-005": demo_doc("005"),  # marginal: OWL, 1 + 2.5 + 2 h, RA 17h46m
        "M-1": MARKUP_DOC,  # KESTREL, 1 h, RA 6h
    }


@pytest.fixture(scope="session")
def expected(semester_documents: dict[str, dict[str, Any]], grid_cache_dir: Path) -> dict[str, Any]:
    """The real engine's results for the semester's documents, computed directly: the reference of the page tests."""
    return {proposal_id: engine_result(document) for proposal_id, document in semester_documents.items()}


@pytest.fixture
def semester(app: Flask, people: dict[str, int], engine: GatedEngine, semester_documents: dict[str, dict[str, Any]]) -> dict[str, Any]:
    """Four proposals in 2027A checked by the real engine: pablo's 001 and 002, petra's 005, and the unowned M-1 (markup)."""
    owners = {"SQ-2027A-001": "pablo", "SQ-2027A-002": "pablo", "SQ-2027A-005": "petra", "M-1": None}
    runs = {proposal_id: store_checked(app, document, owners[proposal_id]) for proposal_id, document in semester_documents.items()}
    return {"runs": runs}
