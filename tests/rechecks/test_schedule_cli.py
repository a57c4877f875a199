"""``feasibility schedule upload``, ``observatory upload`` and ``recheck`` on the embedded store.

The engine is the schedule-aware stand-in of test_admin_api.py; expected proposals
and counts follow from the schedule edits (HERON off all semester).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
import yaml
from flask import Flask
from sqlalchemy import select

from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun

from .test_admin_api import _without_heron, scheduled_engine


@pytest.fixture
def stand_in(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("feasibility.service.runs.check", scheduled_engine)


def _checked(app: Flask, proposal: Any, done: Any) -> None:
    with app.app_context(), session_scope() as session:
        done(session, proposal("H1", "HERON"))
        done(session, proposal("K1", "KESTREL"))


def test_schedule_upload_command(app: Flask, runner: Any, tmp_path: Path, demo_schedule: dict[str, Any], proposal: Any, done: Any, stand_in: None) -> None:
    _checked(app, proposal, done)
    path = tmp_path / "schedule.yaml"
    path.write_text(yaml.safe_dump(_without_heron(demo_schedule)))
    result = runner.invoke(["schedule", "upload", str(path), "--wait", "30"])
    assert result.exit_code == 0, result.output
    assert "stored schedule 2027A version '2027A-noheron'" in result.stdout
    assert "queued 1 re-check (1 schedule); re-checked proposals per changed instrument: HERON 1" in result.stdout  # H1 only
    with app.app_context(), session_scope() as session:
        verdicts = session.scalars(select(CheckRun.verdict).order_by(CheckRun.id)).all()
    assert verdicts == ["feasible", "feasible", "infeasible"]  # the re-check of H1 without HERON nights (stand-in engine)

    again = runner.invoke(["schedule", "upload", str(path), "--json"])
    assert again.exit_code == 0
    assert json.loads(again.stdout)["created"] is False and json.loads(again.stdout)["rechecks"]["queued"] == 0


def test_bad_schedule_exits_2_naming_the_field(runner: Any, tmp_path: Path, demo_schedule: dict[str, Any]) -> None:
    bad = dict(demo_schedule, nights=[dict(n) for n in demo_schedule["nights"]])
    bad["nights"][5]["instrument"] = "PELICAN"
    path = tmp_path / "bad.yaml"
    path.write_text(yaml.safe_dump(bad))
    result = runner.invoke(["schedule", "upload", str(path)])
    assert result.exit_code == 2
    assert "nights[5].instrument: unknown instrument 'PELICAN'" in result.stderr
    assert "Traceback" not in result.output
    missing = runner.invoke(["schedule", "upload", str(tmp_path / "none.yaml")])
    assert missing.exit_code == 2 and "cannot read" in missing.stderr


def test_recheck_command_twice(app: Flask, runner: Any, proposal: Any, done: Any, stand_in: None, monkeypatch: pytest.MonkeyPatch) -> None:
    _checked(app, proposal, done)
    monkeypatch.setattr("feasibility.service.rechecks.engine_version", lambda: "99.0")
    monkeypatch.setattr("feasibility.service.submissions.engine_version", lambda: "99.0")
    first = runner.invoke(["recheck", "--changed-since", "2027-01-01T00:00:00Z"])
    assert first.exit_code == 0 and "queued 2 re-checks (2 engine)" in first.stdout  # both made by another engine version
    assert "a running `feasibility serve` computes them" in first.stderr  # embedded store, no --wait
    second = runner.invoke(["recheck"])
    assert second.exit_code == 0 and second.stdout.strip() == "queued no re-checks"
    bad = runner.invoke(["recheck", "--changed-since", "last tuesday"])
    assert bad.exit_code == 2 and "--changed-since" in bad.stderr


def test_observatory_upload_command(runner: Any, tmp_path: Path, demo_observatory: dict[str, Any]) -> None:
    path = tmp_path / "observatory.yaml"
    path.write_text(yaml.safe_dump(dict(demo_observatory, version="2026.9")))
    result = runner.invoke(["observatory", "upload", str(path)])
    assert result.exit_code == 0 and "stored observatory version '2026.9'" in result.stdout
    broken = tmp_path / "broken.yaml"
    broken.write_text(yaml.safe_dump(dict(demo_observatory, semesters=[])))
    failed = runner.invoke(["observatory", "upload", str(broken)])
    assert failed.exit_code == 2 and "semesters" in failed.stderr


def test_notices_send_command(runner: Any) -> None:
    result = runner.invoke(["notices", "send"])
    assert result.exit_code == 0 and result.stdout.strip() == "sent 0, to retry 0, given up 0"  # nothing queued yet
