"""The command line's text for re-check plans and uploads (``schedule upload``, ``observatory upload``, ``recheck``)."""

from __future__ import annotations

from feasibility.service.rechecks import RecheckPlan, Upload
from feasibility.store.models import ScheduleVersion

__all__ = ["plan_text", "upload_text"]


def plan_text(plan: RecheckPlan) -> str:
    """One line: how many re-checks were queued, why, and per changed instrument."""
    if not plan.queued:
        extra = f" ({plan.already_queued} already queued)" if plan.already_queued else ""
        return f"queued no re-checks{extra}"
    reasons = ", ".join(f"{n} {reason}" for reason, n in sorted(plan.by_reason.items()))
    line = f"queued {plan.queued} re-check{'s' if plan.queued != 1 else ''} ({reasons})"
    if plan.by_instrument:
        line += "; re-checked proposals per changed instrument: " + ", ".join(f"{k} {v}" for k, v in sorted(plan.by_instrument.items()))
    return line


def upload_text(upload: Upload) -> str:
    """A few lines: what was stored, what changed, what was queued."""
    semester = f" {upload.version.semester}" if isinstance(upload.version, ScheduleVersion) else ""
    label = f"{upload.kind}{semester} version {upload.version.version_label!r}"
    if not upload.created:
        return f"{label} is already in force (same content): nothing stored, no re-checks"
    lines = [f"stored {label} (id {upload.version.id})"]
    if upload.diff is not None:
        d = upload.diff
        lines.append(
            f"changes: {len(d.nights_added)} nights added, {len(d.nights_removed)} removed, "
            f"{len(d.instrument_changed)} instrument changed, {len(d.status_changed)} status changed"
        )
    lines.append(plan_text(upload.plan))
    return "\n".join(lines)
