"""Which store faults pass (retry) and which will not (fail the run): told from real database errors."""

from __future__ import annotations

import pytest
from flask import Flask
from sqlalchemy import create_engine, insert, select, text
from sqlalchemy.exc import SQLAlchemyError

from feasibility.service.faults import is_lasting, is_passing
from feasibility.store.db import session_scope
from feasibility.store.models import User


def _raised(app: Flask, statement: object) -> SQLAlchemyError:
    with app.app_context(), pytest.raises(SQLAlchemyError) as caught, session_scope() as session:
        session.execute(statement)  # type: ignore[arg-type]
    return caught.value


def test_a_broken_constraint_will_not_pass(app: Flask) -> None:
    with app.app_context(), session_scope() as session:
        session.execute(insert(User).values(name="same", role="proposer"))
    error = _raised(app, insert(User).values(name="same", role="proposer"))  # the unique user name
    assert is_lasting(error) and not is_passing(error)


def test_an_unreachable_store_passes() -> None:
    engine = create_engine("postgresql+psycopg://nobody@127.0.0.1:1/none")  # nothing listens on port 1
    with pytest.raises(SQLAlchemyError) as caught, engine.connect() as connection:
        connection.execute(select(1))
    engine.dispose()
    assert is_passing(caught.value) and not is_lasting(caught.value)


def test_a_result_that_cannot_be_serialised_will_not_pass() -> None:
    try:
        float(10**400)
    except OverflowError as error:
        assert is_lasting(error)


def test_a_missing_table_is_neither(app: Flask) -> None:
    # A store not yet upgraded is cured by the upgrade: the run is given back, not failed for good.
    error = _raised(app, text("SELECT * FROM no_such_table"))
    assert not is_lasting(error)
