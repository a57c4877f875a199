"""Every time read back from the store is timezone-aware UTC, whichever way it is read, on SQLite and PostgreSQL.

The code above the store relies on this and no longer patches naive times back to UTC, so a column,
query shape or store that hands back a naive or local time must fail here. The PostgreSQL sessions
of the tests speak America/Santiago (tests/conftest.py), so a time left in the session's zone shows.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime, timedelta, timezone

from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import DateTime, func, select
from sqlalchemy.orm import aliased

from feasibility.store.db import session_scope
from feasibility.store.models import Base, SignInFailure, User, UTCDateTime, utcnow
from feasibility.web.sign_in_limits import Limits, seconds_to_wait

from .helpers import auth

# Python's datetime (the reference library here) and ISO 8601: 19:00 at UTC-03:00 is the instant 22:00Z.
_OFFSET_GIVEN = datetime(2027, 5, 1, 19, 0, tzinfo=timezone(timedelta(hours=-3)))
_SAME_INSTANT_UTC = datetime(2027, 5, 1, 22, 0, tzinfo=UTC)
_EARLIER_UTC = datetime(2027, 4, 30, 8, 15, 30, tzinfo=UTC)
_NAIVE_IS_UTC = datetime(2027, 5, 2, 1, 45)  # stored as 01:45Z: a naive time going in is read as UTC


def _is_utc(moment: object) -> bool:
    return isinstance(moment, datetime) and moment.tzinfo is UTC and moment.utcoffset() == timedelta(0)


def test_every_time_column_uses_the_utc_type() -> None:
    plain = [
        f"{table.name}.{column.name}"
        for table in Base.metadata.sorted_tables
        for column in table.columns
        if isinstance(column.type, DateTime) and not isinstance(column.type, UTCDateTime)
    ]
    timed = [column for table in Base.metadata.sorted_tables for column in table.columns if isinstance(column.type, UTCDateTime)]
    assert plain == [] and len(timed) >= 20


def test_stored_times_read_back_in_utc_by_row_column_aggregate_and_subquery(app: Flask) -> None:
    with app.app_context():
        before = utcnow()
        with session_scope() as session:
            session.add_all(
                [
                    SignInFailure(account="ana", address="192.0.2.1", failed_at=_OFFSET_GIVEN),
                    SignInFailure(account="ana", address="192.0.2.1", failed_at=_EARLIER_UTC),
                    SignInFailure(account="ana", address="192.0.2.1", failed_at=_NAIVE_IS_UTC),
                    User(name="ana", role="proposer"),  # created_at stamped by the column's default
                ]
            )
        after = utcnow()
        expected = [_SAME_INSTANT_UTC, _EARLIER_UTC, _NAIVE_IS_UTC.replace(tzinfo=UTC)]
        with session_scope(read_only=True) as session:
            rows = list(session.scalars(select(SignInFailure.failed_at).order_by(SignInFailure.id)))
            objects = [row.failed_at for row in session.scalars(select(SignInFailure).order_by(SignInFailure.id))]
            table = SignInFailure.__table__.c
            core = list(session.scalars(select(table.failed_at).order_by(table.id)))
            latest, earliest = session.execute(select(func.max(SignInFailure.failed_at), func.min(SignInFailure.failed_at))).one()
            labelled = select(SignInFailure.failed_at.label("at")).subquery()
            through_subquery = session.scalar(select(func.max(labelled.c.at)))
            other = aliased(SignInFailure, name="other_failure")
            through_alias = session.scalar(select(other.failed_at).where(other.failed_at == _SAME_INSTANT_UTC))
            created = session.scalar(select(User.created_at).where(User.name == "ana"))
    for moments in (rows, objects, core):
        assert moments == expected and all(_is_utc(moment) for moment in moments)
    assert latest == _NAIVE_IS_UTC.replace(tzinfo=UTC) and _is_utc(latest)
    assert earliest == _EARLIER_UTC and _is_utc(earliest)
    assert through_subquery == latest and _is_utc(through_subquery)
    assert through_alias == _SAME_INSTANT_UTC and _is_utc(through_alias)
    assert _is_utc(created) and created is not None and before <= created <= after


def test_the_latest_failure_read_as_max_sets_the_sign_in_wait(app: Flask) -> None:
    # The wait is measured from max(failed_at): read back naive it could not be compared with now at all.
    limits = Limits(per_account=1, per_address=100, window=timedelta(hours=1), first_delay=timedelta(seconds=30), max_delay=timedelta(minutes=5))
    now = datetime(2027, 5, 1, 22, 0, 10, tzinfo=UTC)
    with app.app_context():
        with session_scope() as session:
            session.add(SignInFailure(account="ben", address="192.0.2.2", failed_at=_OFFSET_GIVEN))  # 22:00:00Z
        with session_scope(read_only=True) as session:
            assert seconds_to_wait(session, "ben", "192.0.2.2", limits, now=now) == 20  # 22:00:00 + 30 s - 22:00:10


def test_the_api_shows_stored_times_with_a_utc_offset(client: FlaskClient, make_token: Callable[..., str]) -> None:
    admin = make_token("admin")
    make_token("portal", "portal-2")
    items = client.get("/api/v1/users/portal-2/tokens", headers=auth(admin)).json["items"]
    shown = datetime.fromisoformat(items[0]["created_at"])
    assert items[0]["created_at"].endswith("+00:00") and shown.utcoffset() == timedelta(0)
    assert abs(utcnow() - shown) < timedelta(minutes=5)
