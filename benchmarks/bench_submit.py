"""What a submission costs the web process and the store: CPU and SQL statements per proposal, single and bulk.

Invented proposals (as in bench_service.py: five requests each, targets spread
over the sky) are posted through the Flask test client to the app on a fresh
PostgreSQL database, with Redis as the broker and the rate limiter's store, as
in production (nothing computes the runs: only the submission path is timed).
Printed, per proposal: the CPU time of this process (client and app: the test
client's own share is small), the SQL statements the app ran (a SQLAlchemy
``before_cursor_execute`` listener), and the CPU of every PostgreSQL process of
the machine (other programs' queries count too: a rough figure). Identical
content sent again is timed too (the runs are found, not stored).

Baseline, measured in the same run: reading the same proposals' JSON and
validating them against the observatory (documents.proposal_problems.read_proposal),
the work a submission cannot avoid; ``ratio`` is the submission's CPU over it.

    python benchmarks/bench_submit.py [--proposals 1000] [--bulk 50]

Needs PostgreSQL and Redis (TEST_POSTGRES_URL, TEST_REDIS_URL as for the tests).
"""

from __future__ import annotations

import argparse
import json
import random
import time
import uuid
from collections.abc import Callable
from importlib import resources
from typing import Any

from bench_service import POSTGRES_URL, REDIS_URL, _process_table, invented_proposals
from sqlalchemy import create_engine, event, text
from sqlalchemy.engine import make_url


def main() -> None:
    """Run the benchmark and print its figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--proposals", type=int, default=1000)
    parser.add_argument("--bulk", type=int, default=50, help="Proposals a bulk request.")
    parser.add_argument("--seed", type=int, default=2027)
    args = parser.parse_args()
    proposals = invented_proposals(args.proposals * 2 + 10, random.Random(args.seed))
    baseline = validation_baseline(proposals[: args.proposals])
    name, prefix = f"feasibility_submit_{uuid.uuid4().hex[:10]}", f"fzs{uuid.uuid4().hex[:10]}"
    admin = create_engine(POSTGRES_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:
        connection.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        url = make_url(POSTGRES_URL).set(database=name).render_as_string(hide_password=False)
        post, statements, close = _client(url, prefix)
        post(proposals[-10:], 0)  # warm up: the token's user, the observatory parsed, every statement compiled once
        print(f"baseline: read and validate   {baseline * 1000:.2f} ms CPU per proposal")
        for label, chunk, bulk in (
            ("single", proposals[: args.proposals], 0),
            ("single, identical again", proposals[: args.proposals], 0),
            (f"bulk of {args.bulk}", proposals[args.proposals : 2 * args.proposals], args.bulk),
            (f"bulk of {args.bulk}, identical again", proposals[args.proposals : 2 * args.proposals], args.bulk),
        ):
            statements.clear()
            cpu, database = time.process_time(), _postgres_cpu()
            post(chunk, bulk)
            cpu, database = (time.process_time() - cpu) / len(chunk), (_postgres_cpu() - database) / len(chunk)
            print(
                f"{label:<30}{cpu * 1000:.2f} ms CPU per proposal (ratio {cpu / baseline:.1f}), "
                f"{len(statements) / len(chunk):.2f} statements, PostgreSQL {database * 1000:.2f} ms"
            )
        close()
    finally:
        with admin.connect() as connection:
            connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()
        _forget_keys(prefix)


def validation_baseline(proposals: list[dict[str, Any]]) -> float:
    """CPU seconds per proposal to read its JSON text and validate it against the demo observatory."""
    from feasibility.documents import Observatory, load_document
    from feasibility.documents.proposal_problems import read_proposal
    from feasibility.documents.reading import read_data

    observatory = load_document(Observatory, str(resources.files("feasibility") / "data" / "observatory.yaml"))
    texts = [json.dumps(p).encode() for p in proposals]
    start = time.process_time()
    for raw in texts:
        read_proposal(read_data(raw, "proposal"), observatory)
    return (time.process_time() - start) / len(texts)


def _client(url: str, prefix: str) -> tuple[Callable[[list[dict[str, Any]], int], None], list[str], Callable[[], None]]:
    """A function posting proposals (one a request, or ``bulk`` a request) to a new app on ``url``; its statements; a closer."""
    from feasibility.store.db import session_scope
    from feasibility.store.migrate import upgrade
    from feasibility.web import create_app, settle_for_serving
    from feasibility.web.auth import create_token, create_user

    upgrade(url)
    app = create_app(
        {"DATABASE_URL": url, "BROKER_URL": REDIS_URL, "QUEUE_PREFIX": prefix, "SWEEP_INTERVAL_S": 0, "RATE_LIMIT_SUBMISSIONS_PER_TOKEN": "1000000 per minute"}
    )
    settle_for_serving()  # as the app does when a server builds it
    with app.app_context(), session_scope() as session:
        headers = {"Authorization": f"Bearer {create_token(session, create_user(session, 'bench-portal', 'portal'))}"}
    statements: list[str] = []
    event.listen(app.extensions["feasibility.db"].engine, "before_cursor_execute", lambda *a: statements.append(a[2]))
    client = app.test_client()

    def post(chunk: list[dict[str, Any]], bulk: int) -> None:
        if not bulk:
            for proposal in chunk:
                assert client.post("/api/v1/proposals", json=proposal, headers=headers).status_code in (200, 202)
            return
        for i in range(0, len(chunk), bulk):
            answer = client.post("/api/v1/proposals/bulk", json={"proposals": chunk[i : i + bulk]}, headers=headers)
            assert answer.status_code == 200 and answer.json is not None and answer.json["rejected"] == 0, answer.json

    return post, statements, lambda: app.extensions["feasibility.db"].dispose()


def _postgres_cpu() -> float:
    """CPU seconds used so far by every process named postgres."""
    return sum(cpu for _, cpu, name in _process_table().values() if name == "postgres")


def _forget_keys(prefix: str) -> None:
    import redis

    client = redis.Redis.from_url(REDIS_URL)
    for key in client.scan_iter(f"*{prefix}*"):
        client.delete(key)
    client.close()


if __name__ == "__main__":
    main()
