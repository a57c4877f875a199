"""The night-by-night differences between two schedule versions.

Reference: the expected counts follow from the edit each test makes to the demo
schedule (feasibility/data/schedule-2027A.yaml), counted independently from the
document's own nights, not from the code under test.
"""

from __future__ import annotations

import json
from datetime import date
from importlib import resources

from feasibility.documents import InstrumentSchedule, load_document
from feasibility.service.schedule_diff import schedule_diff


def _demo() -> InstrumentSchedule:
    return load_document(InstrumentSchedule, resources.files("feasibility") / "data" / "schedule-2027A.yaml")


def _edited(schedule: InstrumentSchedule, **changes: object) -> InstrumentSchedule:
    data = schedule.model_dump(mode="json")
    data.update(changes)
    return InstrumentSchedule.model_validate(data)


def test_identical_schedules_differ_in_nothing() -> None:
    demo = _demo()
    diff = schedule_diff(demo, _edited(demo, version="again"))
    assert diff.changes == []  # same nights: nothing to report
    assert diff.affected_instruments == frozenset()


def test_instrument_off_for_repair_affects_only_that_instrument() -> None:
    demo = _demo()
    data = demo.model_dump(mode="json")
    heron_nights = [n for n in data["nights"] if n.get("instrument") == "HERON" and n["status"] == "open"]
    week = heron_nights[:5]  # the first five HERON nights become engineering nights
    for night in week:
        night["status"] = "engineering"
        night["note"] = "HERON off for repair"
    diff = schedule_diff(demo, InstrumentSchedule.model_validate(data))
    assert len(diff.status_changed) == 5  # the five nights edited above
    assert diff.nights_added == diff.nights_removed == diff.instrument_changed == []
    assert diff.affected_instruments == {"HERON"}  # KESTREL and OWL nights untouched
    assert diff.nights_affected["HERON"] == 5
    assert diff.affects(["kestrel", "owl"]) == set()  # names compare without case, as in the observatory
    assert diff.affects(["heron", "OWL"]) == {"HERON"}


def test_swapped_instrument_affects_both_and_removed_nights_count() -> None:
    demo = _demo()
    data = demo.model_dump(mode="json")
    data["nights"][1]["instrument"] = "OWL"  # 2027-04-02 was KESTREL
    removed = data["nights"].pop(7)  # 2027-04-08, a HERON night, is no longer listed (closed)
    diff = schedule_diff(demo, InstrumentSchedule.model_validate(data))
    assert [c.night for c in diff.instrument_changed] == [date(2027, 4, 2)]
    assert [c.night.isoformat() for c in diff.nights_removed] == [removed["night"]]
    assert diff.nights_affected == {"KESTREL": 1, "OWL": 1, "HERON": 1}


def test_added_night_and_engineering_night_instrument() -> None:
    previous = InstrumentSchedule.model_validate(
        {
            "observatory": "X",
            "semester": "S",
            "nights": [
                {"night": "2027-04-01", "status": "engineering"},
                {"night": "2027-04-02", "instrument": "KESTREL"},
            ],
        }
    )
    current = InstrumentSchedule.model_validate(
        {
            "observatory": "X",
            "semester": "S",
            "version": "2",
            "nights": [
                {"night": "2027-04-01", "status": "engineering", "instrument": "OWL"},  # closed either way
                {"night": "2027-04-02", "instrument": "KESTREL", "note": "new note"},  # note only
                {"night": "2027-04-03", "instrument": "HERON"},
            ],
        }
    )
    diff = schedule_diff(previous, current)
    assert [c.kind for c in diff.changes] == ["instrument", "added"]
    # An engineering night offers no instrument before or after: nobody is affected by it.
    assert diff.affected_instruments == {"HERON"}
    as_json = json.loads(json.dumps(diff.as_dict()))
    assert as_json["nights_added"][0] == {
        "night": "2027-04-03",
        "kind": "added",
        "before": None,
        "after": {"instrument": "HERON", "status": "open", "note": None},
    }
    assert as_json["affected_instruments"] == {"HERON": 1}


def test_first_version_adds_every_night() -> None:
    demo = _demo()
    diff = schedule_diff(None, demo)
    assert len(diff.nights_added) == len(demo.nights)  # every listed night is new
    assert diff.previous_version is None
    assert diff.affected_instruments == {"KESTREL", "HERON", "OWL"}
