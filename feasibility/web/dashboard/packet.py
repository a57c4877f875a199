"""The meeting packet: a print-ready report per proposal (page and PDF) and a semester's packet as one PDF.

A report holds the engine's verdict, the reviewer's decision and reason, the
notes, every finding with its figures, and the plots. The semester packet has an
overview page first, then one proposal per page (a proposal may run over several),
for the whole semester or the list's filters (``verdict``, ``instrument``,
``check``, ``q``). Only stored results are read.
"""

from __future__ import annotations

from collections import Counter
from typing import Any

from flask import Response, render_template, request
from sqlalchemy import select
from sqlalchemy.orm import Session

from feasibility.service import access, review
from feasibility.store import queries as store_queries
from feasibility.store.models import CheckRun, ProposalRecord, User
from feasibility.store.standing import standing_run
from feasibility.web.auth_pages import current_user, db, sign_in_required
from feasibility.web.dashboard import bp
from feasibility.web.dashboard.formatting import LEVEL_WORDS, figure_name, figure_value, hours, when
from feasibility.web.dashboard.packet_pdf import PacketWriter, table_lines
from feasibility.web.dashboard.packet_plots import request_images, run_key
from feasibility.web.dashboard.queries import ListQuery, iter_rows
from feasibility.web.dashboard.review_pages import page_review
from feasibility.web.dashboard.views import PLOT_KINDS, _requests_of, _visible_record

__all__ = ["proposal_pdf", "semester_pdf"]


@bp.get("/proposals/<proposal_id>/report")
@sign_in_required(access.SEE_PROPOSAL)
def proposal_report(proposal_id: str) -> Any:
    """The proposal's report as a page made for printing: everything expanded, no navigation."""
    record = _visible_record(proposal_id)
    run = standing_run(db(), record)
    return render_template(
        "dashboard/report.html",
        record=record,
        version=store_queries.latest_version(db(), record),
        run=run,
        requests=_requests_of(run),
        plot_kinds=PLOT_KINDS,
        review=page_review(record),
    )


@bp.get("/proposals/<proposal_id>/report.pdf")
@sign_in_required(access.SEE_PROPOSAL)
def proposal_report_pdf(proposal_id: str) -> Response:
    """The proposal's report as a PDF."""
    record = _visible_record(proposal_id)
    return _pdf(proposal_pdf(db(), record, _user()), f"report-{_safe(record.proposal_id)}.pdf")


@bp.get("/semesters/<semester>/packet.pdf")
@sign_in_required(access.SEE_SEMESTER)
def semester_packet_pdf(semester: str) -> Response:
    """The semester's packet: an overview page, then every proposal (or those the list's filters leave), one per page."""
    return _pdf(semester_pdf(db(), _user(), ListQuery.from_args(request.args, semester)), f"packet-{_safe(semester)}.pdf")


def semester_pdf(session: Session, user: User, query: ListQuery) -> bytes:
    """The PDF of a semester's packet for the filtered list ``query``."""
    rows = list(iter_rows(session, user, query))
    records = {r.proposal_id: r for r in session.scalars(select(ProposalRecord).where(ProposalRecord.proposal_id.in_([row.proposal_id for row in rows])))}
    reviews = {pid: review.review_of(session, record) for pid, record in records.items()}
    writer = PacketWriter(f"Semester {query.semester} meeting packet")
    writer.new_page()
    writer.heading(f"Semester {query.semester}: technical feasibility packet")
    filters = {"verdict": query.verdict, "instrument": query.instrument, "check": query.check, "search": query.search}
    chosen = ", ".join(f"{k} = {v}" for k, v in filters.items() if v)
    writer.line(f"{len(rows)} proposals" + (f" (filtered: {chosen})" if chosen else " (the whole semester)"), space_after=0.6)
    engine_counts = Counter(row.verdict or "not checked" for row in rows)
    final_counts = Counter(reviews[row.proposal_id].final_verdict or "not checked" for row in rows)
    writer.line("Engine's verdicts: " + ", ".join(f"{level} {engine_counts[level]}" for level in [*review.LEVELS, "not checked"] if engine_counts[level]))
    writer.line("Verdicts that stand: " + ", ".join(f"{level} {final_counts[level]}" for level in [*review.LEVELS, "not checked"] if final_counts[level]))
    again = [row.proposal_id for row in rows if reviews[row.proposal_id].to_review_again]
    writer.line(f"To review again: {', '.join(again) if again else 'none'}", space_after=0.8)
    table = [
        [
            row.proposal_id,
            row.title,
            row.pi_name,
            hours(row.hours_requested),
            row.verdict or "—",
            reviews[row.proposal_id].final_verdict or "—",
            reviews[row.proposal_id].reviewer or "—",
            "AGAIN" if reviews[row.proposal_id].to_review_again else "",
        ]
        for row in rows
    ]
    for text in table_lines(["Proposal", "Title", "PI", "Hours", "Engine", "Stands", "Reviewer", ""], table, [14, 22, 14, 6, 10, 10, 9, 5]):
        writer.line(text, size=7.2, mono=True)
    for row in rows:
        writer.new_page()
        _write_proposal(writer, session, records[row.proposal_id], user, state=reviews[row.proposal_id])
    return writer.finish()


