"""Which differences between two results count as a change a reviewer should see.

Reference: the thresholds are this project's documented rule (feasibility/service/changes.py:
a key figure changed when it moved by more than 5 % of the larger value and by more than
0.1 h, or 0.5 in signal-to-noise); 5 % is common practice for "a material change".
"""

from __future__ import annotations

from typing import Any

from feasibility.service.changes import compare_results


def _result(verdict: str, **figures: Any) -> dict[str, Any]:
    request = {"label": "a", "instrument": "HERON", "target": "T", "verdict": verdict,
               "figures": {"hours_observable": 40.0, "hours_needed": 4.0, "snr_expected": 50.0, **figures}}
    return {"proposal_id": "P", "verdict": verdict, "requests": [request]}


def test_same_figures_no_change() -> None:
    assert compare_results(_result("feasible"), _result("feasible")) == []


def test_small_moves_are_not_changes() -> None:
    # 40 -> 38.5 h is 3.75 % (under 5 %); S/N 50 -> 48 is 4 %.
    assert compare_results(_result("feasible"), _result("feasible", hours_observable=38.5, snr_expected=48.0)) == []


def test_large_move_is_a_change() -> None:
    # 40 -> 30 h is 25 % of the larger value: above 5 %.
    changes = compare_results(_result("feasible"), _result("feasible", hours_observable=30.0))
    assert [c["changed_figures"] for c in changes] == [["hours_observable"]]
    assert changes[0]["figures"]["hours_observable"] == {"before": 40.0, "after": 30.0, "changed": True}


def test_tiny_figures_below_floor_are_not_changes() -> None:
    # 0.05 -> 0.02 h is 60 % but only 0.03 h, under the 0.1 h floor.
    before, after = _result("feasible", hours_needed=0.05), _result("feasible", hours_needed=0.02)
    assert compare_results(before, after) == []


def test_verdict_change_and_request_added() -> None:
    before = _result("feasible")
    after = _result("infeasible", hours_observable=0.0)
    after["requests"].append({"label": "b", "instrument": "OWL", "target": "U", "verdict": "feasible", "figures": {}})
    changes = compare_results(before, after)
    assert [(c["label"], c["verdict_before"], c["verdict_after"]) for c in changes] == [
        ("a", "feasible", "infeasible"), ("b", None, "feasible")]


def test_figure_appearing_counts() -> None:
    before = _result("marginal", snr_expected=None)
    assert compare_results(before, _result("marginal"))[0]["changed_figures"] == ["snr_expected"]
