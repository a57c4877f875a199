"""Throughput of the whole service: proposals over HTTP to gunicorn, Celery workers, Redis and PostgreSQL.

Invented proposals (made from the demo proposals, with targets spread over the
sky) are submitted by concurrent clients. Printed: submissions accepted per
second, time until every verdict is stored, and lost or duplicated results.
Goals: none lost, none duplicated, every verdict within 60 s on two cores.
Also printed: the peak resident memory of each worker process (``VmHWM`` from
/proc), the stored result JSON per proposal, and the database's size per 1,000
proposals (``pg_total_relation_size`` of every table, and its largest tables).
The clock starts when the service is running and warmed up (a few proposals
checked first, uncounted, so every process has loaded the engine).

Baseline, measured in the same run: the engine called directly in this process,
as the workers call it (no plot series), on the first 200 of the same proposals; ``ideal`` is that per-proposal time times the
number of proposals over the number of worker processes. The ratio of the
service's time to the ideal is the cost of the service around the engine.

    python benchmarks/bench_service.py [--proposals 2000] [--clients 16] [--concurrency 2] [--bulk 50]

Needs PostgreSQL and Redis (TEST_POSTGRES_URL, TEST_REDIS_URL as for the tests).
"""

from __future__ import annotations

import argparse
import copy
import os
import random
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from concurrent.futures import ThreadPoolExecutor
from importlib import resources
from pathlib import Path
from typing import Any

import requests
import yaml
from sqlalchemy import create_engine, func, select, text
from sqlalchemy.engine import make_url

POSTGRES_URL = os.environ.get("TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")
REDIS_URL = os.environ.get("TEST_REDIS_URL", "redis://127.0.0.1:6379/0")
REQUESTS_PER_PROPOSAL = 5


