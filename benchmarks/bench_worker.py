"""The worker's cost around the engine: check runs computed and stored in this process on PostgreSQL.

Invented proposals (as in ``bench_service.py``, five requests each) are stored
with queued runs in a new PostgreSQL database; the Celery batch task's body
(``check_runs``, called directly, no broker) then computes and stores them in
batches as the service cuts them. Printed per proposal: this process's CPU, the
CPU of the PostgreSQL server processes serving this database, the statements
and transactions sent, and the stored sizes (result JSON as text and on disk,
every table per 1,000 proposals).

Baseline, measured in the same run: the engine called directly on the same
proposals. ``beyond the engine`` is the worker's CPU per proposal less that; the
ratio is the worker's CPU over the engine's.

    python benchmarks/bench_worker.py [--proposals 300] [--profile out.prof]

Needs PostgreSQL (TEST_POSTGRES_URL as for the tests).
"""

from __future__ import annotations

import argparse
import cProfile
import os
import random
import sys
import time
import uuid
from pathlib import Path
from typing import Any

from sqlalchemy import create_engine, event, text
from sqlalchemy.engine import make_url

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_service import invented_proposals, store_sizes  # noqa: E402

POSTGRES_URL = os.environ.get("TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")


def main() -> None:
    """Run the benchmark and print its figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--proposals", type=int, default=300)
    parser.add_argument("--seed", type=int, default=2027)
    parser.add_argument("--profile", help="Write a cProfile of the worker's loop to this file.")
    args = parser.parse_args()
    os.environ.update(OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")

    name = f"feasibility_bench_{uuid.uuid4().hex[:10]}"
    url = make_url(POSTGRES_URL).set(database=name).render_as_string(hide_password=False)
    admin = create_engine(POSTGRES_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:
        connection.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        run(url, name, args)
    finally:
        with admin.connect() as connection:
            connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


def run(url: str, name: str, args: argparse.Namespace) -> None:
    from feasibility.documents import InstrumentSchedule, Observatory, Proposal, parse_document
    from feasibility.engine import check_proposal
    from feasibility.service.current import current_observatory, current_schedule
    from feasibility.service.dispatch import batches
    from feasibility.service.runtime import set_process_runtime
    from feasibility.service.startup import start_runtime
    from feasibility.service.submissions import submit
    from feasibility.settings import load_settings
    from feasibility.store.db import session_scope
    from feasibility.store.migrate import upgrade
    from worker.tasks import check_runs

    upgrade(url)
    settings = load_settings().with_values({"database_url": url, "broker_url": None, "seed_demo": True})
    runtime = start_runtime(settings, embedded_pool=False)
    set_process_runtime(runtime)
    proposals = invented_proposals(args.proposals + 1, random.Random(args.seed))
    ids = []
    with session_scope() as session:
        for document in proposals:
            ids.append(submit(session, document, None).run.id)
        observatory = parse_document(Observatory, current_observatory(session).document)
        version = current_schedule(session, proposals[0]["semester"])
        schedule = parse_document(InstrumentSchedule, version.document) if version is not None else None

    # Warm up (the sky grid, the documents' caches, the connections): one run, uncounted.
    check_runs.run(ids[:1])
    ids = ids[1:]
    documents = [parse_document(Proposal, p) for p in proposals[1:]]
    cpu = time.process_time()
    for document in documents:
        check_proposal(document, observatory, schedule)
    engine_cpu = (time.process_time() - cpu) / len(documents)

    # The engine's own CPU inside the loop, so that what the worker adds is measured on the same runs.
    from feasibility.service import runs

    engine_in_loop = [0.0]
    plain_check = runs.check

    def timed_check(*documents: Any) -> Any:
        start = time.thread_time()
        try:
            return plain_check(*documents)
        finally:
            engine_in_loop[0] += time.thread_time() - start

    runs.check = timed_check  # type: ignore[assignment]
    counts = {"statements": 0, "transactions": 0}
    engine = runtime.store.engine

    def statement(*_: Any) -> None:
        counts["statements"] += 1

    def commit(*_: Any) -> None:
        counts["transactions"] += 1

    event.listen(engine, "before_cursor_execute", statement)
    event.listen(engine, "commit", commit)
    database_before = _database_cpu(engine, name)
    profile = cProfile.Profile(time.process_time) if args.profile else None  # CPU time, as the figures
    cpu, wall = time.process_time(), time.perf_counter()
    if profile:
        profile.enable()
    ended: dict[str, int] = {}
    for batch in batches(ids):
        for how, n in check_runs.run(batch).items():
            ended[how] = ended.get(how, 0) + n
    if profile:
        profile.disable()
        profile.dump_stats(args.profile)
    worker_cpu = (time.process_time() - cpu) / len(ids)
    runs.check = plain_check  # type: ignore[assignment]
    engine_loop_cpu = engine_in_loop[0] / len(ids)
    wall_s = (time.perf_counter() - wall) / len(ids)
    database_cpu = (_database_cpu(engine, name) - database_before) / len(ids)
    event.remove(engine, "before_cursor_execute", statement)
    event.remove(engine, "commit", commit)
    sizes = store_sizes(engine)
    runtime.close()

    print(f"runs                          {len(ids)} (batches of {len(batches(ids)[0])}), ended: {ended}; load average {os.getloadavg()[0]:.2f}")
    print(f"baseline: engine in-process   {engine_cpu * 1000:.1f} ms CPU per proposal")
    print(
        f"worker CPU per proposal       {worker_cpu * 1000:.1f} ms, of which the engine {engine_loop_cpu * 1000:.1f} ms: "
        f"{(worker_cpu - engine_loop_cpu) * 1000:.1f} ms beyond it; wall {wall_s * 1000:.1f} ms"
    )
    print(f"ratio worker / engine CPU     {worker_cpu / engine_cpu:.2f}")
    print(f"PostgreSQL CPU per proposal   {database_cpu * 1000:.1f} ms (the server processes of this database)")
    print(f"statements per run            {counts['statements'] / len(ids):.2f}, transactions per run {counts['transactions'] / len(ids):.2f}")
    print(
        f"stored result JSON            {sizes['result_bytes'] / 1024:.1f} KB per proposal as text, {sizes['result_disk'] / 1024:.1f} KB on disk (pg_column_size)"
    )
    per_thousand = 1000.0 / (len(ids) + 1)
    print(
        f"database per 1,000 proposals  {sizes['total'] * per_thousand / 1024**2:.1f} MB ("
        + ", ".join(f"{table} {size * per_thousand / 1024**2:.1f} MB" for table, size in sizes["tables"][:4])
        + ")"
    )


def _database_cpu(engine: Any, name: str) -> float:
    """CPU seconds so far of the PostgreSQL server processes connected to database ``name`` (from /proc; same host)."""
    with engine.connect() as connection:
        pids = connection.execute(text("SELECT pid FROM pg_stat_activity WHERE datname = :name"), {"name": name}).scalars().all()
    tick = os.sysconf("SC_CLK_TCK")
    total = 0.0
    for pid in pids:
        try:
            raw = Path(f"/proc/{pid}/stat").read_text()
        except OSError:
            continue
        fields = raw[raw.rindex(")") + 2 :].split()
        total += (int(fields[11]) + int(fields[12])) / tick
    return total


if __name__ == "__main__":
    main()
