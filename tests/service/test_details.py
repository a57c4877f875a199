"""A stored compact result made whole again: finding figures, methods and series recomputed, or empty figures when they cannot be."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from flask import Flask

from feasibility.results import ProposalResult
from feasibility.service.details import full_result
from feasibility.service.runs import execute_run
from feasibility.service.submissions import submit
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun

from .helpers import FakeEngine, proposal


@pytest.fixture
def ctx(app: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> Iterator[Flask]:
    monkeypatch.setattr("feasibility.engine.check_proposal", fake_engine)  # the recomputation asks the same stand-in
    with app.app_context():
        yield app


def _checked(proposal_id: str) -> int:
    with session_scope() as session:
        run_id = submit(session, proposal(proposal_id), None).run.id
    assert execute_run(run_id) == "done"
    return run_id


def test_finding_figures_are_left_out_of_the_store_and_recomputed_on_demand(ctx: Flask) -> None:
    run_id = _checked("D-1")
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        assert all("figures" not in f for r in run.result["requests"] for f in r["findings"])
        whole = full_result(session, run)
    assert whole is not None
    findings = whole["requests"][0]["findings"]
    assert [f["figures"] for f in findings] == [{"hours_observable": 100.0}, {}]  # what the stand-in engine gives
    ProposalResult.model_validate(whole)


def test_finding_figures_that_cannot_be_recomputed_are_given_empty(ctx: Flask) -> None:
    run_id = _checked("D-2")
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        run.engine_version = "0.0.1"  # made by an engine this service no longer runs: nothing is recomputed
        whole = full_result(session, run)
    assert whole is not None
    findings = whole["requests"][0]["findings"]
    assert [(f["check"], f["message"], f["figures"]) for f in findings] == [("visibility", "stand-in", {}), ("moon", "stand-in moon", {})]
    assert "series" not in whole["requests"][0]
    ProposalResult.model_validate(whole)


def test_a_compact_result_stored_with_its_finding_figures_keeps_them(ctx: Flask) -> None:
    run_id = _checked("D-3")
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        result = dict(run.result)  # as compact results were stored before finding figures were left out
        request = dict(result["requests"][0])
        request["findings"] = [{**f, "figures": {"stored": 1.0}} for f in request["findings"]]
        result["requests"] = [request]
        run.result = result
        whole = full_result(session, run)
    assert whole is not None
    assert [f["figures"] for f in whole["requests"][0]["findings"]] == [{"stored": 1.0}, {"stored": 1.0}]
