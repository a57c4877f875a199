"""The text report: every verdict as a word and a symbol, each finding's message and suggestion."""

from __future__ import annotations

from feasibility.report import SYMBOLS, render_report, verdict_label
from feasibility.results import Finding, Level, ProposalResult, RequestResult


def _result() -> ProposalResult:
    findings = [
        Finding(check="sensitivity", level=Level.MARGINAL, message="Needs 2.2 h.", suggestion="Request 2.2 h."),
        Finding(check="visibility", level=Level.FEASIBLE, message="120 h observable."),
    ]
    request = RequestResult(
        label="halo-V",
        instrument="KESTREL",
        target="NGC 5128",
        verdict=Level.MARGINAL,
        findings=findings,
        figures={"hours_requested": 2.0, "hours_needed": 2.2, "snr_expected": 23.9, "snr_goal": 25.0},
    )
    return ProposalResult(
        proposal_id="P-1",
        semester="2027A",
        verdict=Level.MARGINAL,
        requests=[request],
        engine_version="0",
        observatory="Obs",
        observatory_version="1",
        schedule_version=None,
        computed_at="2027-01-01T00:00:00Z",
    )


def test_every_level_has_its_own_symbol() -> None:
    assert len(set(SYMBOLS.values())) == len(Level)
    assert verdict_label(Level.INFEASIBLE) == "✗ infeasible"


def test_report_lists_verdicts_figures_findings_and_suggestions() -> None:
    text = render_report(_result(), notes=["no instrument schedule"])
    lines = text.splitlines()
    assert lines[0] == "Proposal P-1 (semester 2027A): ! marginal"
    assert "Note: no instrument schedule" in text
    assert "[1] halo-V: NGC 5128 with KESTREL: ! marginal" in text
    assert "needed 2.2 h" in text and "S/N goal 25" in text
    # Worst findings first, each with its suggestion under it.
    sensitivity = lines.index("    ! sensitivity (marginal): Needs 2.2 h.")
    assert lines[sensitivity + 1] == "        suggestion: Request 2.2 h."
    assert sensitivity < lines.index("    ✓ visibility (feasible): 120 h observable.")
