"""The real thing: PostgreSQL, Redis, Celery worker processes and the API over HTTP.

Each session gets its own PostgreSQL database and its own Redis key prefix and
queue name, so it can run beside other test sessions. Without the services the
tests are skipped — unless CI is set, where a missing service fails the run.
"""

from __future__ import annotations

import os
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
import requests

from tests.services import REDIS_URL, scratch_postgres_database, service_unavailable


@pytest.fixture(scope="session")
def postgres_url() -> Iterator[str]:
    """A new, uniquely named PostgreSQL database for this session (no tables: the tests migrate it), dropped afterwards."""
    with scratch_postgres_database() as url:
        yield url


@pytest.fixture(scope="session")
def redis_prefix() -> Iterator[str]:
    """A unique key prefix (and queue name) in Redis for this session; its keys are deleted afterwards."""
    import redis

    client = redis.Redis.from_url(REDIS_URL)
    try:
        client.ping()
    except Exception as exc:  # noqa: BLE001
        client.close()
        service_unavailable(f"Redis at {REDIS_URL}", exc)
    prefix = f"fzt{uuid.uuid4().hex[:10]}"
    yield prefix
    for key in client.scan_iter(f"{prefix}*"):
        client.delete(key)
    client.close()


@dataclass
class LiveService:
    """The API served over HTTP in this process, with Celery workers in their own processes."""

    base_url: str
    app: Any
    env: dict[str, str]
    workers: list[subprocess.Popen[bytes]] = field(default_factory=list)
    tokens: dict[str, str] = field(default_factory=dict)

    def headers(self, who: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {self.tokens[who]}"}

    def wait_for_run(self, run_id: int, who: str = "reviewer", timeout: float = 120.0) -> dict[str, Any]:
        """Poll the API until the run is done or failed."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            run = requests.get(f"{self.base_url}/api/v1/runs/{run_id}", headers=self.headers(who), timeout=10).json()
            if run["state"] in ("done", "failed"):
                return run
            time.sleep(0.2)
        raise AssertionError(f"run {run_id} not finished within {timeout} s")


def start_workers(env: dict[str, str], log: Path, concurrency: int = 2, count: int = 1, app: str = "worker.celery_app") -> list[subprocess.Popen[bytes]]:
    """Start real Celery worker processes (prefork pool) of ``app`` and wait until they say they are ready."""
    celery = Path(sys.executable).with_name("celery")
    workers = []
    for n in range(count):
        path = log.with_name(f"{log.stem}-{n}.log")
        command = [
            str(celery),
            "-A",
            app,
            "worker",
            "--pool",
            "prefork",
            "-c",
            str(concurrency),
            "--loglevel",
            "INFO",
            "-n",
            f"{env['FEASIBILITY_QUEUE_PREFIX']}-{n}@%h",
            "--without-gossip",
            "--without-mingle",
            "--without-heartbeat",
        ]
        with path.open("wb") as handle:  # the child keeps its own copy of the descriptor
            workers.append(subprocess.Popen(command, env=env, stdout=handle, stderr=subprocess.STDOUT))
        deadline = time.monotonic() + 60
        while b"ready." not in path.read_bytes():
            if workers[-1].poll() is not None or time.monotonic() > deadline:
                stop_workers(workers)
                raise AssertionError(f"Celery worker did not start:\n{path.read_text()[-3000:]}")
            time.sleep(0.2)
    return workers


def stop_workers(workers: list[subprocess.Popen[bytes]]) -> None:
    """Warm shutdown (SIGTERM: finish the current tasks), then kill what is left."""
    for process in workers:
        if process.poll() is None:
            process.terminate()
    for process in workers:
        try:
            process.wait(30)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(10)


def serve_in_thread(app: Any) -> tuple[str, Callable[[], None]]:
    """Serve ``app`` with werkzeug's threaded server on a free port; returns the base URL and a stop function."""
    from werkzeug.serving import make_server

    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()

    def stop() -> None:
        server.shutdown()
        server.server_close()

    return f"http://127.0.0.1:{server.server_port}", stop


def service_env(postgres_url: str, redis_prefix: str) -> dict[str, str]:
    """The environment of the workers (and the in-process app): configuration by environment only."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("FEASIBILITY_")}
    env.update(
        DATABASE_URL=postgres_url,
        BROKER_URL=REDIS_URL,
        FEASIBILITY_QUEUE_PREFIX=redis_prefix,
        FEASIBILITY_QUEUED_TIMEOUT_S="5",
        FEASIBILITY_SWEEP_INTERVAL_S="5",
        FEASIBILITY_WEBHOOK_ALLOW_PRIVATE="true",  # the tests' webhook receivers listen on 127.0.0.1
        FEASIBILITY_HOME=os.environ.get("FEASIBILITY_HOME", "/tmp/feasibility-test-home"),
    )
    if "FEASIBILITY_CACHE_DIR" in os.environ:
        env["FEASIBILITY_CACHE_DIR"] = os.environ["FEASIBILITY_CACHE_DIR"]
    return env


@pytest.fixture(scope="session")
def live(postgres_url: str, redis_prefix: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[LiveService]:
    """Migrated store, demo observatory, two prefork worker processes, the API on a real port, and tokens."""
    from feasibility.store.db import session_scope
    from feasibility.store.migrate import upgrade
    from feasibility.web import create_app
    from feasibility.web.auth import create_token, create_user

    env = service_env(postgres_url, redis_prefix)
    upgrade(postgres_url)
    app = create_app(
        {
            "DATABASE_URL": postgres_url,
            "BROKER_URL": REDIS_URL,
            "QUEUE_PREFIX": redis_prefix,
            "QUEUED_TIMEOUT_S": 5,
            "SWEEP_INTERVAL_S": 5,
            "WEBHOOK_ALLOW_PRIVATE": True,
        }
    )
    tokens: dict[str, str] = {}
    with app.app_context(), session_scope() as session:
        for name, role in (("reviewer", "reviewer"), ("alice", "proposer"), ("bob", "proposer"), ("portal", "portal"), ("admin", "admin")):
            tokens[name] = create_token(session, create_user(session, name, role))
    workers = start_workers(env, tmp_path_factory.mktemp("workers") / "worker.log")
    base_url, stop = serve_in_thread(app)
    service = LiveService(base_url=base_url, app=app, env=env, workers=workers, tokens=tokens)
    yield service
    stop()
    stop_workers(workers)
    app.extensions["feasibility.db"]["engine"].dispose()