def main() -> None:
    """Run the benchmark and print its figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--proposals", type=int, default=2000)
    parser.add_argument("--clients", type=int, default=16, help="Concurrent HTTP clients.")
    parser.add_argument("--concurrency", type=int, default=2, help="Celery worker processes.")
    parser.add_argument("--web-workers", type=int, default=2, help="gunicorn worker processes.")
    parser.add_argument("--timeout", type=float, default=900.0, help="Give up waiting for verdicts after this many seconds.")
    parser.add_argument("--seed", type=int, default=2027)
    parser.add_argument("--bulk", type=int, default=0, help="Submit this many proposals a request (POST /proposals/bulk); 0: one a request.")
    args = parser.parse_args()

    proposals = invented_proposals(args.proposals, random.Random(args.seed))
    n_requests = sum(len(p["requests"]) for p in proposals)
    baseline_s, baseline_cpu_s = engine_baseline(proposals[:200])
    with Service(args.concurrency, args.web_workers) as service:
        token = service.token("portal")
        service.warm_up(token, proposals[0], args.concurrency + args.web_workers)
        cpu_before = service.cpu_seconds()
        submit_s, statuses = submit_all(service.base_url, token, proposals, args.clients, args.bulk)
        done_at_submit_end = service.done_count()
        accepted = sum(1 for s in statuses if s in (200, 202))
        done_s = service.wait_all(len(proposals), args.timeout, start_offset=submit_s)
        cpu = {k: v - cpu_before[k] for k, v in service.cpu_seconds().items()}
        lost, duplicated, failed = service.audit(proposals)
        memory = service.worker_peak_mb()
        sizes = service.sizes()

    ideal = baseline_s * len(proposals) / args.concurrency
    how = f"{args.bulk} a request (bulk)" if args.bulk > 1 else "one a request"
    print(f"proposals submitted           {len(proposals)} ({n_requests} observation requests), {args.clients} clients, {how}")
    print(f"accepted                      {accepted} (statuses: {sorted(set(statuses))})")
    print(f"submissions accepted per s    {accepted / submit_s:.1f}  (all sent in {submit_s:.1f} s)")
    print(f"verdicts stored by then       {done_at_submit_end}")
    print(f"every verdict stored after    {done_s:.1f} s from the first submission" if done_s == done_s else "verdicts: timed out")
    print("CPU ms per proposal           " + ", ".join(f"{k} {v * 1000 / len(proposals):.0f}" for k, v in cpu.items()))
    print(f"lost / duplicated / failed    {lost} / {duplicated} / {failed}")
    print(f"baseline: engine in-process   {baseline_s * 1000:.0f} ms per proposal; ideal on {args.concurrency} processes {ideal:.1f} s")
    if done_s == done_s:
        print(f"ratio service / ideal         {done_s / ideal:.2f}  (goal: at most 3)")
    service_cpu = cpu["web"] + cpu["workers"] + cpu["PostgreSQL"]
    # Load from other programmes slows the service and the baseline alike but not evenly; CPU time is not slowed.
    print(
        f"CPU ratio                     {service_cpu / len(proposals) / baseline_cpu_s:.2f}  (web, workers and PostgreSQL CPU per proposal "
        f"over the engine's {baseline_cpu_s * 1000:.0f} ms in-process)"
    )
    print("peak memory per worker process " + ", ".join(f"{mb:.0f} MB" for mb in memory) + " (VmHWM; the first is Celery's parent)")
    per_thousand = 1000.0 / (len(proposals) + service.warmed)
    print(
        f"stored result JSON            {sizes['result_bytes'] / 1024:.1f} KB per proposal as text, {sizes['result_disk'] / 1024:.1f} KB on disk "
        "(pg_column_size, compressed; mean over done runs)"
    )
    print(
        f"database per 1,000 proposals  {sizes['total'] * per_thousand / 1024**2:.0f} MB (all tables with indexes and TOAST; "
        + ", ".join(f"{name} {size * per_thousand / 1024**2:.0f} MB" for name, size in sizes["tables"][:4])
        + ")"
    )
    print(
        f"goals: none lost {'met' if lost == 0 else 'MISSED'}, none duplicated {'met' if duplicated == 0 else 'MISSED'}, "
        f"within 60 s {'met' if done_s <= 60 else 'MISSED'}"
    )


def invented_proposals(count: int, rng: random.Random) -> list[dict[str, Any]]:
    """``count`` invented proposals of five requests each, the setups taken from the demo proposals, targets varied."""
    folder = resources.files("feasibility") / "data" / "proposals"
    demo = [yaml.safe_load(p.read_text()) for p in sorted(folder.iterdir(), key=lambda p: p.name) if p.name.endswith(".yaml")]
    pool = [(d, r) for d in demo for r in d["requests"]]
    out = []
    for i in range(count):
        base, _ = rng.choice(pool)
        proposal = copy.deepcopy({k: v for k, v in base.items() if k != "requests"})
        proposal["id"] = f"BENCH-{i:05d}"
        proposal["title"] = f"Invented benchmark programme {i}"
        proposal["requests"] = []
        for j in range(REQUESTS_PER_PROPOSAL):
            _, request = rng.choice(pool)
            request = copy.deepcopy(request)
            request["label"] = f"r{j}"
            # Targets spread over the sky seen from the southern demo site (many never rise: infeasible).
            request["target"] = {"name": f"Field {i}-{j}", "ra": round(rng.uniform(0, 360), 4), "dec": round(rng.uniform(-89, 45), 4)}
            proposal["requests"].append(request)
        out.append(proposal)
    return out


def engine_baseline(sample: list[dict[str, Any]]) -> tuple[float, float]:
    """Seconds per proposal (wall, CPU), the engine called directly as the workers call it (after one warm-up call that loads the sky grid)."""
    from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document
    from feasibility.engine import check_proposal

    data = resources.files("feasibility") / "data"
    observatory = load_document(Observatory, str(data / "observatory.yaml"))
    schedule = load_document(InstrumentSchedule, str(data / "schedule-2027A.yaml"))
    documents = [parse_document(Proposal, p) for p in sample]
    check_proposal(documents[0], observatory, schedule, series=False)
    start, cpu = time.perf_counter(), time.process_time()
    for document in documents:
        check_proposal(document, observatory, schedule, series=False)  # the call the workers make (runs.check)
    return (time.perf_counter() - start) / len(documents), (time.process_time() - cpu) / len(documents)


def submit_all(base_url: str, token: str, proposals: list[dict[str, Any]], clients: int, bulk: int = 0) -> tuple[float, list[int]]:
    """POST every proposal, ``clients`` requests at a time (``bulk`` > 1: that many a request); seconds taken and each proposal's status."""
    local = threading.local()
    size = max(bulk, 1)
    chunks = [proposals[i : i + size] for i in range(0, len(proposals), size)]

    def post(chunk: list[dict[str, Any]]) -> list[int]:
        if not hasattr(local, "session"):
            local.session = requests.Session()
            local.session.headers["Authorization"] = f"Bearer {token}"
        for attempt in range(3):
            try:
                if bulk > 1:
                    answer = local.session.post(f"{base_url}/api/v1/proposals/bulk", json={"proposals": chunk}, timeout=120)
                    if answer.status_code != 200:
                        return [answer.status_code] * len(chunk)
                    return [int(item["status"]) for item in answer.json()["items"]]
                return [local.session.post(f"{base_url}/api/v1/proposals", json=chunk[0], timeout=60).status_code]
            except requests.ConnectionError:
                time.sleep(0.2 * (attempt + 1))
        return [0] * len(chunk)

    start = time.perf_counter()
    with ThreadPoolExecutor(clients) as pool:
        statuses = [status for answer in pool.map(post, chunks) for status in answer]
    return time.perf_counter() - start, statuses


