"""The proposal list: filters, search, sorting, paging in SQL, and the "changed since the previous check" mark."""

from __future__ import annotations

import re
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from feasibility.results import Level

from .support import proposal_doc, sign_in, store_checked


def _ids(html: str) -> list[str]:
    """Proposal ids in the order the table lists them."""
    return re.findall(r'<th scope="row" class="id"><a href="/proposals/([^"?]+)">', html)


def test_filter_by_verdict_instrument_and_check(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    assert _ids(client.get("/proposals?semester=2027A&verdict=infeasible").get_data(as_text=True)) == ["P-2"]
    assert _ids(client.get("/proposals?semester=2027A&verdict=marginal").get_data(as_text=True)) == ["Q-1"]
    assert _ids(client.get("/proposals?semester=2027A&instrument=OWL").get_data(as_text=True)) == ["Q-1"]
    # The stand-in puts the non-feasible level on the "moon" check; feasible proposals have no problem there.
    assert _ids(client.get("/proposals?semester=2027A&check=moon").get_data(as_text=True)) == ["P-2", "Q-1"]
    assert _ids(client.get("/proposals?semester=2027A&check=visibility").get_data(as_text=True)) == []


def test_search_by_id_title_or_target(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    assert _ids(client.get("/proposals?semester=2027A&q=p-1").get_data(as_text=True)) == ["P-1"]
    assert _ids(client.get("/proposals?semester=2027A&q=QUIET").get_data(as_text=True)) == ["P-1"]
    assert _ids(client.get("/proposals?semester=2027A&q=ngc 0001").get_data(as_text=True)) == ["P-1"]
    # LIKE wildcards typed by the user are literal characters, not patterns.
    assert _ids(client.get("/proposals?semester=2027A&q=%25").get_data(as_text=True)) == []
    assert _ids(client.get("/proposals?semester=2027A&q=_").get_data(as_text=True)) == []


def test_sort_by_columns(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    by_hours = _ids(client.get("/proposals?semester=2027A&sort=hours&dir=desc").get_data(as_text=True))
    assert by_hours == ["P-2", "P-1", "Q-1", "U-1"]  # 10, 4, 2, 1 hours
    by_verdict = _ids(client.get("/proposals?semester=2027A&sort=verdict&dir=desc").get_data(as_text=True))
    assert by_verdict[0] == "P-2" and by_verdict[1] == "Q-1"  # infeasible, then marginal (worst first)
    by_title = _ids(client.get("/proposals?semester=2027A&sort=title").get_data(as_text=True))
    assert by_title == ["P-2", "Q-1", "P-1", "U-1"]  # Bright, Markup, Quiet, Unowned
    page = client.get("/proposals?semester=2027A&sort=title").get_data(as_text=True)
    assert 'aria-sort="ascending"' in page  # WAI-ARIA: the sorted column says so


def test_paging_is_done_by_the_database(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    first = _ids(client.get("/proposals?semester=2027A&per_page=3&page=1").get_data(as_text=True))
    second = client.get("/proposals?semester=2027A&per_page=3&page=2").get_data(as_text=True)
    assert first == ["P-1", "P-2", "Q-1"] and _ids(second) == ["U-1"]
    assert "page 2 of 2" in second
    # A page past the end shows the last page rather than nothing.
    assert _ids(client.get("/proposals?semester=2027A&per_page=3&page=99").get_data(as_text=True)) == ["U-1"]


def test_paging_limits_the_sql(app: Flask, semester: dict[str, Any]) -> None:
    from sqlalchemy import event

    from feasibility.store.db import get_engine, session_factory
    from feasibility.store.models import User
    from feasibility.web.dashboard.queries import ListQuery, list_rows

    statements: list[str] = []
    with app.app_context():
        listener = lambda conn, cursor, statement, params, context, many: statements.append(statement)  # noqa: E731
        event.listen(get_engine(), "before_cursor_execute", listener)
        try:
            session = session_factory()
            user = session.query(User).filter_by(name="rita").one()
            rows = list_rows(session, user, ListQuery(semester="2027A", per_page=2, page=2))
            session.close()
        finally:
            event.remove(get_engine(), "before_cursor_execute", listener)
    assert [r.proposal_id for r in rows] == ["Q-1", "U-1"]
    assert any("LIMIT" in s and "OFFSET" in s for s in statements)


def test_changed_verdict_is_marked(app: Flask, client: FlaskClient, semester: dict[str, Any], engine: Any) -> None:
    engine.levels["P-1"] = Level.INFEASIBLE
    store_checked(app, proposal_doc("P-1", title="Quiet galaxies", target="NGC 0001 field", hours=5.0, ra="01:30:00"), "pablo")
    sign_in(client, "rita")
    html = client.get("/proposals?semester=2027A&q=P-1").get_data(as_text=True)
    assert "yes, was feasible" in html
    body = client.get("/proposals.json?semester=2027A&q=P-1").get_json()["proposals"][0]
    assert body["verdict"] == "infeasible" and body["previous_verdict"] == "feasible" and body["verdict_changed"] is True
    changed_first = _ids(client.get("/proposals?semester=2027A&sort=changed&dir=desc").get_data(as_text=True))
    assert changed_first[0] == "P-1"
