"""Under CI=true a missing Chromium fails the browser tests instead of skipping them (runs without a browser)."""

from __future__ import annotations

import pytest

from .conftest import require_chromium


def test_missing_chromium_fails_under_ci() -> None:
    with pytest.raises(pytest.fail.Exception):
        require_chromium("/nonexistent/chromium", {"CI": "true"})


def test_missing_chromium_skips_elsewhere() -> None:
    with pytest.raises(pytest.skip.Exception):
        require_chromium("/nonexistent/chromium", {})
