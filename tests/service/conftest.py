"""Fixtures of the service tests: the stand-in engine."""

from __future__ import annotations

import pytest

from .helpers import FakeEngine


@pytest.fixture
def fake_engine(monkeypatch: pytest.MonkeyPatch) -> FakeEngine:
    """Replace the engine call of the task body with a fast stand-in."""
    engine = FakeEngine()
    monkeypatch.setattr("feasibility.service.runs.check", engine)
    return engine
