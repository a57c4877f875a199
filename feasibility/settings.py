"""The service's settings: one model, read from the environment once by whichever face starts (web, worker, command).

Every setting is the environment variable ``FEASIBILITY_<NAME>`` (``FEASIBILITY_LEASE_S=10``);
a few also have a plain name kept from before (``DATABASE_URL``, ``BROKER_URL``,
``SESSION_COOKIE_SECURE``). Values are read as pydantic reads them (``true``/``false``,
numbers); a value that cannot be read stops the start with the variable's name and the problem.

This module is the only one that reads ``os.environ`` for the service's own settings. It sits
at the lowest floor, so every layer may take a :class:`Settings`; the layers above the
documents are handed one rather than reading the environment themselves.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError

__all__ = ["CACHE_DIR_VARIABLE", "PREFIX", "Settings", "SettingsError", "cache_dir", "load_settings"]

#: The prefix of every setting's environment variable.
PREFIX = "FEASIBILITY_"

#: The variable naming the sky-grid and semester-offer cache (read per use: see :func:`cache_dir`).
CACHE_DIR_VARIABLE = f"{PREFIX}CACHE_DIR"

#: Plain names read besides ``FEASIBILITY_<NAME>``, by field; the prefixed name wins unless the field is in _PLAIN_WINS.
_PLAIN_NAMES = {"database_url": "DATABASE_URL", "broker_url": "BROKER_URL", "session_cookie_secure": "SESSION_COOKIE_SECURE"}
#: Plain names that win over the prefixed one (kept from before: the plain cookie switch always won).
_PLAIN_WINS = {"session_cookie_secure"}


class SettingsError(ValueError):
    """A setting's environment variable holds a value that cannot be read; the message names the variable."""


