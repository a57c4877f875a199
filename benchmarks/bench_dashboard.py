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

The meeting packet: six demo proposals are checked by the real engine in a
second store, and the semester's packet PDF is made three ways in the same run:
the old way (baseline: every plot drawn anew and laid with the text on
matplotlib PDF pages, as the packet was made before), the first packet after
start-up (plots drawn and kept) and the packet again (plots reused). Goal: the
packet again in a few seconds; the ratios old / first and old / again are printed.

    python benchmarks/bench_dashboard.py [--proposals 5000] [--url sqlite:///...] [--packet-only | --no-packet]
"""

from __future__ import annotations

import argparse
import io
import random
import tempfile
import textwrap
import time
from datetime import timedelta
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
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


def main() -> None:
    """Fill a store, time the list's queries and the naive baseline, print figures and the ratio."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--proposals", type=int, default=5000)
    parser.add_argument("--url", default=None, help="database URL (default: a temporary SQLite file)")
    parser.add_argument("--packet-only", action="store_true", help="time only the meeting packet")
    parser.add_argument("--no-packet", action="store_true", help="skip the meeting packet")
    args = parser.parse_args()
    if not args.packet_only:
        _list_figures(args)
    if not args.no_packet:
        _packet_figures()


def _list_figures(args: argparse.Namespace) -> None:
    """The list's page, count, export and overview sums against the naive baseline."""
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


def _packet_figures() -> None:
    """Six checked demo proposals; the semester packet the old way, first after start-up, and again."""
    from feasibility.web.dashboard import packet, packet_plots

    app, user_id = _checked_demo_store()
    query = ListQuery(semester="2027A")

    def make() -> bytes:
        with app.test_request_context(), Session(app.extensions["feasibility.db"]["engine"]) as session:
            return packet.semester_pdf(session, session.get_one(User, user_id), query)

    def every_plot_anew(run, item, kinds):  # type: ignore[no-untyped-def]
        return packet_plots.request_images(None, item, kinds)  # no run: nothing kept, nothing reused

    real = packet.PacketWriter, packet.request_images
    packet.PacketWriter, packet.request_images = _MatplotlibPages, every_plot_anew  # type: ignore[assignment,misc]
    try:
        old_s, old_pdf = _best(make, repeat=1)
    finally:
        packet.PacketWriter, packet.request_images = real  # type: ignore[misc]
    packet_plots.clear()
    first_s, first_pdf = _best(make, repeat=1)
    again_s, again_pdf = _best(make, repeat=2)
    assert min(len(old_pdf), len(first_pdf), len(again_pdf)) > 10_000 and packet_plots.stats()["reused"] > 0
    print(f"meeting packet, six proposals, the old way (baseline): {old_s:.2f} s")
    print(f"meeting packet, first after start-up (plots drawn):   {first_s:.2f} s  (ratio old / first {old_s / first_s:.1f})")
    print(f"meeting packet, again (plots reused):                  {again_s:.2f} s  (ratio old / again {old_s / again_s:.1f})")


def _checked_demo_store():  # type: ignore[no-untyped-def]
    """An app on a temporary SQLite store with demo proposals 001-006 checked by the real engine; the app and a reviewer's id."""
    from importlib import resources

    import yaml

    from feasibility.service.runs import execute_run
    from feasibility.service.submissions import submit
    from feasibility.store.db import session_scope
    from feasibility.web import create_app

    home = Path(tempfile.mkdtemp())
    app = create_app(
        {
            "SECRET_KEY": "bench",
            "DATABASE_URL": f"sqlite:///{home / 'packet.sqlite'}",
            "CREATE_TABLES": True,
            "BROKER_URL": None,
            "SWEEP_INTERVAL_S": 0,
            "EMBEDDED_WORKERS": 0,
        }
    )
    started = time.perf_counter()
    with app.app_context():
        with session_scope() as session:
            reviewer = User(name="bench-reviewer", role="reviewer")
            session.add(reviewer)
            session.flush()
            user_id = reviewer.id
        for number in ("001", "002", "003", "004", "005", "006"):
            path = resources.files("feasibility") / "data" / "proposals" / f"SQ-2027A-{number}.yaml"
            with session_scope() as session:
                run_id = submit(session, yaml.safe_load(path.read_text(encoding="utf-8")), None).run.id
            assert execute_run(run_id) == "done", number
    print(f"checked six demo proposals in {time.perf_counter() - started:.1f} s")
    return app, user_id


class _MatplotlibPages:
    """The packet's pages as they were made before (the baseline): matplotlib figures of text, plots resampled onto them."""

    def __init__(self, title: str) -> None:
        from matplotlib.backends.backend_pdf import PdfPages

        self._buffer = io.BytesIO()
        self._pdf = PdfPages(self._buffer, metadata={"Title": title, "CreationDate": None, "ModDate": None})
        self._fig: Figure | None = None
        self._y = 0.0
        self.pages = 0
        self._title = title

    def new_page(self) -> None:
        self._finish_page()
        self._fig = Figure(figsize=(8.27, 11.69))
        self._y = 0.94
        self.pages += 1

    def heading(self, text: str, size: float = 15) -> None:
        self.line(text, size=size, weight="bold")

    def line(
        self,
        text: str,
        *,
        size: float = 9.5,
        weight: str = "normal",
        indent: float = 0.0,
        mono: bool = False,
        colour: str = "#111111",
        space_after: float = 0.0,
    ) -> None:
        width = int((0.84 - indent) * 8.27 * 72 / (size * (0.6 if mono else 0.52)))
        for part in textwrap.wrap(text, width=max(width, 20)) or [""]:
            step = size * 1.4 / 72 / 11.69
            self._room(step)
            assert self._fig is not None
            self._fig.text(0.08 + indent, self._y, part, fontsize=size, weight=weight, va="top", color=colour, family="monospace" if mono else "sans-serif")
            self._y -= step
        self._y -= space_after * size / 72 / 11.69

    def gap(self, lines: float = 0.6) -> None:
        self._y -= lines * 9.5 * 1.4 / 72 / 11.69

    def image(self, pixels: np.ndarray) -> None:
        height = 0.84 * 8.27 / 11.69 * pixels.shape[0] / pixels.shape[1]
        self._room(height + 0.01)
        assert self._fig is not None
        axes = self._fig.add_axes((0.08, self._y - height, 0.84, height))
        axes.imshow(pixels, interpolation="antialiased")
        axes.set_axis_off()
        self._y -= height + 0.015

    def finish(self) -> bytes:
        self._finish_page()
        self._pdf.close()
        return self._buffer.getvalue()

    def _room(self, needed: float) -> None:
        if self._fig is None or self._y - needed < 0.06:
            self.new_page()

    def _finish_page(self) -> None:
        if self._fig is not None:
            self._fig.text(0.5, 0.03, f"{self._title} · page {self.pages}", fontsize=7, ha="center")
            self._pdf.savefig(self._fig)
            self._fig = None


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
            {
                "id": i + 1,
                "proposal_ref": i + 1,
                "content_hash": f"{i:064d}",
                "document": {},
                "title": f"Invented programme {i}",
                "pi_name": f"Person {i % 700}",
                "instruments": rng.choice(["KESTREL", "HERON", "OWL", "HERON,KESTREL"]),
                "targets": f"Field {i}\nField {i}b",
                "hours_requested": round(rng.uniform(0.5, 30), 1),
            }
            for i in range(n)
        ],
    )
    runs, outcomes, findings = [], [], []
    for i in range(n):
        for k in range(2):  # an older and a newer finished run
            run_id = 2 * i + k + 1
            verdict = rng.choice(LEVELS)
            runs.append(
                {
                    "id": run_id,
                    "proposal_version_id": i + 1,
                    "observatory_version_id": observatory.id,
                    "schedule_key": k,
                    "engine_version": "bench",
                    "state": "done",
                    "verdict": verdict,
                    "result": {},
                    "finished_at": now - timedelta(days=2 - k),
                }
            )
            for r in range(2):
                outcome_id = 2 * run_id + r
                outcomes.append(
                    {
                        "id": outcome_id,
                        "run_id": run_id,
                        "label": "ab"[r],
                        "instrument": "KESTREL",
                        "target": f"Field {i}",
                        "verdict": verdict,
                        "hours_requested": 2.0,
                    }
                )
                if verdict != "feasible":  # only findings that are not feasible have a row
                    findings.append({"outcome_id": outcome_id, "check": "moon", "level": verdict})
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
