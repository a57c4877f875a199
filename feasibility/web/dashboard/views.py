"""The dashboard's pages: the proposal list and its exports, a proposal's page and plots, the semester overview."""

from __future__ import annotations

import csv
import io
import json
import threading
from collections import OrderedDict
from collections.abc import Iterator
from contextlib import closing
from typing import Any

from flask import Response, abort, current_app, redirect, render_template, request, stream_with_context, url_for
from sqlalchemy import select
from werkzeug.exceptions import HTTPException

from feasibility.service import access
from feasibility.service.current import current_observatory, observatory_of
from feasibility.service.details import details_missing_reason, full_result
from feasibility.store import standing
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion, User
from feasibility.web import auth_pages, plots
from feasibility.web.auth_pages import current_user, db, security_headers, sign_in_required
from feasibility.web.dashboard import bp
from feasibility.web.dashboard.history import run_history
from feasibility.web.dashboard.overview import semester_overview
from feasibility.web.dashboard.queries import CHECK_NAMES, LEVELS, SORT_KEYS, ListQuery, count_rows, iter_rows, list_rows, semesters
from feasibility.web.dashboard.review_pages import page_review

__all__ = ["PLOT_KINDS"]

#: The plots of one observation request: URL name -> (title, drawing function of (series, figures, target)).
PLOT_KINDS: dict[str, tuple[str, Any]] = {
    "night": ("Altitude through a representative night", lambda s, f, t: plots.night_curve_svg(s, t)),
    "semester": ("Usable hours per night and the Moon", lambda s, f, t: plots.semester_hours_svg(s)),
    "snr": ("Signal-to-noise against exposure time", lambda s, f, t: plots.snr_curve_svg(s, f)),
    "track": ("Path on the sky and brightness across the semester (moving target)", lambda s, f, t: plots.track_svg(s)),
}
CSV_COLUMNS = [
    "proposal_id",
    "semester",
    "title",
    "principal_investigator",
    "instruments",
    "hours_requested",
    "verdict",
    "last_checked",
    "previous_verdict",
    "verdict_changed",
    "run_id",
    "first_failing_check",
    "hours_needed_over_requested",
]

bp.after_request(security_headers)


def _page_error(error: HTTPException) -> Any:
    """Errors of the pages as pages (JSON for the JSON, SVG and CSV addresses)."""
    if request.path.endswith((".json", ".svg", ".csv")):
        return {"error": (error.name or "error").lower(), "message": error.description}, error.code or 500
    return render_template("dashboard/error.html", error=error), error.code or 500


bp.register_error_handler(HTTPException, _page_error)
auth_pages.bp.register_error_handler(HTTPException, _page_error)


@bp.get("/")
def home() -> Any:
    """Signed in: the proposal list; otherwise the sign-in page."""
    if current_user() is None:
        return redirect(url_for("auth.sign_in"))
    return redirect(url_for("dashboard.proposal_list"))


