"""The JSON form of re-check plans, uploads and stored versions: one answer for the API, ``--json`` and the worker.

Kept apart from the planning (:mod:`feasibility.service.rechecks`), which returns
plain objects; the web app's answers, the command's ``--json`` output and the
nightly task's result are all this one form, so it lives on the floor all three
faces stand on. The command's text is the command's own (:mod:`feasibility.cli.recheck_text`).
"""

from __future__ import annotations

from typing import Any

from feasibility.service.rechecks import RecheckPlan, Upload
from feasibility.store.models import ObservatoryVersion, ScheduleVersion

__all__ = ["plan_answer", "upload_answer", "version_answer"]


def plan_answer(plan: RecheckPlan) -> dict[str, Any]:
    """The re-checks one planning step queued, and why."""
    return {
        "queued": plan.queued,
        "already_queued": plan.already_queued,
        "by_reason": dict(sorted(plan.by_reason.items())),
        "by_instrument": dict(sorted(plan.by_instrument.items())),
        "proposals": sorted(plan.proposals),
        "run_ids": list(plan.run_ids),
    }


def upload_answer(upload: Upload) -> dict[str, Any]:
    """What uploading a schedule or an observatory description did."""
    return {
        "kind": upload.kind,
        "created": upload.created,
        "version": version_answer(upload.version),
        "previous": version_answer(upload.previous) if upload.previous is not None else None,
        "diff": upload.diff.as_dict() if upload.diff is not None else None,
        "rechecks": plan_answer(upload.plan),
    }


def version_answer(version: ScheduleVersion | ObservatoryVersion) -> dict[str, Any]:
    """A stored version's identity (not its document)."""
    uploaded = version.uploaded_at
    data: dict[str, Any] = {
        "id": version.id,
        "version": version.version_label,
        "content_hash": version.content_hash,
        "uploaded_at": uploaded.isoformat() if uploaded is not None else None,
        "uploaded_by": version.uploaded_by,
    }
    if isinstance(version, ScheduleVersion):
        data["semester"] = version.semester
    else:
        data["name"] = version.name
    return data
