"""The fuzz tests' summary: how many inputs each target got and how many it answered with a 5xx."""

from __future__ import annotations

from typing import Any

from . import tally


def pytest_terminal_summary(terminalreporter: Any) -> None:
    found = tally.lines()
    if found:
        terminalreporter.section("fuzzing")
        for line in found:
            terminalreporter.write_line(line)