@bp.get("/proposals")
@sign_in_required(access.SEE_PROPOSAL)
def proposal_list() -> Any:
    """A semester's proposals with their latest verdicts: filters, search, sort and pages."""
    user = _user()
    session = db()
    choices = semesters(session, user)
    semester = request.args.get("semester") or (choices[0] if choices else "")
    query = ListQuery.from_args(request.args, semester)
    total = count_rows(session, user, query)
    pages = max((total + query.per_page - 1) // query.per_page, 1)
    if query.page > pages:
        query = ListQuery.from_args({**request.args.to_dict(), "page": pages}, semester)
    rows = list_rows(session, user, query)
    return render_template(
        "dashboard/list.html",
        query=query,
        rows=rows,
        total=total,
        pages=pages,
        semesters=choices if semester in choices or not semester else [semester, *choices],
        levels=LEVELS,
        checks=CHECK_NAMES,
        instruments=_instrument_names(),
        sort_keys=SORT_KEYS,
    )


@bp.get("/proposals.csv")
@sign_in_required(access.SEE_PROPOSAL)
def export_csv() -> Response:
    """The filtered list (every page) as CSV (RFC 4180), streamed."""
    user, query = _export_query()

    def generate() -> Iterator[str]:
        # Its own session: the body is written after the view has returned and the request's
        # session (db()) has been closed; reusing that one would open a transaction nobody ends.
        # A client that goes away mid-download closes this generator: close the rows first, then the session.
        with session_scope(read_only=True) as session, closing(iter_rows(session, user, query)) as rows:
            buffer = io.StringIO()
            writer = csv.writer(buffer, lineterminator="\r\n")
            writer.writerow(CSV_COLUMNS)
            for row in rows:
                data = row.as_dict()
                data["instruments"] = " ".join(data["instruments"])
                writer.writerow([_csv_cell(data[column]) for column in CSV_COLUMNS])
                yield buffer.getvalue()
                buffer.seek(0)
                buffer.truncate()
            yield buffer.getvalue()

    name = f"proposals-{_safe_name(query.semester)}.csv"
    return Response(stream_with_context(generate()), mimetype="text/csv", headers={"Content-Disposition": f'attachment; filename="{name}"'})


@bp.get("/proposals.json")
@sign_in_required(access.SEE_PROPOSAL)
def export_json() -> Response:
    """The filtered list (every page) as JSON: ``{"semester", "filters", "count", "proposals": [...]}``."""
    user, query = _export_query()
    session = db()
    rows = [row.as_dict() for row in iter_rows(session, user, query)]
    filters = {"verdict": query.verdict, "instrument": query.instrument, "check": query.check, "q": query.search}
    body = json.dumps({"semester": query.semester, "filters": filters, "count": len(rows), "proposals": rows}, indent=1)
    name = f"proposals-{_safe_name(query.semester)}.json"
    return Response(body, mimetype="application/json", headers={"Content-Disposition": f'attachment; filename="{name}"'})


@bp.get("/proposals/<proposal_id>")
@sign_in_required(access.SEE_PROPOSAL)
def proposal_page(proposal_id: str) -> Any:
    """One proposal: its verdict, each request's findings and plots, and the run history."""
    session = db()
    record = _visible_record(proposal_id)
    history = run_history(session, record)
    chosen = _chosen_run(history, request.args.get("run"))
    version = session.get(ProposalVersion, chosen.proposal_version_id) if chosen is not None else _latest_version(record)
    requests = _requests_of(chosen)
    return render_template(
        "dashboard/proposal.html",
        record=record,
        version=version,
        run=chosen,
        result=(chosen.result or {}) if chosen is not None else {},
        requests=requests,
        history=history,
        plot_kinds=PLOT_KINDS,
        review=page_review(record),
    )


@bp.get("/proposals/<proposal_id>/runs/<int:run_id>/requests/<int:index>/<kind>.svg")
@sign_in_required(access.SEE_PROPOSAL)
def request_plot(proposal_id: str, run_id: int, index: int, kind: str) -> Response:
    """One plot of one request in one run, drawn from the stored series."""
    if kind not in PLOT_KINDS:
        abort(404)
    record = _visible_record(proposal_id)
    run = db().get(CheckRun, run_id)
    if run is None or run.proposal_version.proposal_ref != record.id:
        abort(404)
    requests = _requests_of(run)
    if not 0 <= index < len(requests):
        abort(404)
    item = requests[index]
    cache = current_app.extensions.setdefault("dashboard.plots", _PlotCache())
    key = (run.id, index, kind)
    svg = cache.get(key)
    if svg is None:
        svg = PLOT_KINDS[kind][1](item["series"], item["figures"], item["target"]) or ""
        cache.put(key, svg)  # a finished run never changes, so its plots never go stale
    if not svg:
        abort(404, description="this run stored no series for that plot")
    return _svg_response(svg, private=True)


@bp.get("/overview")
@sign_in_required(access.SEE_SEMESTER)
def overview_latest() -> Any:
    """The overview of the newest semester with proposals."""
    choices = semesters(db(), _user())
    if not choices:
        return render_template("dashboard/overview.html", overview=None, semesters=[])
    return redirect(url_for("dashboard.overview", semester=choices[0]))


@bp.get("/semesters/<semester>")
@sign_in_required(access.SEE_SEMESTER)
def overview(semester: str) -> Any:
    """The committee's view of a semester: verdict counts, hours per instrument, demand by right ascension."""
    session = db()
    data = semester_overview(session, semester)
    ra_rows = [
        {
            "hour": hour,
            "requested": data.ra_requested[hour],
            "night": data.ra_night_offered[hour] if data.ra_night_offered else None,
            "dark": data.ra_dark_offered[hour] if data.ra_dark_offered else None,
        }
        for hour in range(24)
    ]
    return render_template("dashboard/overview.html", overview=data, ra_rows=ra_rows, semesters=semesters(session, _user()), levels=LEVELS)


@bp.get("/semesters/<semester>/<kind>.svg")
@sign_in_required(access.SEE_SEMESTER)
def overview_plot(semester: str, kind: str) -> Response:
    """The overview's plots."""
    data = semester_overview(db(), semester)
    if kind == "verdicts":
        svg = plots.verdict_counts_svg(data.counts)
    elif kind == "instruments":
        svg = (
            plots.instrument_hours_svg(
                [
                    {
                        "instrument": line.instrument,
                        "hours_requested": line.hours_requested,
                        "hours_offered": line.hours_offered,
                        "hours_needed": line.hours_needed,
                    }
                    for line in data.instruments
                ]
            )
            if data.instruments
            else None
        )
    elif kind == "ra":
        svg = plots.ra_demand_svg(data.ra_requested, data.ra_dark_offered, data.ra_night_offered)
    elif kind == "ra-lunar":
        line = data.lunar_line(request.args.get("instrument", ""), request.args.get("time", ""))
        if line is None:
            abort(404, description="no such instrument and lunar time in this semester (give ?instrument=NAME&time=dark|grey|bright)")
        svg = plots.ra_offer_svg(line.ra_requested, line.ra_offered, f"{line.instrument}, {line.lunar_time} time: demand by right ascension")
    else:
        abort(404)
    if svg is None:
        abort(404, description="nothing to plot")
    return _svg_response(svg, private=True, max_age=60)


@bp.get("/semesters/<semester>/<table>.csv")
@sign_in_required(access.SEE_SEMESTER)
def overview_table(semester: str, table: str) -> Response:
    """One table of the overview as CSV: verdicts, instruments, lunar (requested ÷ offered by lunar time) or ra."""
    data = semester_overview(db(), semester)
    if table not in OVERVIEW_TABLES:
        abort(404, description=f"no table {table!r}; the overview's tables are {', '.join(OVERVIEW_TABLES)}")
    rows = OVERVIEW_TABLES[table](data)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    for row in rows:
        writer.writerow([_csv_cell(_rounded(value)) for value in row])
    name = f"{_safe_name(semester)}-{table}.csv"
    return Response(buffer.getvalue(), mimetype="text/csv", headers={"Content-Disposition": f'attachment; filename="{name}"'})


def _verdict_table(data: Any) -> list[list[Any]]:
    return [["verdict", "proposals"], *([level, data.counts[level]] for level in LEVELS)]


def _instrument_table(data: Any) -> list[list[Any]]:
    head = [
        "instrument",
        "requests",
        "requests_not_counted",
        "hours_requested_feasible_or_marginal",
        "hours_needed_feasible_or_marginal",
        "hours_offered",
        "requested_over_offered",
    ]
    return [
        head,
        *([row.instrument, row.requests, row.not_counted, row.hours_requested, row.hours_needed, row.hours_offered, row.pressure] for row in data.instruments),
    ]


def _lunar_table(data: Any) -> list[list[Any]]:
    head = ["instrument", "lunar_time", "requests_feasible_or_marginal", "hours_requested", "hours_offered", "requested_over_offered"]
    return [head, *([row.instrument, row.lunar_time, row.requests, row.hours_requested, row.hours_offered, row.pressure] for row in data.lunar)]


def _ra_table(data: Any) -> list[list[Any]]:
    head = ["ra_hour", "hours_requested", "night_hours_offered", "dark_hours_offered"]
    for line in data.lunar:
        head += [f"{line.instrument}_{line.lunar_time}_requested", f"{line.instrument}_{line.lunar_time}_offered"]
    rows: list[list[Any]] = [head]
    for hour in range(24):
        row: list[Any] = [
            hour,
            data.ra_requested[hour],
            data.ra_night_offered[hour] if data.ra_night_offered else None,
            data.ra_dark_offered[hour] if data.ra_dark_offered else None,
        ]
        for line in data.lunar:
            row += [line.ra_requested[hour], line.ra_offered[hour] if line.ra_offered else None]
        rows.append(row)
    return rows


#: The overview's tables that can be downloaded as CSV, by URL name.
OVERVIEW_TABLES = {"verdicts": _verdict_table, "instruments": _instrument_table, "lunar": _lunar_table, "ra": _ra_table}


def _rounded(value: Any) -> Any:
    return round(value, 3) if isinstance(value, float) else value


# --- helpers -------------------------------------------------------------------------------


class _PlotCache:
    """The most recently drawn request plots of one app (SVG text by run, request and kind), bounded in size."""

    def __init__(self, size: int = 256) -> None:
        self.size = size
        self._items: OrderedDict[tuple[int, int, str], str] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: tuple[int, int, str]) -> str | None:
        with self._lock:
            value = self._items.get(key)
            if value is not None:
                self._items.move_to_end(key)
            return value

    def put(self, key: tuple[int, int, str], value: str) -> None:
        with self._lock:
            self._items[key] = value
            while len(self._items) > self.size:
                self._items.popitem(last=False)


