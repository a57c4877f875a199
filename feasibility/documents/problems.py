"""What is wrong with a document: problems that name the field path, bounded in number and length.

A hostile document must not be able to make a huge answer or print control
characters to a terminal: every problem is one line of at most a few hundred
characters, with control characters shown as escapes, and a :class:`DocumentError`
keeps only the first :data:`MAX_PROBLEMS` problems plus a line counting the rest.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

__all__ = [
    "MAX_PROBLEMS",
    "DocumentError",
    "DocumentTooLarge",
    "Problem",
    "UnreadableDocument",
    "printable",
]

#: Most problems listed for one document; the rest are counted on one more line.
MAX_PROBLEMS = 50
#: Longest field path and problem text kept, in characters (a longer one is cut with an ellipsis).
MAX_FIELD_CHARS = 200
MAX_MESSAGE_CHARS = 300

#: Unicode control characters (C0, DEL, C1) and lone surrogates: never printed as they are.
_UNPRINTABLE = re.compile(r"[\x00-\x1f\x7f-\x9f\ud800-\udfff]")


def printable(text: str, limit: int | None = None) -> str:
    """``text`` on one line: control characters as escapes (``\\x00``, ``\\n``), cut to ``limit`` characters."""
    text = _UNPRINTABLE.sub(_escape, text)
    if limit is not None and len(text) > limit:
        text = text[: limit - 1] + "…"
    return text


def _escape(match: re.Match[str]) -> str:
    return repr(match.group())[1:-1]


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a document: where (a field path such as ``requests[0].target.dec``) and what."""

    field: str
    message: str

    def __post_init__(self) -> None:
        object.__setattr__(self, "field", printable(str(self.field), MAX_FIELD_CHARS))
        object.__setattr__(self, "message", printable(str(self.message), MAX_MESSAGE_CHARS))

    def as_dict(self) -> dict[str, str]:
        return {"field": self.field, "problem": self.message}


class DocumentError(ValueError):
    """A document that cannot be used, with the problems found (the first :data:`MAX_PROBLEMS`, and a count of the rest)."""

    def __init__(self, problems: Sequence[Problem], document: str = "document", *, total: int | None = None) -> None:
        problems = list(problems)
        self.total = max(total or 0, len(problems))
        if self.total > MAX_PROBLEMS:
            more = self.total - MAX_PROBLEMS
            problems = problems[:MAX_PROBLEMS] + [Problem("", f"and {more} more problems (only the first {MAX_PROBLEMS} are listed)")]
        self.problems = problems
        self.document = printable(str(document), MAX_FIELD_CHARS)
        super().__init__(self.describe())

    def describe(self) -> str:
        """Every problem on a line of its own, field path first."""
        lines = [f"{self.document}: {p.field}: {p.message}" if p.field else f"{self.document}: {p.message}" for p in self.problems]
        return "\n".join(lines)

    def as_dict(self) -> dict[str, Any]:
        return {"error": "invalid document", "document": self.document, "problems": [p.as_dict() for p in self.problems]}


class UnreadableDocument(DocumentError):
    """Text that is not a document at all: not UTF-8, not JSON or YAML, nested too deep, numbers out of bounds."""


class DocumentTooLarge(UnreadableDocument):
    """A document over the size limit (HTTP 413 Content Too Large)."""

    def __init__(self, limit: int, document: str = "document") -> None:
        super().__init__([Problem("", f"is larger than the limit of {limit} bytes")], document)