class Settings(BaseModel):
    """Everything the service can be configured with; each field's description is its documentation."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    # The store and the broker.
    database_url: str | None = Field(None, description="The store (SQLAlchemy URL); DATABASE_URL. None: an SQLite file in `home`.")
    broker_url: str | None = Field(
        None, description="The Celery broker (redis://...); BROKER_URL. None: check runs are computed by threads in the web process."
    )
    home: Path | None = Field(None, description="The instance folder (embedded SQLite store, session-signing key); FEASIBILITY_HOME. None: ./instance.")
    cache_dir: Path | None = Field(None, description="Sky grids and semester offers cached on disk; FEASIBILITY_CACHE_DIR. None: ~/.cache/feasibility.")
    migrations: Path | None = Field(None, description="The Alembic migrations folder; FEASIBILITY_MIGRATIONS. None: the one installed with the package.")
    queue_prefix: str = Field("feasibility", description="Prefix of the Celery queues and broker keys, so tests and deployments can share one Redis.")
    # Computing check runs.
    embedded_workers: int = Field(2, ge=0, description="Threads computing check runs in the web process when there is no broker.")
    sweep_interval_s: float = Field(
        5, ge=0, description="How often the relay sends runs stored but not yet sent and takes back runs of dead workers (service/relay.py); 0: never."
    )
    lease_s: float = Field(30, gt=0, description="A worker's claim on a run lasts this long unless its heartbeat renews it (service/leases.py).")
    run_timeout_s: float = Field(900, gt=0, description="The longest a run may compute; then its heartbeat stops and another worker takes it over.")
    queued_timeout_s: float = Field(600, gt=0, description="A queued run whose message was sent this long ago is sent again (backstop for lost messages).")
    stale_days: float = Field(30, gt=0, description="The nightly re-check re-runs results older than this many days.")
    recheck_hour: int = Field(3, ge=0, le=23, description="The hour (UTC) of the nightly re-check.")
    notice_interval_s: float = Field(60, gt=0, description="How often due verdict-change notices are sent.")
    webhook_allow_private: bool = Field(False, description="Allow webhook addresses on loopback, private, link-local networks (tests, closed sites).")
    # The API and the pages.
    secret_key: str | None = Field(None, description="Signs the dashboard's session cookie; FEASIBILITY_SECRET_KEY. None: a random key kept in `home`.")
    seed_demo: bool = Field(True, description="Load the demo observatory into an empty store at start.")
    create_tables: bool = Field(False, description="Create missing tables at start (tests); deployments run `feasibility db upgrade`.")
    max_bulk: int = Field(500, gt=0, description="The most proposals one bulk request may carry.")
    max_wait_s: float = Field(30, ge=0, description="The longest an API call may wait for its verdict (?wait=).")
    retry_after_s: int = Field(5, ge=0, description="The Retry-After of a 503 while the store cannot be reached.")
    session_cookie_secure: bool | None = Field(
        None,
        description="Send the session cookie over https only; SESSION_COOKIE_SECURE (wins) or FEASIBILITY_SESSION_COOKIE_SECURE. "
        "None: yes, except in tests; `serve --demo` on a loopback address says no.",
    )
    session_lifetime_h: float = Field(12, gt=0, description="A dashboard session ends this many hours after sign-in.")
    sign_in_failures_per_account: int = Field(5, gt=0, description="Failed sign-ins of one account within the window before it must wait.")
    sign_in_failures_per_address: int = Field(20, gt=0, description="Failed sign-ins from one client address within the window before it must wait.")
    sign_in_window_s: float = Field(3600, gt=0, description="How long a failed sign-in counts, in seconds.")
    sign_in_first_delay_s: float = Field(30, ge=0, description="The first wait after reaching a sign-in limit; doubles with each further failure.")
    sign_in_max_delay_s: float = Field(900, ge=0, description="The longest wait after failed sign-ins.")
    trusted_proxies: int = Field(0, ge=0, description="Reverse proxies in front of the app whose X-Forwarded-For/-Proto are believed.")
    public_url: str | None = Field(None, description="The service's public address (https://host); makes the published schemas' $id absolute.")
    review_notes_to_proposers: bool = Field(False, description="Proposers see the technical reviewers' notes beside the verdict that stands.")
    # Rate limits (web/protection.py; Flask-Limiter's notation, several joined by ";"), answered with 429 and Retry-After.
    # Counted in Redis when ratelimit_storage_uri is set or the broker is redis://, else per process. Our choice, common practice.
    rate_limit_sign_in_per_address: str = Field("30 per minute", description="Sign-in posts from one client address.")
    rate_limit_sign_in_per_account: str = Field("10 per minute", description="Sign-in posts naming one account.")
    rate_limit_submissions_per_token: str = Field("120 per minute", description="Proposal submissions (single or bulk) with one API token.")
    ratelimit_storage_uri: str | None = Field(
        None, description="Where rate-limit counts are kept (redis://..., memory://). None: the broker when it is Redis, else memory."
    )
    # Logging.
    log_level: str | None = Field(
        None, description="The level of the service's log lines (DEBUG, INFO, WARNING...). None: INFO in servers and workers, WARNING in commands."
    )

    def instance_dir(self) -> Path:
        """Where the embedded store and the session-signing key live."""
        return self.home if self.home is not None else Path.cwd() / "instance"

    def store_url(self) -> str:
        """The store's URL: ``database_url``, or an SQLite file in :meth:`instance_dir`."""
        return self.database_url or f"sqlite:///{self.instance_dir() / 'feasibility.sqlite'}"

    def with_values(self, values: Mapping[str, Any]) -> Settings:
        """A copy with ``values`` (field names, any case) replaced, checked like the environment's."""
        merged = self.model_dump()
        merged.update({name.lower(): value for name, value in values.items()})
        return Settings.model_validate(merged)

    @classmethod
    def names(cls) -> set[str]:
        """The upper-case names of every setting (the Flask config keys and the variables' suffixes)."""
        return {name.upper() for name in cls.model_fields}


def load_settings(environ: Mapping[str, str] | None = None) -> Settings:
    """The settings from ``environ`` (default: the process environment), read once by the caller.

    Empty variables count as unset (``BROKER_URL=`` means no broker). Raises
    :class:`SettingsError` naming the variable whose value cannot be read.
    """
    env = os.environ if environ is None else environ
    values: dict[str, Any] = {}
    sources: dict[str, str] = {}
    for name in Settings.model_fields:
        prefixed, plain = f"{PREFIX}{name.upper()}", _PLAIN_NAMES.get(name)
        order = [prefixed, plain] if name not in _PLAIN_WINS else [plain, prefixed]
        for variable in order:
            if variable is not None and env.get(variable, "").strip():
                values[name], sources[name] = env[variable].strip(), variable
                break
    try:
        return Settings.model_validate(values)
    except ValidationError as exc:
        first = exc.errors()[0]
        field = str(first["loc"][0]) if first["loc"] else ""
        raise SettingsError(f"{sources.get(field, field)}: {first['msg']}") from exc


def cache_dir() -> Path:
    """Where sky grids and semester offers are cached: ``$FEASIBILITY_CACHE_DIR`` or ``~/.cache/feasibility``.

    Read at each use rather than once: the engine is used by the faces and by
    scripts alike, and a test may point it elsewhere for a while.
    """
    configured = os.environ.get(CACHE_DIR_VARIABLE)
    return Path(configured).expanduser() if configured else Path.home() / ".cache" / "feasibility"