def _user() -> User:
    user = current_user()
    assert user is not None  # sign_in_required ran first
    return user


def _visible_record(proposal_id: str) -> ProposalRecord:
    """The proposal, when the user may see it; 404 otherwise (a proposer learns nothing of others' proposals)."""
    user = _user()
    record = db().scalars(select(ProposalRecord).where(ProposalRecord.proposal_id == proposal_id)).first()
    if record is None or not access.may_see(db(), user, record):
        abort(404, description="There is no proposal with that id that you may see.")
    return record


def _latest_version(record: ProposalRecord) -> ProposalVersion | None:
    return record.versions[-1] if record.versions else None


def _chosen_run(history: list[Any], wanted: str | None) -> CheckRun | None:
    """The run asked for (``?run=``), else the standing one (feasibility.store.standing), else the newest."""
    runs = [entry.run for entry in history]
    if wanted and wanted.isdigit():
        for run in runs:
            if run.id == int(wanted):
                return run
        abort(404, description="This proposal has no run with that number.")
    done = [entry for entry in history if entry.run.state == "done"]
    if done:
        return max((entry.run for entry in done), key=standing.sort_key)
    return runs[0] if runs else None


def _requests_of(run: CheckRun | None) -> list[dict[str, Any]]:
    """The run's observation-request results, read defensively (older results may lack parts).

    A compact stored result gets its series and methods recomputed (:mod:`feasibility.service.details`).
    """
    result = full_result(db(), run) if run is not None else None
    if result is None:
        return []
    missing = details_missing_reason(run) if run is not None else None
    items = []
    for raw in result.get("requests") or []:
        if not isinstance(raw, dict):
            continue
        series = given if isinstance(given := raw.get("series"), dict) else {}
        figures = raw.get("figures") if isinstance(raw.get("figures"), dict) else {}
        findings = [f for f in raw.get("findings") or [] if isinstance(f, dict)]
        findings.sort(key=lambda f: -LEVELS.index(f["level"]) if f.get("level") in LEVELS else 0)  # worst first: the "why"
        items.append(
            {
                "label": str(raw.get("label", "")),
                "instrument": str(raw.get("instrument", "")),
                "target": str(raw.get("target", "")),
                "verdict": str(raw.get("verdict", "unchecked")),
                "figures": figures,
                "findings": findings,
                "series": series,
                "plots": {kind: _has_series(kind, series) for kind in PLOT_KINDS},
                "plots_missing": missing,
            }
        )
    return items


