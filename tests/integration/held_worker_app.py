"""The workers' own Celery app, each check run held a moment before it computes: for fault tests that kill a run mid-way.

A check takes about a millisecond once the grid is cached, and a batch of runs is claimed,
computed and stored together, so a worker child killed "mid-run" would almost never be:
the window between claim and store is a few milliseconds. Holding each run for
``FEASIBILITY_TEST_HOLD_S`` seconds (default 0.3) opens that window; the app, its tasks,
the store and the engine are the real ones.
"""

from __future__ import annotations

import os
import time
from typing import Any

from feasibility.service import runs
from worker.celery_app import celery_app

__all__ = ["celery_app"]

_HOLD_S = float(os.environ.get("FEASIBILITY_TEST_HOLD_S", "0.3"))
_engine_call = runs.check


def _held_check(*args: Any) -> Any:
    """The engine call of :mod:`feasibility.service.runs`, after a pause (looked up at call time there)."""
    time.sleep(_HOLD_S)
    return _engine_call(*args)


runs.check = _held_check
