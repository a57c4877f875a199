"""Speed of the dashboard's proposal list over a large semester: SQL-side filters, sorting and paging.

A store is filled with invented proposals (each with two finished check runs of
two observation requests and three findings each), then one page of the list is
read, filtered by a check with a problem and sorted by verdict, as the reviewer's
page does it; the count of matching proposals and the whole CSV-style export
are timed too.

Baseline, measured in the same run: the same answer computed the naive way,
loading every proposal's latest run with its outcomes and findings into Python
and filtering and sorting there. The ratio baseline / SQL is printed. Goal: one
page of a 5000-proposal semester in well under a second on SQLite.

    python benchmarks/bench_dashboard.py [--proposals 5000] [--url sqlite:///...]
"""

from __future__ import annotations

import argparse
import random
import tempfile
import time
from datetime import timedelta
from pathlib import Path

from sqlalchemy import insert, select
from sqlalchemy.orm import Session, selectinload

from feasibility.store.db import make_engine
from feasibility.store.models import (
    Base,
    CheckRun,
    FindingRow,
    ObservatoryVersion,
    ProposalRecord,
    ProposalVersion,
    RequestOutcome,
    User,
    utcnow,
)
from feasibility.web.dashboard.queries import LEVELS, ListQuery, count_rows, iter_rows, list_rows

CHECKS = ("visibility", "moon", "sensitivity")


def main() -> None:
    """Fill a store, time the list's queries and the naive baseline, print figures and the ratio."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--proposals", type=int, default=5000)
    parser.add_argument("--url", default=None, help="database URL (default: a temporary SQLite file)")
    args = parser.parse_args()
    url = args.url or f"sqlite:///{Path(tempfile.mkdtemp()) / 'bench.sqlite'}"
    engine = make_engine(url)
    Base.metadata.create_all(engine)
    started = time.perf_counter()
    with Session(engine) as session:
        reviewer = _fill(session, args.proposals)
    print(f"filled {args.proposals} proposals in {time.perf_counter() - started:.1f} s")

    query = ListQuery(semester="2099A", check="moon", sort="verdict", descending=True, page=3, per_page=50)
    with Session(engine) as session:
        user = session.get_one(User, reviewer)
        page_s, rows = _best(lambda: list_rows(session, user, query))
        count_s, total = _best(lambda: count_rows(session, user, query))
        export_s, exported = _best(lambda: sum(1 for _ in iter_rows(session, user, query)))
        overview_s, summary = _best(lambda: _overview_sums(session))
        naive_s, naive = _best(lambda: _naive_page(session, query), repeat=1)
    assert [r.proposal_id for r in rows] == naive, "the SQL page and the naive page differ"
    assert exported == total
    print(f"one page (50 of {total} matching): {page_s * 1000:.1f} ms")
    print(f"count of matching proposals:      {count_s * 1000:.1f} ms")
    print(f"whole filtered export ({exported} rows): {export_s * 1000:.1f} ms")
    print(f"semester overview sums ({summary.proposals} proposals): {overview_s * 1000:.1f} ms")
    print(f"naive baseline (all in Python):   {naive_s * 1000:.1f} ms")
    print(f"ratio baseline / SQL page:        {naive_s / page_s:.1f}")


def _fill(session: Session, n: int) -> int:
    rng = random.Random(7)
    reviewer = User(name="bench-reviewer", role="reviewer")
    observatory = ObservatoryVersion(name="Invented", version_label="1", content_hash="0" * 64, document={})
    session.add_all([reviewer, observatory])
    session.flush()
    now = utcnow()
    session.execute(insert(ProposalRecord), [{"id": i + 1, "proposal_id": f"B-{i:05d}", "semester": "2099A"} for i in range(n)])
    session.execute(
        insert(ProposalVersion),
        [
            {"id": i + 1, "proposal_ref": i + 1, "content_hash": f"{i:064d}", "document": {}, "title": f"Invented programme {i}",
             "pi_name": f"Person {i % 700}", "instruments": rng.choice(["KESTREL", "HERON", "OWL", "HERON,KESTREL"]),
             "targets": f"Field {i}\nField {i}b", "hours_requested": round(rng.uniform(0.5, 30), 1)}
            for i in range(n)
        ],
    )
    runs, outcomes, findings = [], [], []
    for i in range(n):
        for k in range(2):  # an older and a newer finished run
            run_id = 2 * i + k + 1
            verdict = rng.choice(LEVELS)
            runs.append({"id": run_id, "proposal_version_id": i + 1, "observatory_version_id": observatory.id, "schedule_key": k,
                         "engine_version": "bench", "state": "done", "verdict": verdict, "result": {},
                         "finished_at": now - timedelta(days=2 - k)})
            for r in range(2):
                outcome_id = 2 * run_id + r
                outcomes.append({"id": outcome_id, "run_id": run_id, "label": "ab"[r], "instrument": "KESTREL", "target": f"Field {i}",
                                 "verdict": verdict, "hours_requested": 2.0, "figures": {}})
                for check in CHECKS:
                    level = verdict if check == "moon" else "feasible"
                    findings.append({"outcome_id": outcome_id, "check": check, "level": level, "message": "m", "figures": {}})
    session.execute(insert(CheckRun), runs)
    session.execute(insert(RequestOutcome), outcomes)
    session.execute(insert(FindingRow), findings)
    session.commit()
    return reviewer.id


def _overview_sums(session: Session):  # type: ignore[no-untyped-def]
    """The overview's sums (verdict counts, hours per instrument, demand by right ascension), without the sky side."""
    from feasibility.web.dashboard import overview

    real = overview.current_observatory
    overview.current_observatory = lambda _session: None  # the invented store has no usable observatory description
    try:
        return overview.semester_overview(session, "2099A")
    finally:
        overview.current_observatory = real


def _naive_page(session: Session, query: ListQuery) -> list[str]:
    """Every proposal's latest run with its outcomes and findings loaded into Python; filter, sort, slice there."""
    records = session.scalars(select(ProposalRecord).where(ProposalRecord.semester == query.semester)).all()
    rows = []
    for record in records:
        runs = session.scalars(
            select(CheckRun)
            .join(ProposalVersion, ProposalVersion.id == CheckRun.proposal_version_id)
            .where(ProposalVersion.proposal_ref == record.id, CheckRun.state == "done")
            .options(selectinload(CheckRun.outcomes).selectinload(RequestOutcome.findings))
        ).all()
        latest = max(runs, key=lambda r: (r.finished_at, r.id))
        if any(f.check == query.check and f.level != "feasible" for o in latest.outcomes for f in o.findings):
            rows.append((LEVELS.index(latest.verdict), record.proposal_id))
    rows.sort(key=lambda item: (item[0], item[1]), reverse=True)
    start = (query.page - 1) * query.per_page
    return [proposal_id for _, proposal_id in rows[start : start + query.per_page]]


def _best(call, repeat: int = 3):  # type: ignore[no-untyped-def]
    """The fastest of ``repeat`` calls (seconds) and its result."""
    best, result = float("inf"), None
    for _ in range(repeat):
        started = time.perf_counter()
        result = call()
        best = min(best, time.perf_counter() - started)
    return best, result


if __name__ == "__main__":
    main()
