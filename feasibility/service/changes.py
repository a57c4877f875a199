"""Recording what a re-check changed: a proposal's verdict, a request's verdict or a key figure.

After a run's results are stored, the worker calls :func:`record_changes` in the
same transaction. When the run is now the proposal's standing run (the one rule is
:mod:`feasibility.store.standing`; a re-check of an old version that finishes after
a newer version's run changes nothing that stands, and records nothing), it compares
the run with the finished run before it in that order (any version of the same
proposal) request by request, matched on the request label, and stores one
:class:`~feasibility.store.models.VerdictChange` when

- the proposal's verdict or a request's verdict changed, or a request was added
  or removed, or
- a key figure (:data:`KEY_FIGURES`) changed by :func:`figure_changed`: it moved
  by more than :data:`RELATIVE_THRESHOLD` (5 %) of the larger of the two values and
  by more than its absolute floor (:data:`ABSOLUTE_FLOOR`: 0.1 h for hours, 0.5 for a
  signal-to-noise ratio), so that noise in a figure near zero is not reported; a
  figure that appears or disappears counts as changed. The same rule marks what
  changed in a proposal's run history on the dashboard
  (:mod:`feasibility.web.dashboard.history`): one definition of "changed".

When the proposal's verdict changed, a signed notice is queued for each portal
with a webhook (:func:`feasibility.service.webhooks.queue_notices`); sending it
happens later, outside the check.
"""

from __future__ import annotations

import math
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from feasibility.store.models import CheckRun, ProposalVersion, VerdictChange
from feasibility.store.standing import is_standing, run_before

__all__ = ["ABSOLUTE_FLOOR", "KEY_FIGURES", "RELATIVE_THRESHOLD", "compare_results", "figure_changed", "previous_run", "record_changes"]

#: Figures whose change a reviewer should see, in the order they are reported.
KEY_FIGURES: tuple[str, ...] = ("hours_observable", "hours_usable", "hours_scheduled", "hours_needed", "snr_expected")

#: A figure changed when it moved by more than this fraction of the larger value...
RELATIVE_THRESHOLD = 0.05

#: ...and by more than this absolute amount (hours, or signal-to-noise for ``snr_expected``).
ABSOLUTE_FLOOR: dict[str, float] = {"snr_expected": 0.5}
_DEFAULT_FLOOR = 0.1


def record_changes(session: Session, run: CheckRun) -> VerdictChange | None:
    """Compare standing ``run`` with the proposal's finished run before it; store and return a change, if any.

    Parameters
    ----------
    session
        The session that stored ``run``'s results; nothing is committed here.
    run
        A finished run with ``verdict`` and ``result`` set.

    Returns
    -------
    VerdictChange or None
        None when ``run`` is not the proposal's standing run, when there is no
        earlier finished run, when the verdicts and key figures are the same
        within the thresholds, or when this run's change is already recorded
        (the task ran twice).
    """
    if run.result is None or run.verdict is None:
        return None
    if session.scalar(select(VerdictChange.id).where(VerdictChange.run_id == run.id)) is not None:
        return None
    if not is_standing(session, run):
        return None
    before = previous_run(session, run)
    if before is None or before.result is None or before.verdict is None:
        return None
    requests = compare_results(before.result, run.result)
    if before.verdict == run.verdict and not requests:
        return None
    proposal_ref = session.scalar(select(ProposalVersion.proposal_ref).where(ProposalVersion.id == run.proposal_version_id))
    assert proposal_ref is not None
    change = VerdictChange(
        proposal_ref=proposal_ref,
        previous_run_id=before.id,
        run_id=run.id,
        verdict_before=before.verdict,
        verdict_after=run.verdict,
        details={
            "proposal_id": run.result.get("proposal_id"),
            "reason": run.reason,
            "schedule_version_before": before.result.get("schedule_version"),
            "schedule_version_after": run.result.get("schedule_version"),
            "requests": requests,
        },
    )
    session.add(change)
    session.flush()
    if change.verdict_before != change.verdict_after:
        from feasibility.service.webhooks import queue_notices

        queue_notices(session, change)
    return change


def previous_run(session: Session, run: CheckRun) -> CheckRun | None:
    """The proposal's finished run before ``run`` in the standing order (feasibility.store.standing), or None."""
    return run_before(session, run)


def compare_results(before: dict[str, Any], after: dict[str, Any]) -> list[dict[str, Any]]:
    """Per request (by label), what changed between two stored ``ProposalResult`` JSON forms.

    Returns one entry per request whose verdict or a key figure changed, or that
    exists in only one of the two results; an empty list when nothing changed.
    """
    old = {r["label"]: r for r in before.get("requests", [])}
    new = {r["label"]: r for r in after.get("requests", [])}
    entries: list[dict[str, Any]] = []
    for label in [*old, *(k for k in new if k not in old)]:
        a, b = old.get(label), new.get(label)
        figures_a = (a or {}).get("figures", {})
        figures_b = (b or {}).get("figures", {})
        figures: dict[str, dict[str, Any]] = {}
        for name in KEY_FIGURES:
            x, y = _number(figures_a.get(name)), _number(figures_b.get(name))
            if x is None and y is None:
                continue
            figures[name] = {"before": x, "after": y, "changed": figure_changed(name, x, y)}
        verdict_a = a["verdict"] if a else None
        verdict_b = b["verdict"] if b else None
        changed = [name for name, f in figures.items() if f["changed"]]
        if verdict_a == verdict_b and not changed:
            continue
        entries.append(
            {
                "label": label,
                "instrument": (b or a or {}).get("instrument"),
                "target": (b or a or {}).get("target"),
                "verdict_before": verdict_a,
                "verdict_after": verdict_b,
                "changed_figures": changed,
                "figures": figures,
            }
        )
    return entries


def figure_changed(name: str, before: Any, after: Any) -> bool:
    """Whether key figure ``name`` changed from ``before`` to ``after``: the one rule (see the module's description).

    Anything not a finite number (missing, NaN) counts as absent.
    """
    before, after = _number(before), _number(after)
    if before is None or after is None:
        return before is not after
    difference = abs(after - before)
    scale = max(abs(before), abs(after))
    return difference > RELATIVE_THRESHOLD * scale and difference > ABSOLUTE_FLOOR.get(name, _DEFAULT_FLOOR)


def _number(value: Any) -> float | None:
    """A finite float, or None for anything else (missing, text, NaN)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    value = float(value)
    return value if math.isfinite(value) else None
