"""Commands for the observatory's staff: ``schedule upload``, ``observatory upload``, ``recheck``, ``notices send``.

Each works on the store at ``DATABASE_URL`` (default: the embedded SQLite store)
and queues the re-checks it calls for. With Celery (``BROKER_URL``) the workers
compute them; on the embedded store a running ``feasibility serve`` picks them
up on its next sweep, or ``--wait`` computes them here before returning.
Bad input exits with status 2 and one line per problem, naming the field.
``recheck`` and ``notices send`` are meant for cron on the embedded store (Celery
beat runs the same work with workers): run twice, the second run does nothing.
"""

from __future__ import annotations

import json
import sys
import time
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import click

__all__ = ["register"]

BAD_INPUT = 2


def register(main: click.Group) -> None:
    """Attach ``schedule``, ``observatory`` and ``recheck`` to the ``feasibility`` group."""
    main.add_command(schedule_group)
    main.add_command(observatory_group)
    main.add_command(recheck)
    main.add_command(notices_group)


_WAIT = click.option(
    "--wait",
    "wait_s",
    type=click.FloatRange(0),
    default=None,
    metavar="SECONDS",
    help="Wait up to SECONDS for the queued re-checks (on the embedded store: compute them here).",
)
_JSON = click.option("--json", "as_json", is_flag=True, help="Print the outcome as JSON.")


@click.group("schedule")
def schedule_group() -> None:
    """Instrument schedules: which instrument is mounted on which night."""


@schedule_group.command("upload")
@click.argument("path", metavar="FILE", type=click.Path(dir_okay=False, path_type=Path))
@_JSON
@_WAIT
def schedule_upload(path: Path, as_json: bool, wait_s: float | None) -> None:
    """Store FILE (YAML or JSON) as the new schedule of its semester and re-check the proposals it affects."""
    from feasibility.service.rechecks import upload_schedule

    _upload(upload_schedule, path, "schedule", as_json, wait_s)


@click.group("observatory")
def observatory_group() -> None:
    """The observatory description: site, telescope, climate, semesters, instruments."""


@observatory_group.command("upload")
@click.argument("path", metavar="FILE", type=click.Path(dir_okay=False, path_type=Path))
@_JSON
@_WAIT
def observatory_upload(path: Path, as_json: bool, wait_s: float | None) -> None:
    """Store FILE (YAML or JSON) as the observatory description in force and re-check every proposal."""
    from feasibility.service.rechecks import upload_observatory

    _upload(upload_observatory, path, "observatory", as_json, wait_s)


@click.command("recheck")
@click.option(
    "--changed-since",
    "changed_since",
    metavar="ISO-TIME",
    default=None,
    help="Count schedule and observatory changes uploaded at or after this time only (e.g. 2027-05-01T03:00Z).",
)
@click.option(
    "--stale-days",
    type=click.FloatRange(min=0, min_open=True),
    default=None,
    help="Re-check results older than this many days (default: FEASIBILITY_STALE_DAYS or 30).",
)
@_JSON
@_WAIT
def recheck(changed_since: str | None, stale_days: float | None, as_json: bool, wait_s: float | None) -> None:
    """Queue the re-checks that schedule or observatory changes, a new engine version or old results call for."""
    from feasibility.cli.command_app import command_runtime
    from feasibility.cli.recheck_text import plan_text
    from feasibility.service.recheck_answers import plan_answer
    from feasibility.service.rechecks import plan_rechecks
    from feasibility.store.db import session_scope

    since = _parse_time(changed_since, "--changed-since") if changed_since else None
    with command_runtime() as runtime:
        days = stale_days if stale_days is not None else float(runtime.settings.stale_days)
        with session_scope() as session:
            plan = plan_rechecks(session, changed_since=since, stale_after=timedelta(days=days))
        _dispatch(runtime, plan, wait_s)
        click.echo(json.dumps(plan_answer(plan), indent=2) if as_json else plan_text(plan))


