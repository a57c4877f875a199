"""A proposal's page: verdict, findings with their figures and suggestions, plots, and the run history.

The reference of each assertion is the real engine's result for the same document
(``expected`` / ``engine_result``): the page must show what the engine stored.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from typing import Any

from flask import Flask
from flask.testing import FlaskClient
from markupsafe import escape

from feasibility.web.dashboard.formatting import figure_name, figure_value

from .support import demo_doc, engine_result, proposal_doc, sign_in, store_checked

SVG_NS = "{http://www.w3.org/2000/svg}"  # W3C SVG 1.1 namespace
CHECKS = ("visibility", "moon", "schedule", "sun-safety", "atmosphere", "image-quality", "instrument", "sensitivity")


def test_feasible_proposal_shows_all_eight_checks(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    html = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    result = expected["SQ-2027A-001"]
    assert result.verdict.value == "feasible"  # demo 001's header
    assert "Globular clusters in the halo of NGC 5128" in html
    assert "level--feasible" in html and ">feasible<" in html  # the word, not colour alone
    assert "level--infeasible" not in html and "level--marginal" not in html
    for request in result.requests:
        assert f"Request {request.label}:" in html
        assert sorted(f.check for f in request.findings) == sorted(CHECKS)  # every check of the vocabulary ran
        for finding in request.findings:
            assert f'<th scope="row">{finding.check}</th>' in html
            assert f"<p>{escape(finding.message)}</p>" in html, finding.check
            if finding.suggestion:
                assert str(escape(finding.suggestion)) in html
    assert html.count('<th scope="row">sun-safety</th>') == len(result.requests)


def test_infeasible_proposal_shows_the_failing_check(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    html = client.get("/proposals/SQ-2027A-002").get_data(as_text=True)
    failing = [f for f in expected["SQ-2027A-002"].requests[0].findings if f.level.value == "infeasible"]
    assert [f.check for f in failing] == ["sensitivity"]  # demo 002's header: infeasible (sensitivity)
    finding = failing[0]
    assert "level--infeasible" in html and ">infeasible<" in html
    assert f"<p>{escape(finding.message)}</p>" in html
    assert finding.suggestion and str(escape(finding.suggestion)) in html
    # The worst finding comes first in the table: it is the "why".
    first_row = html.index('<tr class="finding finding--')
    assert html.startswith('<tr class="finding finding--infeasible">\n        <th scope="row">sensitivity</th>', first_row)
    for key, value in finding.figures.items():  # the finding's figures, named and formatted
        assert f"<dt>{escape(figure_name(key))}</dt><dd>{escape(figure_value(value))}</dd>" in html, key
    assert f"Method: {escape(finding.method)}" in html


def test_marginal_proposal_shows_each_requests_problem(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    html = client.get("/proposals/SQ-2027A-005").get_data(as_text=True)
    result = expected["SQ-2027A-005"]
    assert result.verdict.value == "marginal"  # demo 005's header
    problems = {(q.label, f.check) for q in result.requests for f in q.findings if f.level.value != "feasible"}
    # Demo 005's header: Ks image quality, H sensitivity, J moon and schedule.
    assert problems == {("gc-Ks", "image-quality"), ("gc-H", "sensitivity"), ("gc-J-dark", "moon"), ("gc-J-dark", "schedule")}
    for request in result.requests:
        for finding in request.findings:
            assert f"<p>{escape(finding.message)}</p>" in html, (request.label, finding.check)
    assert html.count('<tr class="finding finding--marginal">') == len(problems)


def test_plots_are_svg_drawn_from_stored_series(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    run_id = semester["runs"]["SQ-2027A-001"]
    html = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    night = expected["SQ-2027A-001"].requests[0].series["night_curve"]["night"]
    titles = {
        "night": f"Altitude through the night beginning {night}",
        "semester": "Usable hours per night across the semester",
        "snr": "Signal-to-noise against exposure time",
    }
    for index in range(2):
        for kind, title in titles.items():
            path = f"/proposals/SQ-2027A-001/runs/{run_id}/requests/{index}/{kind}.svg"
            assert path in html
            if index == 1 and kind != "snr":
                continue  # the second request's sky plots draw the same kind of series as the first's (saves drawing time)
            response = client.get(path)
            assert response.status_code == 200 and response.mimetype == "image/svg+xml"
            text = response.get_data(as_text=True)
            assert ET.fromstring(text).tag == f"{SVG_NS}svg"
            assert f"<!-- {title} -->" in text, path  # matplotlib's SVG writer notes each text it draws as paths
    assert "No plot" not in html
    assert client.get(f"/proposals/SQ-2027A-001/runs/{run_id}/requests/5/night.svg").status_code == 404
    assert client.get(f"/proposals/SQ-2027A-001/runs/{run_id}/requests/0/other.svg").status_code == 404


def test_older_results_without_series_still_render(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun

    document = proposal_doc("OLD-1")
    run_id = store_checked(app, document, None)
    # The real engine always gives series; a result stored whole (the older form) by an engine version
    # before plots had none. That stored result is made here by taking the series out of a real one.
    with app.app_context(), session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        result = engine_result(document).model_dump(mode="json")
        result["requests"] = [{k: v for k, v in r.items() if k != "series"} for r in result["requests"]]
        run.result = result
    sign_in(client, "rita")
    html = client.get("/proposals/OLD-1").get_data(as_text=True)
    assert html.count("No plot: this run stored no data for it") == 3
    assert '<th scope="row">visibility</th>' in html  # the findings are still shown
    assert client.get(f"/proposals/OLD-1/runs/{run_id}/requests/0/night.svg").status_code == 404


def test_run_history_says_what_changed(app: Flask, client: FlaskClient, semester: dict[str, Any]) -> None:
    # Version 2 of demo 001 asks for 2 h in V: enough at the typical conditions (about 1.2 h), short of the
    # design conditions (about 3.2 h), so marginal (the levels documented in engine/sensitivity.py).
    document = demo_doc("001")
    document["requests"][0]["hours_requested"] = 2.0
    result = engine_result(document)
    assert result.verdict.value == "marginal" and result.requests[0].verdict.value == "marginal"
    second = store_checked(app, document, "pablo")
    sign_in(client, "rita")
    html = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    assert f'#{second} <span class="shown">(shown)</span>' in html  # the latest finished run is shown
    assert "<strong>verdict</strong>: feasible → marginal" in html
    assert "<strong>proposal</strong>: version 1 → version 2" in html
    assert "<strong>request halo-V: verdict</strong>: feasible → marginal" in html
    assert "<strong>request halo-V: hours requested</strong>: 4 h → 2 h" in html
    assert "request halo-V: hours observable" not in html  # the sky did not change
    assert "<strong>request halo-R" not in html  # nor did the other request
    # The earlier run can still be opened.
    first = semester["runs"]["SQ-2027A-001"]
    older = client.get(f"/proposals/SQ-2027A-001?run={first}").get_data(as_text=True)
    assert f'#{first} <span class="shown">(shown)</span>' in older
    assert client.get("/proposals/SQ-2027A-001?run=999999").status_code == 404


def test_moving_targets_show_their_path_and_magnitude(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    # Demo 008 (its header: a planet, an asteroid and a comet by orbital elements, a table target); the engine's
    # own result is the reference for what the page shows.
    run_id = store_checked(app, demo_doc("008"), None)
    result = engine_result(demo_doc("008"))
    sign_in(client, "rita")
    html = client.get("/proposals/SQ-2027A-008").get_data(as_text=True)
    for index, request in enumerate(result.requests):
        motion = next(f for f in request.findings if f.check == "motion")
        assert f"<p>{escape(motion.message)}</p>" in html
        address = f"/proposals/SQ-2027A-008/runs/{run_id}/requests/{index}/track.svg"
        assert address in html
        answer = client.get(address)
        assert answer.status_code == 200 and answer.mimetype == "image/svg+xml"
        root = ET.fromstring(answer.get_data(as_text=True))
        assert root.tag == f"{SVG_NS}svg"
        assert any(element.get("id") == "track" for element in root.iter())
    assert "Path on the sky and brightness across the semester" in html
    assert "WARNING" in html  # the comet near perihelion (sun-safety), said plainly


def test_fixed_targets_have_no_track_plot(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    run_id = store_checked(app, demo_doc("001"), None)
    sign_in(client, "rita")
    html = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    assert "track.svg" not in html and "No plot" not in html
    assert client.get(f"/proposals/SQ-2027A-001/runs/{run_id}/requests/0/track.svg").status_code == 404


def test_results_are_stored_compact_and_answered_whole(app: Flask, client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    import json

    from sqlalchemy import select

    from feasibility.results import ProposalResult
    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun, User
    from feasibility.web.auth import create_token

    run_id = semester["runs"]["SQ-2027A-001"]
    reference = expected["SQ-2027A-001"].model_dump(mode="json")  # the real engine's whole result for the same inputs
    with app.app_context(), session_scope() as session:
        stored = session.get_one(CheckRun, run_id).result
        token = create_token(session, session.scalars(select(User).where(User.name == "rita")).one())
    assert stored["form"] == "compact"
    assert all("series" not in r for r in stored["requests"])
    assert all("method" not in f for r in stored["requests"] for f in r["findings"])
    assert [r["figures"] for r in stored["requests"]] == [r["figures"] for r in reference["requests"]]
    assert len(json.dumps(stored)) < len(json.dumps(reference)) / 2
    # The API answers the result whole, as documented (a ProposalResult): the series and methods recomputed
    # from the run's recorded inputs equal what the engine gave.
    answer = client.get("/api/v1/proposals/SQ-2027A-001", headers={"Authorization": f"Bearer {token}"})
    assert answer.status_code == 200
    result = answer.get_json()["result"]["result"]
    assert "form" not in result
    ProposalResult.model_validate(result)
    for got, want in zip(result["requests"], reference["requests"], strict=True):
        assert got["series"] == want["series"]
        assert [f["method"] for f in got["findings"]] == [f["method"] for f in want["findings"]]
        assert got["findings"] == want["findings"]


def test_results_stored_whole_show_their_own_series(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any, monkeypatch: Any) -> None:
    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun

    document = proposal_doc("WHOLE-1")
    run_id = store_checked(app, document, None)
    whole = engine_result(document).model_dump(mode="json")  # a result in the form stored before results were compact
    whole["requests"][0]["series"]["night_curve"]["night"] = "2027-05-05"  # so the plot shown is seen to come from the store
    with app.app_context(), session_scope() as session:
        session.get_one(CheckRun, run_id).result = whole

    def refuse(*_: Any) -> Any:
        raise AssertionError("a result stored whole is shown as stored, not recomputed")

    monkeypatch.setattr("feasibility.engine.check_proposal", refuse)
    sign_in(client, "rita")
    html = client.get("/proposals/WHOLE-1").get_data(as_text=True)
    assert "No plot" not in html
    assert f"Method: {escape(whole['requests'][0]['findings'][0]['method'])}" in html
    svg = client.get(f"/proposals/WHOLE-1/runs/{run_id}/requests/0/night.svg").get_data(as_text=True)
    assert "<!-- Altitude through the night beginning 2027-05-05 -->" in svg


def test_compact_result_of_another_engine_version_says_why_it_has_no_plot(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun

    run_id = store_checked(app, proposal_doc("OTHER-ENGINE-1"), None)
    with app.app_context(), session_scope() as session:
        session.get_one(CheckRun, run_id).engine_version = "0.0.1"  # as if made by an engine this service no longer runs
    sign_in(client, "rita")
    html = client.get("/proposals/OTHER-ENGINE-1").get_data(as_text=True)
    assert html.count("No plot: its series are recomputed by the engine version that made it (0.0.1)") == 3
    assert '<th scope="row">visibility</th>' in html  # the stored findings are still shown
    assert client.get(f"/proposals/OTHER-ENGINE-1/runs/{run_id}/requests/0/night.svg").status_code == 404


def test_details_are_not_shown_when_the_engine_now_answers_otherwise(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun

    run_id = store_checked(app, proposal_doc("CHANGED-1"), None)
    with app.app_context(), session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        result = dict(run.result)
        request = dict(result["requests"][0])
        findings = [dict(f) for f in request["findings"]]
        findings[0]["level"] = "infeasible" if findings[0]["level"] != "infeasible" else "feasible"  # not what the engine gives
        request["findings"] = findings
        result["requests"] = [request]
        run.result = result
    sign_in(client, "rita")
    html = client.get("/proposals/CHANGED-1").get_data(as_text=True)
    assert '<th scope="row">visibility</th>' in html  # the stored findings are shown
    assert "Method:" not in html and html.count("No plot") == 3  # no series from a recomputation that disagrees
