"""The settings are read from the environment in one place, and every log line of a run names the run."""

from __future__ import annotations

import logging
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from flask import Flask

from feasibility.logs import configure_logging, logging_config, run_context
from feasibility.service.runs import execute_run
from feasibility.service.submissions import submit
from feasibility.settings import Settings, SettingsError, load_settings
from feasibility.store.db import session_scope

from .helpers import FakeEngine, proposal


def test_every_setting_is_documented() -> None:
    undocumented = [name for name, field in Settings.model_fields.items() if not (field.description or "").strip()]
    assert undocumented == []


def test_the_names_in_use_keep_working() -> None:
    settings = load_settings(
        {
            "DATABASE_URL": "postgresql+psycopg://db/feasibility",
            "BROKER_URL": "redis://broker:6379/0",
            "FEASIBILITY_HOME": "/srv/feasibility",
            "FEASIBILITY_CACHE_DIR": "/var/cache/feasibility",
            "FEASIBILITY_SECRET_KEY": "s3cret",
            "FEASIBILITY_MIGRATIONS": "/srv/migrations",
            "FEASIBILITY_LEASE_S": "12.5",
            "FEASIBILITY_SEED_DEMO": "false",
            "FEASIBILITY_QUEUE_PREFIX": "site-a",
        }
    )
    assert settings.store_url() == "postgresql+psycopg://db/feasibility"
    assert settings.broker_url == "redis://broker:6379/0"
    assert settings.instance_dir() == Path("/srv/feasibility")
    assert settings.cache_dir == Path("/var/cache/feasibility")
    assert settings.secret_key == "s3cret" and settings.migrations == Path("/srv/migrations")
    assert settings.lease_s == 12.5 and settings.seed_demo is False and settings.queue_prefix == "site-a"


def test_prefixed_names_win_except_the_plain_cookie_switch() -> None:
    both = load_settings(
        {
            "DATABASE_URL": "sqlite:///a.sqlite",
            "FEASIBILITY_DATABASE_URL": "sqlite:///b.sqlite",
            "SESSION_COOKIE_SECURE": "true",
            "FEASIBILITY_SESSION_COOKIE_SECURE": "false",
        }
    )
    assert both.database_url == "sqlite:///b.sqlite"
    assert both.session_cookie_secure is True  # the plain variable always won over the prefixed one


def test_an_empty_variable_is_unset_and_defaults_hold(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    settings = load_settings({"BROKER_URL": "", "DATABASE_URL": "  "})
    assert settings.broker_url is None
    assert settings.store_url() == f"sqlite:///{tmp_path / 'instance' / 'feasibility.sqlite'}"
    assert settings.lease_s == 30 and settings.run_timeout_s == 900 and settings.stale_days == 30


def test_a_bad_value_names_its_variable() -> None:
    with pytest.raises(SettingsError, match="FEASIBILITY_LEASE_S"):
        load_settings({"FEASIBILITY_LEASE_S": "soon"})
    with pytest.raises(SettingsError, match="SESSION_COOKIE_SECURE"):
        load_settings({"SESSION_COOKIE_SECURE": "perhaps"})
    with pytest.raises(SettingsError, match="FEASIBILITY_RECHECK_HOUR"):
        load_settings({"FEASIBILITY_RECHECK_HOUR": "25"})


def test_the_flask_config_is_made_from_the_settings(app: Flask) -> None:
    runtime = app.extensions["feasibility.runtime"]
    assert app.config["LEASE_S"] == runtime.settings.lease_s
    assert app.config["DATABASE_URL"] == runtime.settings.store_url()
    assert app.config["SWEEP_INTERVAL_S"] == 0  # the test's value replaced the setting, in both


@pytest.fixture
def own_loggers() -> Iterator[None]:
    """Put the service's loggers back as they were after a test that applies the logging set-up."""
    names = ("feasibility", "worker")
    kept = {name: (logging.getLogger(name).level, list(logging.getLogger(name).handlers)) for name in names}
    yield
    for name, (level, handlers) in kept.items():
        logger = logging.getLogger(name)
        logger.setLevel(level)
        logger.handlers[:] = handlers


def test_log_lines_carry_the_run_id(own_loggers: None, capsys: pytest.CaptureFixture[str]) -> None:
    configure_logging("INFO")
    log = logging.getLogger("feasibility.engine.example")
    with run_context(41):
        log.info("inside")
    log.info("outside")
    lines = [line for line in capsys.readouterr().err.splitlines() if "feasibility.engine.example" in line]
    assert len(lines) == 2
    assert "run=41 " in lines[0] and lines[0].endswith("inside")
    assert "run=- " in lines[1] and lines[1].endswith("outside")


def test_a_computed_run_logs_under_its_id(app: Flask, fake_engine: FakeEngine, own_loggers: None, capsys: pytest.CaptureFixture[str]) -> None:
    configure_logging("INFO")
    fake_engine.error = RuntimeError("the engine broke")
    with app.app_context():
        with session_scope() as session:
            run_id = submit(session, proposal("L-1"), None).run.id
        assert execute_run(run_id) == "failed"
    failure = [line for line in capsys.readouterr().err.splitlines() if "failed" in line and "feasibility.service.runs" in line]
    assert failure and f"run={run_id} " in failure[0]


def test_one_configuration_for_every_face() -> None:
    owned: dict[str, Any] = logging_config("INFO", root_level="WARNING")
    assert owned["root"]["handlers"] == ["stderr"] and owned["loggers"]["feasibility"]["handlers"] == []
    guest: dict[str, Any] = logging_config("WARNING")
    assert "root" not in guest and guest["loggers"]["worker"]["handlers"] == ["stderr"]
    assert guest["handlers"]["stderr"]["filters"] == ["run_id"]
