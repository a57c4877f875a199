"""Counts kept by the fuzz tests and printed at the end of the run (the README's reliability table quotes them)."""

from __future__ import annotations

from collections import Counter

__all__ = ["count", "lines"]

_inputs: Counter[str] = Counter()
_server_errors: Counter[str] = Counter()


def count(target: str, *, server_error: bool = False) -> None:
    """One generated input sent to ``target``; ``server_error`` when it was answered 5xx (or crashed)."""
    _inputs[target] += 1
    if server_error:
        _server_errors[target] += 1


def lines() -> list[str]:
    """One line per target: inputs generated and how many were answered 5xx or crashed."""
    return [f"{target}: {n} generated inputs, {_server_errors[target]} answered 5xx or crashed" for target, n in sorted(_inputs.items())]
