"""Targeted re-checks against re-checking everything, after one instrument loses a week.

A semester of invented proposals (2,000 by default; a third each for KESTREL,
HERON and OWL, one in ten using two instruments) is stored with finished runs.
HERON then loses a week (seven of its open nights become engineering nights).
In the same run this script times

- targeted: uploading the new schedule, planning the re-checks (only proposals
  with a HERON request), and computing those re-checks with the engine and
  storing them (``execute_run``);
- everything: computing and storing a re-check of every proposal, which is what
  a service without targeting would do,

and prints both times and their ratio. ``--proposals`` makes it smaller;
``--stand-in`` replaces the engine by a trivial one to time the service's own
overhead only.

Usage: python benchmarks/bench_recheck.py [--proposals 2000] [--stand-in]
"""

from __future__ import annotations

import argparse
import random
import tempfile
import time
from importlib import resources
from pathlib import Path
from typing import Any

import yaml

__all__ = ["main"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--proposals", type=int, default=2000, help="proposals in the semester (default 2000)")
    parser.add_argument("--stand-in", action="store_true", help="replace the engine by a trivial stand-in")
    parser.add_argument("--seed", type=int, default=2027)
    args = parser.parse_args()

    from feasibility.store import db
    from feasibility.store.models import Base

    with tempfile.TemporaryDirectory() as folder:
        engine = db.configure(f"sqlite:///{Path(folder) / 'bench.sqlite'}")
        Base.metadata.create_all(engine)
        if args.stand_in:
            _use_stand_in()
        documents = _semester(args.proposals, random.Random(args.seed))
        _store(documents)
        _warm_up(documents[0])

        t0 = time.perf_counter()
        upload = _upload(_heron_loses_a_week())
        planned = time.perf_counter() - t0
        _execute(upload.plan.run_ids)
        targeted = time.perf_counter() - t0

        everything_ids = _rechecks_of_all()
        t1 = time.perf_counter()
        _execute(everything_ids)
        everything = time.perf_counter() - t1
        engine.dispose()

    n = len(documents)
    print(f"proposals in the semester: {n}; HERON lost {len(upload.diff.changes) if upload.diff else 0} nights")
    print(f"targeted re-check: {upload.plan.queued} proposals in {targeted:.2f} s (of which upload and planning {planned:.3f} s)")
    print(f"re-check of all:   {len(everything_ids)} proposals in {everything:.2f} s")
    print(f"ratio all / targeted: {everything / targeted:.2f}x")


def _semester(count: int, rng: random.Random) -> list[dict[str, Any]]:
    """Invented proposals with targets spread over the sky seen from the demo site."""
    setups = {
        "KESTREL": ({"filter": "V"}, "V"),
        "HERON": ({"grating": "R600", "slit_arcsec": 1.2, "central_wavelength_nm": 650}, "V"),
        "OWL": ({"filter": "J"}, "J"),
    }
    names = list(setups)
    documents = []
    for i in range(count):
        instruments = [names[i % 3]] + ([names[(i + 1) % 3]] if i % 10 == 0 else [])
        requests = []
        for j, name in enumerate(instruments):
            setup, band = setups[name]
            requests.append(
                {
                    "label": f"r{j}",
                    "target": {"name": f"Bench target {i}-{j}", "ra": round(rng.uniform(0, 359.9), 4), "dec": round(rng.uniform(-80, 20), 4)},
                    "instrument": name,
                    "setup": dict(setup),
                    "brightness": {"magnitude": round(rng.uniform(12, 20), 2), "band": band},
                    "goal": {"snr": rng.choice([10, 20, 50])},
                    "hours_requested": rng.choice([1.0, 2.0, 4.0, 8.0]),
                }
            )
        documents.append(
            {
                "id": f"BENCH-{i:05d}",
                "semester": "2027A",
                "title": f"Bench proposal {i}",
                "pi": {"name": "Bench Person", "email": "bench@example.org"},
                "requests": requests,
            }
        )
    return documents


def _store(documents: list[dict[str, Any]]) -> None:
    """The demo observatory and schedule, and every proposal with a finished run (figures left out)."""
    from feasibility.service.current import seed_demo
    from feasibility.service.submissions import submit
    from feasibility.store.db import session_scope
    from feasibility.store.models import utcnow

    with session_scope() as session:
        seed_demo(session)
        for document in documents:
            run = submit(session, document, None).run
            run.state, run.verdict, run.finished_at = "done", "feasible", utcnow()
            run.result = {"proposal_id": document["id"], "verdict": "feasible", "requests": []}


def _heron_loses_a_week() -> dict[str, Any]:
    text = (resources.files("feasibility") / "data" / "schedule-2027A.yaml").read_text()
    schedule = yaml.safe_load(text)
    schedule["version"] = "2027A-bench"
    heron = [n for n in schedule["nights"] if n.get("instrument") == "HERON" and n.get("status", "open") == "open"]
    for night in heron[10:17]:
        night["status"] = "engineering"
        night["note"] = "HERON off for repair"
    return schedule


def _upload(schedule: dict[str, Any]) -> Any:
    from feasibility.service.rechecks import upload_schedule
    from feasibility.store.db import session_scope

    with session_scope() as session:
        return upload_schedule(session, schedule)


def _rechecks_of_all() -> list[int]:
    """Runs for every proposal as if the service re-checked everything (new engine version: new run rows)."""
    from unittest import mock

    from feasibility.service.rechecks import plan_rechecks
    from feasibility.store.db import session_scope

    with (
        mock.patch("feasibility.service.rechecks.engine_version", lambda: "bench-all"),
        mock.patch("feasibility.service.submissions.engine_version", lambda: "bench-all"),
        session_scope() as session,
    ):
        return plan_rechecks(session, triggers={"engine"}).run_ids


def _execute(run_ids: list[int]) -> None:
    from feasibility.service.runs import execute_run

    for run_id in run_ids:
        state = execute_run(run_id)
        if state != "done":
            raise SystemExit(f"run {run_id} ended {state}")


def _warm_up(document: dict[str, Any]) -> None:
    """Build the semester's sky grid once before timing (both measurements would share it)."""
    from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document
    from feasibility.service.runs import check

    data = resources.files("feasibility") / "data"
    check(
        parse_document(Proposal, document),
        load_document(Observatory, data / "observatory.yaml"),
        load_document(InstrumentSchedule, data / "schedule-2027A.yaml"),
    )


def _use_stand_in() -> None:
    import feasibility.service.runs as runs
    from feasibility.results import Level, ProposalResult, RequestResult

    def stand_in(proposal: Any, observatory: Any, schedule: Any) -> ProposalResult:
        requests = [
            RequestResult(label=r.label, instrument=r.instrument, target=r.target.name, verdict=Level.FEASIBLE, findings=[], figures={"hours_observable": 10.0})
            for r in proposal.requests
        ]
        return ProposalResult(
            proposal_id=proposal.id,
            semester=proposal.semester,
            verdict=Level.FEASIBLE,
            requests=requests,
            engine_version="stand-in",
            observatory=observatory.name,
            observatory_version=observatory.version,
            schedule_version=schedule.version if schedule else None,
            computed_at="2027-01-01T00:00:00+00:00",
        )

    runs.check = stand_in  # type: ignore[assignment]


if __name__ == "__main__":
    main()
