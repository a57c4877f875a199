"""The engine version a check run is made with (part of the run's identity)."""

from __future__ import annotations

from functools import cache

import feasibility

__all__ = ["engine_version"]


@cache
def engine_version() -> str:
    """``feasibility.engine.ENGINE_VERSION`` when the engine declares one, else the package version."""
    try:
        from feasibility import engine
    except ImportError:  # pragma: no cover - the engine is always installed with the package
        return feasibility.__version__
    return str(getattr(engine, "ENGINE_VERSION", None) or feasibility.__version__)
