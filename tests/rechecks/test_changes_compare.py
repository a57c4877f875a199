"""Which differences between two results count as a change a reviewer should see.

Reference: the thresholds are this project's documented rule (feasibility/service/changes.py:
a key figure changed when it moved by more than 5 % of the larger value and by more than
0.1 h, or 0.5 in signal-to-noise); 5 % is common practice for "a material change".
"""

from __future__ import annotations

from typing import Any

from feasibility.service.changes import compare_results


def _result(verdict: str, **figures: Any) -> dict[str, Any]:
    request = {
        "label": "a",
        "instrument": "HERON",
        "target": "T",
        "verdict": verdict,
        "figures": {"hours_observable": 40.0, "hours_needed": 4.0, "snr_expected": 50.0, **figures},
    }
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
    assert [(c["label"], c["verdict_before"], c["verdict_after"]) for c in changes] == [("a", "feasible", "infeasible"), ("b", None, "feasible")]


def test_figure_appearing_counts() -> None:
    before = _result("marginal", snr_expected=None)
    assert compare_results(before, _result("marginal"))[0]["changed_figures"] == ["snr_expected"]


def _outcome(**figures: Any) -> Any:
    from feasibility.store.models import RequestOutcome

    values = {"hours_requested": 4.0, "hours_observable": 40.0, "hours_needed": 4.0, "snr_expected": 50.0, **figures}
    return RequestOutcome(label="a", instrument="HERON", target="T", verdict="feasible", **values)


def test_the_run_history_uses_the_same_rule_as_the_notices() -> None:
    # One definition of "changed" (feasibility.service.changes.figure_changed): the dashboard's run history
    # marks a key figure changed exactly when the change notices do, on both sides of each threshold.
    from feasibility.web.dashboard.history import _compare_outcomes

    cases = [
        {"hours_observable": 38.5},  # 3.75 %: under 5 %, not a change (it was one under the history's old 0.5 %)
        {"hours_observable": 30.0},  # 25 %: a change
        {"snr_expected": 48.0},  # 4 %: not a change
        {"snr_expected": 40.0},  # 20 % and 10 in S/N: a change
        {"hours_needed": 0.02},  # from 4 h: a change
    ]
    for figures in cases:
        name, value = next(iter(figures.items()))
        notices = compare_results(_result("feasible"), _result("feasible", **figures))
        in_notices = bool(notices) and name in notices[0]["changed_figures"]
        in_history = any(name.replace("_", " ").split()[-1] in c.subject for c in _compare_outcomes("a", _outcome(), _outcome(**figures)))
        assert in_history == in_notices, (figures, notices)
    assert [bool(compare_results(_result("feasible"), _result("feasible", **f))) for f in cases] == [False, True, False, True, True]
    # Below the absolute floor: 0.05 -> 0.02 h is 60 % but 0.03 h; neither place reports it.
    assert not _compare_outcomes("a", _outcome(hours_needed=0.05), _outcome(hours_needed=0.02))
