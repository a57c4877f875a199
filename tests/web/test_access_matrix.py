"""Every role against every endpoint and page: the answers follow the one access table plus who owns what.

The expected answer of each call is derived from :data:`feasibility.service.access.TABLE`
and the ownership the fixture sets up (who owns or submitted each proposal), never
from the code under test: a caller without valid credentials gets 401 (the API) or is
sent to the sign-in page (the pages); a role the table refuses gets 403; a proposal
that is not the caller's (and their role does not see every proposal) is answered as
if it did not exist (404); anything else gets the endpoint's own answer. Callers:
a reviewer, an admin, proposers A and B (each owns one proposal), portals 1 and 2
(each submitted one), no token, a malformed token and a revoked token (for the pages:
no session, a forged cookie and a signed-out session's cookie; portals cannot sign in).

The app's url_map is enumerated: an endpoint without an entry in :data:`CASES` fails
:func:`test_every_endpoint_has_an_entry`, as does an entry whose action differs from the
one the view itself declares. Bodies sent by the allowed callers are refused on their
content (4xx naming a field) wherever a success would start engine work, so the test
checks the gate without computing anything new. CSRF has its own tests
(test_csrf.py); it is off here so each page answer is the access rule's.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import select

from feasibility.service import access

from .support import GatedEngine, add_user, proposal_doc, sign_in, store_checked

#: The view is open to everyone (no credentials needed).
PUBLIC = "public"
#: The view needs valid credentials, whatever the role.
ANY = None

#: The proposals of the world and who submitted each (a proposer owns what they submit; a portal's stay unowned).
PROPOSALS = {
    "A-1": "anna",  # proposer A's
    "B-1": "ben",  # proposer B's
    "P1-1": "portal-1",  # submitted by portal 1 for nobody in particular
    "P2-1": "portal-2",  # submitted by portal 2
}
#: The people: name -> role.
PEOPLE = {"rita": "reviewer", "ada": "admin", "anna": "proposer", "ben": "proposer", "portal-1": "portal", "portal-2": "portal", "retired": "admin"}
#: The callers walked: name -> the user they are (None: no valid credentials).
CALLERS = {
    "reviewer": "rita",
    "admin": "ada",
    "proposer A": "anna",
    "proposer B": "ben",
    "portal 1": "portal-1",
    "portal 2": "portal-2",
    "no token": None,
    "malformed token": None,
    "revoked token": None,
}


@dataclass(frozen=True)
class Case:
    """One call of one endpoint: how to make it, which actions of the table it needs, and the answer when allowed."""

    endpoint: str
    method: str
    path: str  # formatted with {proposal}, {run}, {simulation}, {token}
    actions: tuple[str | None, ...]  # the first is the view's own; all must be allowed
    ok: int
    scoped: bool = False  # on one proposal: walked for each of PROPOSALS; hidden ones answer `hidden`
    hidden: int = 404
    body: Any = None  # JSON for the API, form fields for the pages
    page: bool = False
    targets: tuple[str, ...] = tuple(PROPOSALS)  # the proposals a scoped case is walked on


def _api(endpoint: str, method: str, path: str, action: str | None, ok: int, **more: Any) -> Case:
    extra = more.pop("also", ())
    return Case(endpoint, method, "/api/v1" + path, (action, *extra), ok, **more)


def _page(endpoint: str, method: str, path: str, action: str | None, ok: int, **more: Any) -> Case:
    return Case(endpoint, method, path, (action,), ok, page=True, **more)


A = access
CASES: list[Case] = [
    # --- the API -----------------------------------------------------------------------------------
    _api("api.health", "get", "/health", PUBLIC, 200),
    _api("api.openapi", "get", "/openapi.json", PUBLIC, 200),
    _api("schemas_api.index", "get", "/schemas", PUBLIC, 200),
    _api("schemas_api.schema", "get", "/schemas/proposal-1.json", PUBLIC, 200),
    _api("api.me", "get", "/me", ANY, 200),
    # Identical content: the existing run comes back (200) for whoever may add to the proposal; others are refused (403).
    _api("api.submit_one", "post", "/proposals", A.SUBMIT, 200, scoped=True, hidden=403, body="document"),
    # Naming the proposer needs SUBMIT_ON_BEHALF as well; allowed callers then meet the empty body (400).
    _api("api.submit_one", "post", "/proposals?on_behalf_of=anna", A.SUBMIT, 400, also=(A.SUBMIT_ON_BEHALF,), body=b""),
    _api("api.submit_many", "post", "/proposals/bulk", A.SUBMIT, 200, body={"proposals": []}),
    _api("api.list_proposals", "get", "/proposals", A.SEE_PROPOSAL, 200),
    _api("api.get_proposal", "get", "/proposals/{proposal}", A.SEE_PROPOSAL, 200, scoped=True),
    _api("api.proposal_runs", "get", "/proposals/{proposal}/runs", A.SEE_PROPOSAL, 200, scoped=True),
    _api("api.get_run", "get", "/runs/{run}", A.SEE_PROPOSAL, 200, scoped=True),
    _api("review_api.get_review", "get", "/proposals/{proposal}/review", A.READ_FINAL, 200, scoped=True),
    _api("review_api.post_assignment", "post", "/proposals/{proposal}/review/assignment", A.ASSIGN, 422, scoped=True, body={"reviewer": "nobody"}),
    _api("review_api.post_bulk_assignment", "post", "/reviews/assignments", A.ASSIGN, 422, body={"semester": ""}),
    _api("review_api.post_note", "post", "/proposals/{proposal}/review/notes", A.WRITE_NOTE, 422, scoped=True, body={"text": ""}),
    _api("review_api.post_decision", "post", "/proposals/{proposal}/review/decision", A.DECIDE, 422, scoped=True, body={"decision": "maybe"}),
    _api("admin_api.post_schedule", "post", "/schedules", A.MANAGE_VERSIONS, 422, body={"semester": "2027A"}),
    _api("admin_api.get_schedule", "get", "/schedules/2027A", A.READ_SCHEDULES, 200),
    _api("admin_api.list_schedule_versions", "get", "/schedules/2027A/versions", A.READ_SCHEDULES, 200),
    _api("admin_api.compare_schedule_versions", "get", "/schedules/2027A/changes", A.READ_SCHEDULES, 200),
    _api("admin_api.post_observatory", "post", "/observatory", A.MANAGE_VERSIONS, 422, body={"name": ""}),
    _api("admin_api.get_observatory", "get", "/observatory", A.READ_SCHEDULES, 200),
    _api("admin_api.post_rechecks", "post", "/rechecks", A.RECHECK, 400, body={"stale_days": -1}),
    _api("admin_api.list_changes", "get", "/changes", A.SEE_CHANGES, 200),
    _api("admin_api.put_webhook", "put", "/users/portal-1/webhook", A.MANAGE_WEBHOOKS, 422, body={}),
    _api("admin_api.delete_webhook", "delete", "/users/portal-2/webhook", A.MANAGE_WEBHOOKS, 200),
    _api("access_api.list_tokens", "get", "/users/anna/tokens", A.MANAGE_ACCESS, 200),
    _api("access_api.revoke_token", "post", "/tokens/{token}/revoke", A.MANAGE_ACCESS, 200),  # the revoked one: nothing changes
    _api("access_api.revoke_user_tokens", "post", "/users/retired/tokens/revoke", A.MANAGE_ACCESS, 200),  # has none live
    _api("access_api.put_password", "put", "/users/retired/password", A.MANAGE_ACCESS, 422, body={"password": "short"}),
    _api("simulations_api.post_simulation", "post", "/semesters/2027A/simulations", A.ASK_SIMULATION, 422, body={"realisations": 0}),
    _api("simulations_api.list_simulations", "get", "/semesters/2027A/simulations", A.SEE_SEMESTER, 200),
    _api("simulations_api.get_simulation", "get", "/semesters/2027A/simulations/{simulation}", A.SEE_SEMESTER, 200),
    # --- the pages ---------------------------------------------------------------------------------
    _page("static", "get", "/static/favicon.svg", PUBLIC, 200),
    _page("dashboard.static", "get", "/assets/dashboard.css", PUBLIC, 200),
    _page("dashboard.home", "get", "/", PUBLIC, 302),
    _page("auth.sign_in", "get", "/sign-in", PUBLIC, 200),
    _page("dashboard.proposal_list", "get", "/proposals?semester=2027A", A.SEE_PROPOSAL, 200),
    _page("dashboard.export_csv", "get", "/proposals.csv?semester=2027A", A.SEE_PROPOSAL, 200),
    _page("dashboard.export_json", "get", "/proposals.json?semester=2027A", A.SEE_PROPOSAL, 200),
    _page("dashboard.proposal_page", "get", "/proposals/{proposal}", A.SEE_PROPOSAL, 200, scoped=True),
    _page("dashboard.request_plot", "get", "/proposals/{proposal}/runs/{run}/requests/0/night.svg", A.SEE_PROPOSAL, 200, scoped=True),
    _page("dashboard.proposal_report", "get", "/proposals/{proposal}/report", A.SEE_PROPOSAL, 200, scoped=True),
    # The PDFs draw every plot: walked on proposer A's proposal and a portal's only (one seen by A, one by neither proposer).
    _page("dashboard.proposal_report_pdf", "get", "/proposals/{proposal}/report.pdf", A.SEE_PROPOSAL, 200, scoped=True, targets=("A-1", "P1-1")),
    _page("dashboard.run_page", "get", "/runs/{run}", A.SEE_PROPOSAL, 200, scoped=True),
    _page("dashboard.run_status", "get", "/runs/{run}/status.json", A.SEE_PROPOSAL, 200, scoped=True),
    _page("dashboard.review_assign", "post", "/proposals/{proposal}/review/assignment", A.ASSIGN, 302, scoped=True, body={"reviewer": "nobody"}),
    _page("dashboard.review_note", "post", "/proposals/{proposal}/review/notes", A.WRITE_NOTE, 302, scoped=True, body={"text": ""}),
    _page("dashboard.review_decide", "post", "/proposals/{proposal}/review/decision", A.DECIDE, 302, scoped=True, body={"decision": "maybe"}),
    _page("dashboard.upload", "get", "/upload", A.SUBMIT, 200),
    # Identical content again: the existing run's page for whoever may add to the proposal; others are refused (403).
    _page("dashboard.upload", "post", "/upload", A.SUBMIT, 303, scoped=True, hidden=403, body="document"),
    _page("dashboard.schedule_changes", "get", "/semesters/2027A/schedule", A.READ_SCHEDULES, 200),
    _page("dashboard.overview_latest", "get", "/overview", A.SEE_SEMESTER, 302),
    _page("dashboard.overview", "get", "/semesters/2027A", A.SEE_SEMESTER, 200),
    _page("dashboard.overview_plot", "get", "/semesters/2027A/verdicts.svg", A.SEE_SEMESTER, 200),
    _page("dashboard.overview_table", "get", "/semesters/2027A/verdicts.csv", A.SEE_SEMESTER, 200),
    _page("dashboard.schedule_calendar", "get", "/semesters/2027A/calendar", A.SEE_SEMESTER, 200),
    _page("dashboard.semester_packet_pdf", "get", "/semesters/2027A/packet.pdf?q=A-1", A.SEE_SEMESTER, 200),
    _page("dashboard.ask_simulation", "post", "/semesters/2027A/simulations", A.ASK_SIMULATION, 422, body={"realisations": "0"}),
    _page("dashboard.schedule_upload", "get", "/admin/schedule", A.MANAGE_VERSIONS, 200),
    _page("dashboard.schedule_upload", "post", "/admin/schedule", A.MANAGE_VERSIONS, 400, body={}),  # no file chosen
    # A wrong password (a name of its own per caller, so the per-account throttle never answers instead).
    _page("auth.sign_in", "post", "/sign-in", PUBLIC, 401, body={"name": "nobody-{caller}", "password": "not it"}),
    _page("auth.sign_out", "post", "/sign-out", PUBLIC, 302),  # last: it ends the caller's session
]


def _allowed(role: str | None, action: str | None) -> bool:
    if action == PUBLIC:
        return True
    if role is None:
        return False
    return action is ANY or role in access.TABLE[action]


def _sees(role: str | None, name: str | None, proposal: str) -> bool:
    """From the table and who made what: every proposal, their own (owned by a proposer), or those they submitted."""
    if role is None or role not in access.TABLE[access.SEE_PROPOSAL]:
        return False
    if role in access.TABLE[access.SEE_EVERY_PROPOSAL]:
        return True
    maker = PROPOSALS[proposal]
    owner = maker if PEOPLE[maker] in access.TABLE[access.OWN_PROPOSALS] else None  # a proposer owns what they submit
    return (role in access.TABLE[access.OWN_PROPOSALS] and owner == name) or (role in access.TABLE[access.SEE_SUBMITTED] and maker == name)


def _visible_set(role: str | None, name: str | None) -> set[str]:
    return {proposal for proposal in PROPOSALS if _sees(role, name, proposal)}


@pytest.fixture
def world(app: Flask, engine: GatedEngine) -> dict[str, Any]:
    """The people, a token each (and a revoked one), four checked proposals, a recorded change each and a stored simulation."""
    from feasibility.service.simulations import SimulationSettings, ask_for_simulation
    from feasibility.store.db import session_scope
    from feasibility.store.models import ApiToken, ProposalRecord, User, VerdictChange
    from feasibility.web.auth import create_token, revoke_tokens

    app.config["WTF_CSRF_ENABLED"] = False
    for name, role in PEOPLE.items():
        add_user(app, name, role)
    documents = {pid: proposal_doc(pid, title=f"Invented survey {pid}", hours=1.0) for pid in PROPOSALS}
    runs = {pid: store_checked(app, documents[pid], PROPOSALS[pid]) for pid in PROPOSALS}
    with app.app_context(), session_scope() as session:
        users = {user.name: user for user in session.scalars(select(User))}
        tokens = {name: create_token(session, users[name]) for name in CALLERS.values() if name}
        tokens["revoked"] = create_token(session, users["retired"])
        revoke_tokens(session, user=users["retired"])
        revoked_id = session.scalars(select(ApiToken.id).where(ApiToken.user_id == users["retired"].id)).one()
        simulation = ask_for_simulation(session, "2027A", SimulationSettings(), users["rita"].id).id
        for pid, run_id in runs.items():
            record = session.scalars(select(ProposalRecord).where(ProposalRecord.proposal_id == pid)).one()
            session.add(
                VerdictChange(
                    proposal_ref=record.id,
                    previous_run_id=run_id,
                    run_id=run_id,
                    verdict_before="feasible",
                    verdict_after="infeasible",
                    details={"reason": "test"},
                )
            )
    return {"documents": documents, "runs": runs, "tokens": tokens, "revoked_id": revoked_id, "simulation": simulation}


def _calls(case: Case, world: dict[str, Any]) -> list[tuple[str | None, str, Any]]:
    """The concrete calls of a case: (proposal or None, path, body)."""
    targets: list[str | None] = list(case.targets) if case.scoped else [None]
    calls = []
    for proposal in targets:
        path = case.path.format(proposal=proposal, run=world["runs"].get(proposal or "", 0), simulation=world["simulation"], token=world["revoked_id"])
        body = world["documents"][proposal] if case.body == "document" and proposal else case.body
        calls.append((proposal, path, body))
    return calls


def _expected(case: Case, role: str | None, name: str | None, proposal: str | None, *, signed_in: bool) -> int:
    if case.actions[0] == PUBLIC:
        return case.ok
    if not signed_in:
        return 401 if not case.page or case.path.partition("?")[0].endswith(".json") else 302
    if not all(_allowed(role, action) for action in case.actions):
        return 403
    if proposal is not None and not _sees(role, name, proposal):
        return case.hidden
    return case.ok


def _api_client(app: Flask, caller: str, world: dict[str, Any]) -> tuple[FlaskClient, dict[str, str]]:
    name = CALLERS[caller]
    token = {"no token": None, "malformed token": "fz_not-a-token", "revoked token": world["tokens"]["revoked"]}.get(caller)
    if name is not None:
        token = world["tokens"][name]
    return app.test_client(), ({"Authorization": f"Bearer {token}"} if token else {})


def _page_client(app: Flask, caller: str, world: dict[str, Any]) -> tuple[FlaskClient, dict[str, str], bool]:
    """A browser for the caller: signed in when their role may use the pages; whether it is signed in."""
    client = app.test_client()
    name = CALLERS[caller]
    if caller == "malformed token":
        client.set_cookie("session", "not.a.signed-cookie")
    elif caller == "revoked token":
        sign_in(client, "retired")
        copy = app.test_client()
        cookie = client.get_cookie("session")
        assert cookie is not None
        copy.set_cookie("session", cookie.value)
        client.post("/sign-out")
        client = copy  # the cookie of a session that has ended
    elif name is not None:
        if access.may(PEOPLE[name], access.USE_PAGES):
            sign_in(client, name)
            return client, {}, True
        from .support import PASSWORD

        refused = client.post("/sign-in", data={"name": name, "password": PASSWORD})
        assert refused.status_code == 401, f"{caller} signed in to the pages"
        # A token opens no page either.
        return client, {"Authorization": f"Bearer {world['tokens'][name]}"}, False
    return client, {}, False


def _call(client: FlaskClient, case: Case, path: str, body: Any, headers: dict[str, str]) -> Any:
    method = getattr(client, case.method)
    if case.page:
        if case.endpoint == "dashboard.upload" and case.method == "post":
            import io

            files = {"document": (io.BytesIO(json.dumps(body).encode()), "proposal.json")}
            return method(path, data=files, content_type="multipart/form-data", headers=headers)
        return method(path, data=body or {}, headers=headers)
    if isinstance(body, bytes):
        return method(path, data=body, headers=headers)
    return method(path, json=body, headers=headers) if body is not None else method(path, headers=headers)


def _content_problems(case: Case, role: str | None, name: str | None, answer: Any, app: Flask) -> list[str]:
    """What an allowed answer must hold beyond its status, derived from the table and ownership."""
    seen = _visible_set(role, name)
    if case.endpoint in ("api.list_proposals", "admin_api.list_changes"):
        got = {item["proposal_id"] for item in answer.get_json()["items"]}
    elif case.endpoint == "dashboard.export_json":
        got = {item["proposal_id"] for item in answer.get_json()["proposals"]}
    elif case.endpoint == "dashboard.export_csv":
        got = {line.split(",")[0] for line in answer.get_data(as_text=True).splitlines()[1:] if line}
    elif case.endpoint == "review_api.get_review":
        body = answer.get_json()
        full = role in access.TABLE[access.READ_REVIEW]
        notes = full or (bool(app.config.get("REVIEW_NOTES_TO_PROPOSERS")) and role in access.TABLE[access.READ_NOTES_IF_SHOWN])
        if ("trail" in body) != full or ("notes" in body) != notes:
            return [f"{case.endpoint}: review shape {sorted(body)} for {role}"]
        return []
    else:
        return []
    return [] if got == seen else [f"{case.endpoint}: {role} {name} got {sorted(got)}, the table and ownership say {sorted(seen)}"]


def _walk(app: Flask, world: dict[str, Any], *, pages: bool) -> list[str]:
    wrong: list[str] = []
    for caller, name in CALLERS.items():
        role = PEOPLE[name] if name else None
        if pages:
            client, headers, signed_in = _page_client(app, caller, world)
        else:
            client, headers = _api_client(app, caller, world)
            signed_in = name is not None
        for case in CASES:
            if case.page != pages:
                continue
            for proposal, path, body in _calls(case, world):
                if isinstance(body, dict) and "name" in body:
                    body = {**body, "name": body["name"].format(caller=caller)}
                expected = _expected(case, role, name, proposal, signed_in=signed_in)
                answer = _call(client, case, path, body, headers)
                if answer.status_code != expected:
                    wrong.append(f"{caller}: {case.method.upper()} {path} -> {answer.status_code}, expected {expected}")
                elif expected == 302 and not signed_in and case.actions[0] != PUBLIC:
                    if not answer.headers["Location"].startswith("/sign-in"):
                        wrong.append(f"{caller}: {path} redirected to {answer.headers['Location']}, not the sign-in page")
                elif expected == case.ok and signed_in:
                    wrong += [f"{caller}: {problem}" for problem in _content_problems(case, role, name, answer, app)]
                answer.close()
    return wrong


def test_every_endpoint_has_an_entry(app: Flask) -> None:
    """A new endpoint without a case fails here; so does a case whose action is not the one its view declares."""
    endpoints = {rule.endpoint for rule in app.url_map.iter_rules()}
    covered = {case.endpoint for case in CASES}
    assert endpoints - covered == set(), "endpoints without an entry in CASES (add one, with its action from the access table)"
    assert covered - endpoints == set(), "entries for endpoints that do not exist"
    for case in CASES:
        declared = getattr(app.view_functions[case.endpoint], "access_action", PUBLIC)
        assert declared == case.actions[0], (case.endpoint, declared, case.actions[0])
        assert all(action in (PUBLIC, ANY) or action in access.TABLE for action in case.actions), case
    # Each method an endpoint answers is walked at least once (HEAD and OPTIONS are Flask's own).
    for rule in app.url_map.iter_rules():
        methods = {m.lower() for m in (rule.methods or set())} - {"head", "options"}
        walked = {case.method for case in CASES if case.endpoint == rule.endpoint}
        assert methods <= walked, (rule.endpoint, methods - walked)


def test_the_table_names_known_roles_only() -> None:
    assert set().union(*access.TABLE.values()) <= set(access.ROLES)
    assert set(access.REVIEW_ACTIONS) <= set(access.TABLE)
    # Nobody may do anything: the check refuses before any role is looked at.
    assert not any(access.may(None, action) for action in access.TABLE)


def test_every_role_against_every_api_endpoint(app: Flask, world: dict[str, Any]) -> None:
    wrong = _walk(app, world, pages=False)
    assert wrong == [], "\n".join(wrong)


def test_every_role_against_every_page(app: Flask, world: dict[str, Any]) -> None:
    wrong = _walk(app, world, pages=True)
    assert wrong == [], "\n".join(wrong)


def test_notices_go_to_those_the_proposal_belongs_to(app: Flask, world: dict[str, Any]) -> None:
    """A change's webhook notice goes to the proposal's owner and submitters whose role receives notices (nobody else)."""
    from feasibility.service.webhooks import queue_notices
    from feasibility.store.db import session_factory
    from feasibility.store.models import ProposalRecord, User, VerdictChange

    with app.app_context():
        session = session_factory()
        try:
            for user in session.scalars(select(User)):
                user.webhook_url = f"https://{user.name}.example.org/notices"
            for pid, maker in PROPOSALS.items():
                change = session.scalars(
                    select(VerdictChange).join(ProposalRecord, ProposalRecord.id == VerdictChange.proposal_ref).where(ProposalRecord.proposal_id == pid)
                ).one()
                told = {session.get_one(User, delivery.user_id).name for delivery in queue_notices(session, change)}
                expected = {maker} if PEOPLE[maker] in access.TABLE[access.RECEIVE_NOTICES] else set()
                assert told == expected, pid
        finally:
            session.rollback()  # nothing stored, nothing sent
            session.close()
