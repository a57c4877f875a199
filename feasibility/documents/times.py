"""Dates and times as documents write them: ISO 8601 text (or a YAML date), never a bare number.

pydantic on its own reads a number in a date or time field as Unix time, so a
proposer's ``start: 2027`` would quietly become 1970-01-01T00:33:47Z. These types
accept exactly the forms the published JSON Schema states (:data:`DATETIME_PATTERN`,
:data:`DATE_PATTERN`), plus the date and time values a YAML reader makes of them;
naive times are read as UTC.
"""

from __future__ import annotations

import re
from datetime import UTC, date, datetime
from typing import Annotated, Any

from pydantic import AfterValidator, BeforeValidator, WithJsonSchema

__all__ = ["DATETIME_PATTERN", "DATE_PATTERN", "DocumentDate", "UtcDatetime", "as_utc"]

#: A date and time as the documents accept them: a date, optionally a time of day (seconds and fraction optional),
#: optionally a zone (``Z`` or ``±hh:mm``); ``T`` or a space between date and time.
DATETIME_PATTERN = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}(?:[Tt ][0-9]{2}:[0-9]{2}(?::[0-9]{2}(?:\.[0-9]{1,6})?)?(?:[Zz]|[+-][0-9]{2}:?[0-9]{2})?)?$"
#: A calendar date.
DATE_PATTERN = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}$"

_DATETIME = re.compile(DATETIME_PATTERN)
_DATE = re.compile(DATE_PATTERN)
_DATETIME_WORDS = "must be a date and time such as 2027-05-01T22:00:00Z (UTC unless a zone is given)"
_DATE_WORDS = "must be a date such as 2027-04-01"


def _shown(value: object) -> str:
    if isinstance(value, str):
        return repr(value if len(value) <= 40 else value[:37] + "...")
    return "a number" if isinstance(value, (int, float)) and not isinstance(value, bool) else f"a {type(value).__name__}"


def _datetime_text(value: Any) -> Any:
    """Let through datetimes, dates and ISO 8601 text; refuse numbers (Unix time) and other text."""
    if isinstance(value, (datetime, date)):
        return value
    if isinstance(value, str) and _DATETIME.match(value.strip()):
        return value.strip()
    raise ValueError(f"{_DATETIME_WORDS}; got {_shown(value)}")


def _date_text(value: Any) -> Any:
    """Let through dates (and datetimes: pydantic refuses one with a time of day) and YYYY-MM-DD text."""
    if isinstance(value, (datetime, date)):
        return value
    if isinstance(value, str) and _DATE.match(value.strip()):
        return value.strip()
    raise ValueError(f"{_DATE_WORDS}; got {_shown(value)}")


def as_utc(value: datetime) -> datetime:
    """The time in UTC, timezone-aware; a naive time is read as UTC (the rule of every time we are given).

    The one home of that rule: the documents' time fields, the API's and the command line's
    time options and the store's UTC column type all pass their times through here.
    """
    if value.tzinfo is None:
        return value.replace(tzinfo=UTC)
    try:
        return value.astimezone(UTC)
    except OverflowError:  # e.g. 9999-12-31T23:00-05:00 is in the year 10000 in UTC
        raise ValueError("lies outside the years 1 to 9999 once converted to UTC") from None


UtcDatetime = Annotated[
    datetime,
    BeforeValidator(_datetime_text),
    AfterValidator(as_utc),
    WithJsonSchema(
        {
            "type": "string",
            "pattern": DATETIME_PATTERN,
            "description": "ISO 8601 date and time, UTC unless a zone is given (Z or ±hh:mm); a date alone is its midnight.",
            "examples": ["2027-05-01T22:00:00Z", "2027-05-01T19:00:00-03:00", "2027-05-01 22:00"],
        },
        mode="validation",
    ),
]

DocumentDate = Annotated[
    date,
    BeforeValidator(_date_text),
    WithJsonSchema(
        {"type": "string", "format": "date", "pattern": DATE_PATTERN, "description": "A calendar date, YYYY-MM-DD.", "examples": ["2027-04-01"]},
        mode="validation",
    ),
]