@click.group("notices")
def notices_group() -> None:
    """Signed notices of changed verdicts, sent to the portals' webhook addresses."""


@notices_group.command("send")
@_JSON
def notices_send(as_json: bool) -> None:
    """Send the notices that are due (failed ones are retried later with growing delays); for cron."""
    from feasibility.cli.command_app import command_runtime
    from feasibility.service.webhooks import deliver_due
    from feasibility.store.db import session_factory

    with command_runtime():
        report = deliver_due(session_factory)
    refused = f", refused (not a public address) {report.refused}" if report.refused else ""
    click.echo(json.dumps(report.as_dict()) if as_json else f"sent {report.sent}, to retry {report.retrying}, given up {report.failed}{refused}")


def _upload(action: Any, path: Path, document: str, as_json: bool, wait_s: float | None) -> None:
    from feasibility.cli.command_app import command_runtime
    from feasibility.cli.recheck_text import upload_text
    from feasibility.documents.loading import DocumentError
    from feasibility.documents.reading import read_file
    from feasibility.service.recheck_answers import upload_answer
    from feasibility.store.db import session_scope

    try:
        data = read_file(path)  # at most the size limit: /dev/zero is refused, not read
    except DocumentError as error:
        _bad(error)
    with command_runtime() as runtime:
        try:
            with session_scope() as session:
                outcome = action(session, data, None)
                answer, text = upload_answer(outcome), upload_text(outcome)
        except DocumentError as error:
            error.document = str(path)
            _bad(error)
        _dispatch(runtime, outcome.plan, wait_s)
    click.echo(json.dumps(answer, indent=2) if as_json else text)


def _dispatch(runtime: Any, plan: Any, wait_s: float | None) -> None:
    """Hand the plan to the workers; on the embedded store only when asked to wait (this process is short-lived)."""
    from feasibility.service.rechecks import dispatch_plan

    if not plan.run_ids:
        return
    dispatcher = runtime.dispatcher
    if dispatcher.mode == "embedded" and wait_s is None:
        click.echo(
            f"{len(plan.run_ids)} re-checks wait in the store; a running `feasibility serve` computes them, or pass --wait SECONDS to compute them now.",
            err=True,
        )
        return
    dispatch_plan(plan)
    if wait_s is None:
        return
    if dispatcher.mode == "embedded":
        finished = dispatcher.wait_idle(timeout=wait_s)
        dispatcher.shutdown()
    else:
        finished = _wait_for_runs(plan.run_ids, wait_s)
    if not finished:
        click.echo(f"some re-checks were still running after {wait_s:g} s; they go on in the background", err=True)


def _wait_for_runs(run_ids: list[int], wait_s: float) -> bool:
    from sqlalchemy import func, select

    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun

    deadline = time.monotonic() + wait_s
    while True:
        with session_scope(read_only=True) as session:  # a poll: never queue for SQLite's write lock
            left = session.scalar(select(func.count()).select_from(CheckRun).where(CheckRun.id.in_(run_ids), CheckRun.state.in_(["queued", "running"])))
        if not left:
            return True
        if time.monotonic() >= deadline:
            return False
        time.sleep(0.5)


def _parse_time(raw: str, option: str) -> datetime:
    """An ISO 8601 time (naive means UTC), in UTC; a bad one ends the command with exit status 2."""
    from feasibility.documents.times import as_utc

    try:
        moment = datetime.fromisoformat(raw)
    except ValueError:
        click.echo(f"{option}: {raw!r} is not an ISO 8601 time (e.g. 2027-05-01T03:00:00Z)", err=True)
        sys.exit(BAD_INPUT)
    try:
        return as_utc(moment)
    except ValueError as exc:
        click.echo(f"{option}: {raw!r} {exc}", err=True)
        sys.exit(BAD_INPUT)


def _bad(error: Any) -> None:
    click.echo(error.describe(), err=True)
    sys.exit(BAD_INPUT)
