"""One standing verdict everywhere, also when two runs finish out of the order they were queued in.

The scenario: version 1 of a proposal is checked; a re-check of version 1 against a
newer observatory description is queued; the proposer submits version 2, whose run
is made after the re-check (higher run id) but finishes first; the re-check of the
old version finishes last. The verdict that stands is version 2's (the rule in
feasibility/store/standing.py): the API, the list page, the proposal page, the
exports, the overview, the review module, the printable report and the change
notices must all say so.

References: the verdicts are the real engine's for the same documents
(``engine_result``); demo proposal 001 is feasible and 002 infeasible (their headers).
"""

from __future__ import annotations

import csv
import io
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from .support import GatedEngine, demo_doc, engine_result, sign_in, store_checked

PROPOSAL = "SQ-2027A-001"


def _out_of_order(app: Flask) -> dict[str, Any]:
    """Store the scenario; the run ids and the engine's verdicts of both versions."""
    from feasibility.service.current import add_observatory_version, current_observatory, current_schedule, observatory_of
    from feasibility.service.runs import execute_run
    from feasibility.service.submissions import ensure_run
    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun

    old_doc = demo_doc("001")
    new_doc = demo_doc("002", id=PROPOSAL)  # version 2: another document under the same proposal id
    first = store_checked(app, old_doc, "pablo")
    with app.app_context(), session_scope() as session:
        observatory = observatory_of(current_observatory(session))
        newer = add_observatory_version(session, observatory.model_copy(update={"version": observatory.version + "-b"}))
        old_version = session.get(CheckRun, first).proposal_version
        recheck, created = ensure_run(session, old_version, newer, current_schedule(session, "2027A"), reason="observatory re-check")
        assert created
        recheck_id = recheck.id
    new = store_checked(app, new_doc, "pablo")
    with app.app_context():
        assert execute_run(recheck_id) == "done"
        with session_scope(read_only=True) as session:
            runs = {run.id: run for run in session.query(CheckRun).filter(CheckRun.id.in_((first, recheck_id, new)))}
            # The scenario holds: the re-check was queued before the new version's run and finished after it.
            assert recheck_id < new
            assert runs[recheck_id].finished_at > runs[new].finished_at
            assert {run.state for run in runs.values()} == {"done"}
            verdicts = {run_id: run.verdict for run_id, run in runs.items()}
    old_verdict, new_verdict = engine_result(old_doc).verdict.value, engine_result(new_doc).verdict.value
    assert (old_verdict, new_verdict) == ("feasible", "infeasible")  # demo 001's and 002's headers
    assert verdicts == {first: old_verdict, recheck_id: old_verdict, new: new_verdict}
    return {"first": first, "recheck": recheck_id, "new": new, "old_verdict": old_verdict, "new_verdict": new_verdict}


def test_every_reader_gives_the_newest_versions_verdict(app: Flask, client: FlaskClient, people: dict[str, int], engine: GatedEngine, make_token: Any) -> None:
    s = _out_of_order(app)
    new, verdict = s["new"], s["new_verdict"]

    # API: the proposal and the list.
    headers = {"Authorization": f"Bearer {make_token('reviewer', 'rita')}"}
    view = client.get(f"/api/v1/proposals/{PROPOSAL}", headers=headers).get_json()
    assert view["verdict"] == verdict and view["result"]["id"] == new
    items = client.get("/api/v1/proposals?semester=2027A", headers=headers).get_json()["items"]
    assert [(i["proposal_id"], i["verdict"], i["run_id"]) for i in items] == [(PROPOSAL, verdict, new)]
    assert client.get(f"/api/v1/proposals?verdict={verdict}", headers=headers).get_json()["total"] == 1
    assert client.get(f"/api/v1/proposals?verdict={s['old_verdict']}", headers=headers).get_json()["total"] == 0

    # The list page: its verdict filter finds the proposal under the standing verdict only.
    sign_in(client, "rita")
    assert PROPOSAL in client.get(f"/proposals?semester=2027A&verdict={verdict}").get_data(as_text=True)
    assert PROPOSAL not in client.get(f"/proposals?semester=2027A&verdict={s['old_verdict']}").get_data(as_text=True)

    # The exports.
    rows = list(csv.DictReader(io.StringIO(client.get("/proposals.csv?semester=2027A").get_data(as_text=True))))
    assert [(r["proposal_id"], r["verdict"], r["run_id"]) for r in rows] == [(PROPOSAL, verdict, str(new))]
    exported = client.get("/proposals.json?semester=2027A").get_json()["proposals"]
    assert [(p["verdict"], p["run_id"]) for p in exported] == [(verdict, new)]
    # "Changed": compared with the finished run before it in the same order (the old version's re-check).
    assert exported[0]["previous_verdict"] == s["old_verdict"] and exported[0]["verdict_changed"] is True

    # The proposal page shows the standing run; the printable report too.
    assert f'#{new} <span class="shown">(shown)</span>' in client.get(f"/proposals/{PROPOSAL}").get_data(as_text=True)
    assert f"Check run #{new}," in client.get(f"/proposals/{PROPOSAL}/report").get_data(as_text=True)

    # The overview counts it under the standing verdict; the review module reads the same run.
    from sqlalchemy import select

    from feasibility.service.review import review_of
    from feasibility.store.db import session_scope
    from feasibility.store.models import ProposalRecord
    from feasibility.web.dashboard.overview import semester_overview

    with app.app_context(), session_scope(read_only=True) as session:
        counts = semester_overview(session, "2027A").counts
        assert counts[verdict] == 1 and sum(counts.values()) == 1
        record = session.scalars(select(ProposalRecord).where(ProposalRecord.proposal_id == PROPOSAL)).one()
        assert review_of(session, record).engine_verdict == verdict


def test_a_late_recheck_of_an_old_version_records_no_change(app: Flask, people: dict[str, int], engine: GatedEngine) -> None:
    from sqlalchemy import select

    from feasibility.store.db import session_scope
    from feasibility.store.models import VerdictChange

    s = _out_of_order(app)
    with app.app_context(), session_scope(read_only=True) as session:
        changes = [(c.previous_run_id, c.run_id, c.verdict_before, c.verdict_after) for c in session.scalars(select(VerdictChange))]
    # Version 2's run changed the standing verdict (compared with version 1's check); the late re-check of
    # version 1 changed nothing that stands, so it records nothing (and no notice goes out).
    assert changes == [(s["first"], s["new"], s["old_verdict"], s["new_verdict"])]