class Service:
    """A fresh PostgreSQL database and Redis prefix, gunicorn and Celery workers in subprocesses."""

    def __init__(self, concurrency: int, web_workers: int) -> None:
        self.concurrency = concurrency
        self.web_workers = web_workers
        self.name = f"feasibility_bench_{uuid.uuid4().hex[:10]}"
        self.prefix = f"fzb{uuid.uuid4().hex[:10]}"
        self.url = make_url(POSTGRES_URL).set(database=self.name).render_as_string(hide_password=False)
        self.processes: list[subprocess.Popen[bytes]] = []
        self.logs = Path(tempfile.mkdtemp(prefix="bench-service-"))
        self.start = 0.0
        self.warmed = 0

    def __enter__(self) -> Service:
        try:
            return self._start()
        except BaseException:
            self.__exit__()
            raise

    def _start(self) -> Service:
        admin = create_engine(POSTGRES_URL, isolation_level="AUTOCOMMIT")
        with admin.connect() as connection:
            connection.execute(text(f'CREATE DATABASE "{self.name}"'))
        admin.dispose()
        from feasibility.store.migrate import upgrade

        upgrade(self.url)
        env = {k: v for k, v in os.environ.items() if not k.startswith("FEASIBILITY_") or k == "FEASIBILITY_CACHE_DIR"}
        env.update(
            DATABASE_URL=self.url,
            BROKER_URL=REDIS_URL,
            FEASIBILITY_QUEUE_PREFIX=self.prefix,
            FEASIBILITY_SWEEP_INTERVAL_S="30",
            # The benchmark measures throughput with one token: its submissions must not meet the per-token rate limit.
            FEASIBILITY_RATE_LIMIT_SUBMISSIONS_PER_TOKEN="1000000 per minute",
        )
        # One process per core already: keep NumPy's BLAS from starting threads of its own in each.
        env.update(OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
        self.env = env
        bin_dir = Path(sys.executable).parent
        port = _free_port()
        self.base_url = f"http://127.0.0.1:{port}"
        self._spawn(
            [
                str(bin_dir / "celery"),
                "-A",
                "worker.celery_app",
                "worker",
                "--pool",
                "prefork",
                "-c",
                str(self.concurrency),
                "--loglevel",
                "WARNING",
                "-n",
                f"{self.prefix}@%h",
                "--without-gossip",
                "--without-mingle",
                "--without-heartbeat",
            ],
            "worker",
        )
        self._spawn(
            [
                str(bin_dir / "gunicorn"),
                "--bind",
                f"127.0.0.1:{port}",
                "--workers",
                str(self.web_workers),
                "--threads",
                "8",
                "--timeout",
                "120",
                "--log-level",
                "warning",
                "feasibility.web:create_app()",
            ],
            "web",
        )
        deadline = time.monotonic() + 60
        while True:
            try:
                if requests.get(f"{self.base_url}/api/v1/health", timeout=10).ok:
                    break
            except requests.RequestException:
                pass
            if time.monotonic() > deadline:
                raise SystemExit(f"the web app did not start; logs in {self.logs}")
            time.sleep(0.3)
        self.db = create_engine(self.url)
        return self

    def token(self, role: str) -> str:
        from feasibility.store.db import session_scope
        from feasibility.web import create_app
        from feasibility.web.auth import create_token, create_user

        app = create_app({"DATABASE_URL": self.url, "BROKER_URL": REDIS_URL, "QUEUE_PREFIX": self.prefix})
        with app.app_context(), session_scope() as session:
            return create_token(session, create_user(session, f"bench-{role}", role))

    def warm_up(self, token: str, model: dict[str, Any], count: int) -> None:
        """Have a few proposals checked (not counted) so that every process has loaded the engine, as in a running service."""
        session = requests.Session()
        session.headers["Authorization"] = f"Bearer {token}"
        for n in range(count):
            proposal = {**model, "id": f"WARM-UP-{n}"}
            answer = session.post(f"{self.base_url}/api/v1/proposals", json=proposal, timeout=120)
            answer.raise_for_status()
        deadline = time.monotonic() + 120
        while self.done_count() < count:
            if time.monotonic() > deadline:
                raise SystemExit(f"the workers did not start; logs in {self.logs}")
            time.sleep(0.2)
        self.warmed = count

    def done_count(self) -> int:
        """How many runs are finished (done or failed), not counting the warm-up's."""
        from feasibility.store.models import CheckRun

        with self.db.connect() as connection:
            done = connection.execute(select(func.count()).select_from(CheckRun).where(CheckRun.state.in_(["done", "failed"]))).scalar()
        return int(done or 0) - self.warmed

    def cpu_seconds(self) -> dict[str, float]:
        """CPU seconds used so far by the web processes, the workers, this client and PostgreSQL (all its processes, any database)."""
        table = _process_table()
        worker, web = (sum(table[pid][1] for pid in _descendants(table, process.pid)) for process in self.processes)  # spawned in that order
        client = table[os.getpid()][1]
        database = sum(cpu for _, cpu, name in table.values() if name == "postgres")
        return {"web": web, "workers": worker, "client": client, "PostgreSQL": database}

    def wait_all(self, expected: int, timeout: float, start_offset: float) -> float:
        """Seconds from the first submission until ``expected`` runs are done (NaN on timeout)."""
        begin = time.perf_counter() - start_offset
        while time.perf_counter() - begin < timeout:
            if self.done_count() >= expected:
                return time.perf_counter() - begin
            time.sleep(0.25)
        return float("nan")

    def audit(self, proposals: list[dict[str, Any]]) -> tuple[int, int, int]:
        """Lost: proposals without a done run. Duplicated: extra runs, or stored request rows beyond the requests. Failed runs."""
        from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion, RequestOutcome

        with self.db.connect() as connection:
            done = dict(
                connection.execute(
                    select(ProposalRecord.proposal_id, func.count(CheckRun.id))
                    .join(ProposalVersion, ProposalVersion.proposal_ref == ProposalRecord.id)
                    .join(CheckRun, CheckRun.proposal_version_id == ProposalVersion.id)
                    .where(CheckRun.state == "done")
                    .group_by(ProposalRecord.proposal_id)
                ).all()
            )
            outcomes = dict(connection.execute(select(RequestOutcome.run_id, func.count()).group_by(RequestOutcome.run_id)).all())
            failed = connection.execute(select(func.count()).select_from(CheckRun).where(CheckRun.state == "failed")).scalar() or 0
        lost = sum(1 for p in proposals if done.get(p["id"], 0) == 0)
        duplicated = sum(n - 1 for n in done.values() if n > 1) + sum(1 for n in outcomes.values() if n > REQUESTS_PER_PROPOSAL)
        return lost, duplicated, int(failed)

    def worker_peak_mb(self) -> list[float]:
        """Peak resident memory (MB) of the Celery parent and each of its worker processes, from /proc's VmHWM."""
        table = _process_table()
        peaks = []
        for pid in sorted(_descendants(table, self.processes[0].pid)):
            try:
                status = Path(f"/proc/{pid}/status").read_text()
            except OSError:
                continue
            for line in status.splitlines():
                if line.startswith("VmHWM:"):
                    peaks.append(int(line.split()[1]) / 1024.0)
        return peaks

    def sizes(self) -> dict[str, Any]:
        """Bytes on disk of the store (:func:`store_sizes`)."""
        return store_sizes(self.db)

    def __exit__(self, *exc: object) -> None:
        for process in self.processes:
            process.terminate()
        for process in self.processes:
            try:
                process.wait(30)
            except subprocess.TimeoutExpired:
                process.kill()
        if hasattr(self, "db"):
            self.db.dispose()
        admin = create_engine(POSTGRES_URL, isolation_level="AUTOCOMMIT")
        with admin.connect() as connection:
            connection.execute(text(f'DROP DATABASE IF EXISTS "{self.name}" WITH (FORCE)'))
        admin.dispose()
        import redis

        client = redis.Redis.from_url(REDIS_URL)
        for key in client.scan_iter(f"{self.prefix}*"):
            client.delete(key)
        client.close()
        shutil.rmtree(self.logs, ignore_errors=True)

    def _spawn(self, command: list[str], name: str) -> None:
        with (self.logs / f"{name}.log").open("wb") as handle:
            self.processes.append(subprocess.Popen(command, env=self.env, stdout=handle, stderr=subprocess.STDOUT))


def store_sizes(db: Any) -> dict[str, Any]:
    """Bytes on disk: every table (pg_total_relation_size: data, indexes, TOAST), the largest first, and the mean
    stored result JSON of the done runs."""
    with db.connect() as connection:
        rows = connection.execute(
            text(
                "SELECT c.relname, pg_total_relation_size(c.oid) FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace "
                "WHERE c.relkind = 'r' AND n.nspname = 'public' ORDER BY 2 DESC"
            )
        ).all()
        result_bytes, result_disk = connection.execute(
            text("SELECT avg(octet_length(result::text)), avg(pg_column_size(result)) FROM check_runs WHERE state = 'done'")
        ).one()
    tables = [(str(name), int(size)) for name, size in rows]
    return {
        "tables": tables,
        "total": sum(size for _, size in tables),
        "result_bytes": float(result_bytes or 0.0),
        "result_disk": float(result_disk or 0.0),
    }


def _process_table() -> dict[int, tuple[int, float, str]]:
    """Every process's parent, CPU seconds (user + system) and command name, from /proc (Linux)."""
    tick = os.sysconf("SC_CLK_TCK")
    table: dict[int, tuple[int, float, str]] = {}
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            raw = (entry / "stat").read_text()
        except OSError:
            continue
        name = raw[raw.index("(") + 1 : raw.rindex(")")]
        fields = raw[raw.rindex(")") + 2 :].split()
        table[int(entry.name)] = (int(fields[1]), (int(fields[11]) + int(fields[12])) / tick, name)
    return table


def _descendants(table: dict[int, tuple[int, float, str]], root: int) -> set[int]:
    found = {root} if root in table else set()
    grew = True
    while grew:
        more = {pid for pid, (parent, _, _) in table.items() if parent in found and pid not in found}
        found |= more
        grew = bool(more)
    return found


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


if __name__ == "__main__":
    main()
