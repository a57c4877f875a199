"""Fixtures of the page tests: the stand-in engine and a store with users and checked proposals."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest
from flask import Flask

from feasibility.results import Level

from .support import StandInEngine, add_user, proposal_doc, store_checked


@pytest.fixture
def engine(app: Flask, monkeypatch: pytest.MonkeyPatch) -> Iterator[StandInEngine]:
    """Replace the engine call of the task body with the stand-in (fast, stores every plot series).

    The app's embedded workers are stopped before the stand-in is taken away, so no
    queued run reaches the real engine after the test.
    """
    stand_in = StandInEngine()
    monkeypatch.setattr("feasibility.service.runs.check", stand_in)
    yield stand_in
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


@pytest.fixture
def semester(app: Flask, people: dict[str, int], engine: StandInEngine) -> dict[str, Any]:
    """Four checked proposals in 2027A: two of pablo's, one of petra's, one unowned; one with markup in its target."""
    engine.levels.update({"P-2": Level.INFEASIBLE, "Q-1": Level.MARGINAL})
    runs = {
        "P-1": store_checked(app, proposal_doc("P-1", title="Quiet galaxies", target="NGC 0001 field", hours=4.0, ra="01:30:00"), "pablo"),
        "P-2": store_checked(app, proposal_doc("P-2", title="Bright novae", instrument="HERON", target="Nova field", hours=10.0, ra="18:10:00"), "pablo"),
        "Q-1": store_checked(
            app, proposal_doc("Q-1", title="Markup <b>test</b>", instrument="OWL", target="<script>alert(1)</script>", hours=2.0, ra="18:40:00"), "petra"
        ),
        "U-1": store_checked(app, proposal_doc("U-1", title="Unowned test", hours=1.0, ra="06:00:00"), None),
    }
    return {"runs": runs}
