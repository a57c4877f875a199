"""A proposal's page: verdict, findings with their figures and suggestions, plots, and the run history."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from feasibility.results import Level

from .support import proposal_doc, sign_in, store_checked

SVG_NS = "{http://www.w3.org/2000/svg}"  # W3C SVG 1.1 namespace


def test_findings_figures_and_suggestions_are_shown(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    html = client.get("/proposals/P-2").get_data(as_text=True)
    assert "Bright novae" in html
    assert "level--infeasible" in html and ">infeasible<" in html  # the word, not colour alone
    assert "Stand-in moon finding for Nova field." in html
    assert "Ask for grey time." in html
    assert "moon separation min (°)" in html and "35.5" in html  # a finding's figures, named and formatted
    assert "Method: stand-in" in html


def test_plots_are_svg_drawn_from_stored_series(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    run_id = semester["runs"]["P-1"]
    html = client.get("/proposals/P-1").get_data(as_text=True)
    for kind in ("night", "semester", "snr"):
        path = f"/proposals/P-1/runs/{run_id}/requests/0/{kind}.svg"
        assert path in html
        response = client.get(path)
        assert response.status_code == 200 and response.mimetype == "image/svg+xml"
        root = ET.fromstring(response.get_data())
        assert root.tag == f"{SVG_NS}svg"
    assert client.get(f"/proposals/P-1/runs/{run_id}/requests/5/night.svg").status_code == 404
    assert client.get(f"/proposals/P-1/runs/{run_id}/requests/0/other.svg").status_code == 404


def test_older_results_without_series_still_render(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    engine.with_series = False
    run_id = store_checked(app, proposal_doc("OLD-1"), None)
    sign_in(client, "rita")
    html = client.get("/proposals/OLD-1").get_data(as_text=True)
    assert html.count("No plot: this run stored no data for it") == 3
    assert client.get(f"/proposals/OLD-1/runs/{run_id}/requests/0/night.svg").status_code == 404


def test_run_history_says_what_changed(app: Flask, client: FlaskClient, semester: dict[str, Any], engine: Any) -> None:
    engine.levels["P-1"] = Level.MARGINAL
    engine.figure_scale["P-1"] = 0.5
    second = store_checked(app, proposal_doc("P-1", title="Quiet galaxies", target="NGC 0001 field", hours=6.0, ra="01:30:00"), "pablo")
    sign_in(client, "rita")
    html = client.get("/proposals/P-1").get_data(as_text=True)
    assert f"#{second} <span class=\"shown\">(shown)</span>" in html  # the latest finished run is shown
    assert "<strong>verdict</strong>: feasible → marginal" in html
    assert "<strong>proposal</strong>: version 1 → version 2" in html
    assert "<strong>request a: hours requested</strong>: 4 h → 6 h" in html
    assert "<strong>request a: hours observable</strong>: 120 h → 60 h" in html
    # The earlier run can still be opened.
    first = semester["runs"]["P-1"]
    older = client.get(f"/proposals/P-1?run={first}").get_data(as_text=True)
    assert f"#{first} <span class=\"shown\">(shown)</span>" in older
    assert client.get("/proposals/P-1?run=999999").status_code == 404