def proposal_pdf(session: Session, record: ProposalRecord, user: User) -> bytes:
    """The PDF of one proposal's report."""
    writer = PacketWriter(f"{record.proposal_id} technical report")
    _write_proposal(writer, session, record, user)
    return writer.finish()


def _write_proposal(writer: PacketWriter, session: Session, record: ProposalRecord, user: User, state: review.Review | None = None) -> None:
    version = store_queries.latest_version(session, record)
    run: CheckRun | None = standing_run(session, record)
    state = state or review.review_of(session, record)
    writer.heading(f"{record.proposal_id} — {version.title}", size=13)
    writer.line(
        f"PI {version.pi_name} · semester {record.semester} · instruments {version.instruments.replace(',', ', ')} · "
        f"{hours(version.hours_requested)} h requested"
    )
    if run is None:
        writer.line("No finished check run yet.")
    else:
        result = run.result or {}
        writer.line(
            f"Check run #{run.id}, {when(run.finished_at)}; observatory {result.get('observatory_version') or run.observatory_version_id}, "
            f"schedule {result.get('schedule_version') or 'none'}, engine {run.engine_version}",
            size=8,
            colour="#444444",
        )
    writer.gap()
    writer.line(
        f"Engine's verdict: {state.engine_verdict or 'none'}" + (f" — {LEVEL_WORDS.get(state.engine_verdict, '')}" if state.engine_verdict else ""),
        weight="bold",
    )
    if access.may(user, access.READ_REVIEW):
        decision = state.decision
        if decision is None:
            writer.line("Reviewer's decision: none yet")
        else:
            kind = "confirmed" if decision.kind == "confirm" else f"overridden to {decision.verdict}"
            writer.line(f"Reviewer's decision: {kind} by {decision.reviewer.name}, {when(decision.decided_at)}", weight="bold")
            if decision.reason:
                writer.line(f"Reason: {decision.reason}", indent=0.02)
        writer.line(f"Verdict that stands: {state.final_verdict or 'none'} ({state.decided_by}) · technical reviewer: {state.reviewer or 'not assigned'}")
        if state.to_review_again:
            writer.line(
                f"TO REVIEW AGAIN: decided when the engine said {decision.engine_verdict if decision else '?'}; the engine now says {state.engine_verdict}.",
                weight="bold",
                colour="#a00000",
            )
        notes = state.notes
        for note in notes:
            where = f"request {note.request_label}" if note.request_label else "whole proposal"
            writer.line(f"Note ({where}, {note.author.name}, {when(note.written_at)}): {note.text}", indent=0.02)
    for item in _requests_of(run):
        writer.gap()
        writer.line(f"Request {item['label']}: {item['target']} with {item['instrument']} — {item['verdict']}", size=11, weight="bold")
        for finding in item["findings"]:
            writer.line(f"[{finding.get('level', '?')}] {finding.get('check', '')}: {finding.get('message', '')}", indent=0.01)
            numbers = finding.get("figures") or {}
            if isinstance(numbers, dict) and numbers:
                writer.line("; ".join(f"{figure_name(k)} {figure_value(v)}" for k, v in numbers.items()), size=8, indent=0.03, colour="#333333")
            if finding.get("suggestion"):
                writer.line(f"Suggestion: {finding['suggestion']}", size=8.5, indent=0.03)
        for pixels in request_images(run_key(session, run), item, PLOT_KINDS):
            writer.image(pixels)


def _user() -> User:
    user = current_user()
    assert user is not None
    return user


def _pdf(data: bytes, name: str) -> Response:
    return Response(data, mimetype="application/pdf", headers={"Content-Disposition": f'attachment; filename="{name}"'})


def _safe(text: str) -> str:
    return "".join(c for c in text if c.isalnum() or c in "-_") or "packet"