def _has_series(kind: str, series: dict[str, Any]) -> bool:
    needed = {"night": "night_curve", "semester": "hours_usable", "snr": "snr_curve", "track": "track"}[kind]
    return needed in series


def _instrument_names() -> list[str]:
    row = current_observatory(db())
    if row is None:
        return []
    return [instrument.name for instrument in observatory_of(row).instruments]


def _export_query() -> tuple[User, ListQuery]:
    user = _user()
    choices = semesters(db(), user)
    semester = request.args.get("semester") or (choices[0] if choices else "")
    return user, ListQuery.from_args(request.args, semester)


def _csv_cell(value: Any) -> Any:
    """A cell that a spreadsheet will not run as a formula (OWASP, CSV injection): text starting =, +, -, @ gets a quote."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, str) and value[:1] in ("=", "+", "-", "@", "\t", "\r"):
        return "'" + value
    return value


def _safe_name(text: str) -> str:
    return "".join(c for c in text if c.isalnum() or c in "-_") or "all"


def _svg_response(svg: str, *, private: bool, max_age: int = 3600) -> Response:
    response = Response(svg, mimetype="image/svg+xml")
    response.headers["Cache-Control"] = f"{'private' if private else 'public'}, max-age={max_age}"
    # Opened on its own, the image may not run scripts nor load anything.
    response.headers["Content-Security-Policy"] = "default-src 'none'; style-src 'unsafe-inline'"
    return response
