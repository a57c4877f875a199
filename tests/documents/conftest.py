"""Fixtures of the document tests: the packaged demo observatory description."""

from __future__ import annotations

from importlib import resources

import pytest

from feasibility.documents import Observatory, load_document


@pytest.fixture(scope="module")
def observatory() -> Observatory:
    return load_document(Observatory, resources.files("feasibility") / "data" / "observatory.yaml")
