"""The proposer's command line: ``feasibility check``, ``schema`` and ``demo-files``.

Bad input must exit with status 2 and name the field path, with no traceback.
The tests that run the whole engine skip until ``feasibility.engine.check_proposal`` exists.
"""

from __future__ import annotations

import copy
import json
from importlib.resources import files
from pathlib import Path
from typing import Any

import pytest
import yaml
from click.testing import CliRunner, Result

from feasibility.cli import main

PROPOSAL: dict[str, Any] = {
    "id": "CLI-TEST-1",
    "semester": "2027A",
    "title": "A command-line test",
    "pi": {"name": "Test Person", "email": "test@example.org"},
    "requests": [
        {
            "label": "one",
            "target": {"name": "NGC 5128", "ra": "13:25:27.6", "dec": "-43:01:09"},
            "instrument": "KESTREL",
            "setup": {"filter": "V"},
            "brightness": {"magnitude": 21.0, "band": "V", "error": 0.1},
            "goal": {"snr": 20},
            "hours_requested": 2,
        }
    ],
}


def _engine_ready() -> bool:
    try:
        from feasibility.engine import check_proposal  # noqa: F401
    except ImportError:
        return False
    return True


needs_engine = pytest.mark.skipif(not _engine_ready(), reason="feasibility.engine.check_proposal not written yet")


@pytest.fixture(autouse=True)
def _cache_dir(tmp_path_factory: pytest.TempPathFactory, monkeypatch: pytest.MonkeyPatch) -> None:
    """One sky-grid cache for this module's tests, away from the user's."""
    monkeypatch.setenv("FEASIBILITY_CACHE_DIR", str(tmp_path_factory.getbasetemp() / "cli-sky-cache"))


def _write(path: Path, document: dict[str, Any] | str) -> Path:
    path.write_text(document if isinstance(document, str) else yaml.safe_dump(document), encoding="utf-8")
    return path


def _invoke(*args: str) -> Result:
    return CliRunner().invoke(main, list(args))


def _changed(**changes: Any) -> dict[str, Any]:
    """The test proposal with ``changes`` applied to its first request (dotted keys reach into it)."""
    document = copy.deepcopy(PROPOSAL)
    for dotted, value in changes.items():
        target = document["requests"][0] if not dotted.startswith("/") else document
        keys = dotted.lstrip("/").split(".")
        for key in keys[:-1]:
            target = target.setdefault(key, {})
        if value is None:
            target.pop(keys[-1], None)
        else:
            target[keys[-1]] = value
    return document


# --- bad input: exit 2, field path named, no traceback -------------------------------------


@pytest.mark.parametrize(
    ("document", "field"),
    [
        (_changed(**{"target.dec": 95}), "requests[0].target.dec"),
        (_changed(**{"brightness.error": -0.2}), "requests[0].brightness.error"),
        (_changed(instrument="ALBATROSS"), "requests[0].instrument"),
        (_changed(**{"setup.filter": "Hα"}), "requests[0].setup.filter"),
        (_changed(**{"/semester": "2031Z"}), "semester"),
        (_changed(**{"/pi": None}), "pi"),
        (_changed(goal=None), "requests[0].goal"),
        (_changed(hours_requested="lots"), "requests[0].hours_requested"),
    ],
)
def test_bad_proposal_exits_2_naming_the_field(tmp_path: Path, document: dict[str, Any], field: str) -> None:
    result = _invoke("check", str(_write(tmp_path / "p.yaml", document)))
    assert result.exit_code == 2, result.output
    assert field in result.stderr
    assert "Traceback" not in result.output
    assert result.stdout == ""


def test_malformed_yaml_exits_2(tmp_path: Path) -> None:
    result = _invoke("check", str(_write(tmp_path / "p.yaml", "id: [unclosed\n  title: : :")))
    assert result.exit_code == 2
    assert "neither valid JSON nor YAML" in result.stderr
    assert "Traceback" not in result.output


def test_missing_file_exits_2(tmp_path: Path) -> None:
    result = _invoke("check", str(tmp_path / "absent.yaml"))
    assert result.exit_code == 2
    assert "cannot read" in result.stderr


def test_every_problem_gets_its_own_line(tmp_path: Path) -> None:
    document = _changed(**{"target.dec": 95, "brightness.error": -1})
    result = _invoke("check", str(_write(tmp_path / "p.yaml", document)))
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    assert result.exit_code == 2
    assert any("requests[0].target.dec" in line for line in lines)
    assert any("requests[0].brightness.error" in line for line in lines)
    assert len(lines) == 2


def test_bad_observatory_exits_2(tmp_path: Path) -> None:
    observatory = yaml.safe_load((files("feasibility") / "data" / "observatory.yaml").read_text(encoding="utf-8"))
    observatory["telescope"]["aperture_m"] = -3
    result = _invoke("check", str(_write(tmp_path / "p.yaml", PROPOSAL)), "--observatory", str(_write(tmp_path / "o.yaml", observatory)))
    assert result.exit_code == 2
    assert "telescope.aperture_m" in result.stderr


def test_schedule_of_another_semester_exits_2(tmp_path: Path) -> None:
    schedule = yaml.safe_load((files("feasibility") / "data" / "schedule-2027A.yaml").read_text(encoding="utf-8"))
    schedule["semester"] = "2027B"
    schedule["nights"] = [{"night": "2027-10-02", "instrument": "KESTREL"}]
    result = _invoke("check", str(_write(tmp_path / "p.yaml", PROPOSAL)), "--schedule", str(_write(tmp_path / "s.yaml", schedule)))
    assert result.exit_code == 2
    assert "semester" in result.stderr and "2027A" in result.stderr


# --- schema and demo files -----------------------------------------------------------------


@pytest.mark.parametrize(("document", "field"), [("proposal", "requests"), ("observatory", "instruments"), ("schedule", "nights")])
def test_schema_prints_json_schema(document: str, field: str) -> None:
    result = _invoke("schema", document)
    assert result.exit_code == 0
    assert field in json.loads(result.stdout)["properties"]


def test_schema_of_unknown_document_is_a_usage_error() -> None:
    assert _invoke("schema", "telescope").exit_code == 2


def test_demo_files_written_and_not_overwritten(tmp_path: Path) -> None:
    first = _invoke("demo-files", str(tmp_path / "demo"))
    assert first.exit_code == 0, first.output
    assert (tmp_path / "demo" / "observatory.yaml").is_file()
    assert (tmp_path / "demo" / "schedule-2027A.yaml").is_file()
    proposals = sorted((tmp_path / "demo" / "proposals").glob("*.yaml"))
    assert len(proposals) >= 5
    (tmp_path / "demo" / "observatory.yaml").write_text("edited", encoding="utf-8")
    again = _invoke("demo-files", str(tmp_path / "demo"))
    assert again.exit_code == 2
    assert "already exists" in again.stderr
    assert (tmp_path / "demo" / "observatory.yaml").read_text(encoding="utf-8") == "edited"
    forced = _invoke("demo-files", "--force", str(tmp_path / "demo"))
    assert forced.exit_code == 0
    assert (tmp_path / "demo" / "observatory.yaml").read_text(encoding="utf-8") != "edited"


def test_demo_proposals_are_valid_documents() -> None:
    from feasibility.documents import Observatory, Proposal, load_document, parse_document
    from feasibility.documents.consistency import proposal_problems

    data = files("feasibility") / "data"
    observatory = parse_document(Observatory, (data / "observatory.yaml").read_bytes())
    names = [item.name for item in (data / "proposals").iterdir() if item.name.endswith(".yaml")]
    assert 5 <= len(names) <= 8
    for name in names:
        with_path = Path(str(data / "proposals" / name))
        proposal = load_document(Proposal, with_path)
        assert proposal.semester == "2027A"
        assert proposal_problems(proposal, observatory) == []


# --- the whole check ----------------------------------------------------------------------


@needs_engine
def test_check_json_has_the_documented_keys(tmp_path: Path) -> None:
    result = _invoke("check", "--json", str(_write(tmp_path / "p.yaml", PROPOSAL)))
    assert result.exit_code in (0, 3, 4, 5), result.output
    document = json.loads(result.stdout)
    assert document["proposal_id"] == "CLI-TEST-1"
    assert result.exit_code == {"feasible": 0, "marginal": 3, "infeasible": 4, "unchecked": 5}[document["verdict"]]
    request = document["requests"][0]
    assert request["label"] == "one"
    assert request["verdict"] in ("feasible", "marginal", "infeasible", "unchecked")
    for key in ("hours_requested", "hours_observable", "hours_needed", "snr_expected", "source_rate_e_s", "sky_rate_e_s_pix", "airmass_median"):
        assert key in request["figures"], key
    checks = {finding["check"] for finding in request["findings"]}
    assert {"sensitivity", "instrument", "atmosphere", "image-quality", "visibility"} <= checks
    for finding in request["findings"]:
        assert {"check", "level", "message", "figures"} <= set(finding)
    assert "snr_curve" in request["series"]


@needs_engine
def test_check_report_shows_word_and_symbol(tmp_path: Path) -> None:
    result = _invoke("check", str(_write(tmp_path / "p.yaml", PROPOSAL)))
    assert result.exit_code in (0, 3, 4, 5)
    first = result.stdout.splitlines()[0]
    assert "CLI-TEST-1" in first
    assert any(f"{symbol} {word}" in first for symbol, word in (("✓", "feasible"), ("!", "marginal"), ("✗", "infeasible"), ("?", "unchecked")))
    assert "[1] one" in result.stdout


@needs_engine
def test_check_without_schedule_says_so(tmp_path: Path) -> None:
    document = _changed(**{"/semester": "2027B"})
    result = _invoke("check", str(_write(tmp_path / "p.yaml", document)))
    assert result.exit_code in (0, 3, 4, 5)
    assert "no instrument schedule" in result.stdout


# Each demo proposal's file says which verdict it is meant to get.
DEMO_VERDICTS = {
    "SQ-2027A-001.yaml": "feasible",
    "SQ-2027A-002.yaml": "infeasible",
    "SQ-2027A-003.yaml": "infeasible",
    "SQ-2027A-004.yaml": "infeasible",
    "SQ-2027A-005.yaml": "marginal",
    "SQ-2027A-006.yaml": "infeasible",
    "SQ-2027A-007.yaml": "infeasible",
}


@needs_engine
@pytest.mark.parametrize(("name", "verdict"), sorted(DEMO_VERDICTS.items()))
def test_demo_proposals_get_their_described_verdict(name: str, verdict: str) -> None:
    path = Path(str(files("feasibility") / "data" / "proposals" / name))
    result = _invoke("check", "--json", str(path))
    document = json.loads(result.stdout)
    assert document["verdict"] == verdict, json.dumps([[r["label"], [(f["check"], f["level"]) for f in r["findings"]]] for r in document["requests"]])
    assert result.exit_code == {"feasible": 0, "marginal": 3, "infeasible": 4}[verdict]


def test_schedule_of_another_observatory_exits_2(tmp_path: Path) -> None:
    schedule = yaml.safe_load((files("feasibility") / "data" / "schedule-2027A.yaml").read_text(encoding="utf-8"))
    schedule["observatory"] = "Some Other Observatory"
    result = _invoke("check", str(_write(tmp_path / "p.yaml", PROPOSAL)), "--schedule", str(_write(tmp_path / "s.yaml", schedule)))
    assert result.exit_code == 2
    assert "observatory" in result.stderr and "Some Other Observatory" in result.stderr


def test_every_problem_of_the_proposal_at_once(tmp_path: Path) -> None:
    # Schema (declination 95) and observatory (unknown filter) problems in one answer, one line each.
    document = _changed(**{"target.dec": 95, "setup.filter": "Halpha", "constraints": {"sky": "dark", "max_moon_illumination": 0.5}})
    result = _invoke("check", str(_write(tmp_path / "p.yaml", document)))
    assert result.exit_code == 2
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    assert any("requests[0].target.dec" in line and "between -90 and +90" in line for line in lines)
    assert any("requests[0].setup.filter" in line and "Halpha" in line for line in lines)
    assert any("requests[0].constraints.max_moon_illumination" in line for line in lines)
    assert len(lines) == 3, lines


def test_problems_of_proposal_and_observatory_together(tmp_path: Path) -> None:
    observatory = yaml.safe_load((files("feasibility") / "data" / "observatory.yaml").read_text(encoding="utf-8"))
    observatory["site"]["horizon"] = [{"azimuth_deg": 0, "altitude_deg": 40}, {"azimuth_deg": 360, "altitude_deg": 5}]
    result = _invoke(
        "check",
        str(_write(tmp_path / "p.yaml", _changed(**{"target.dec": 95}))),
        "--observatory",
        str(_write(tmp_path / "o.yaml", observatory)),
    )
    assert result.exit_code == 2
    assert "site.horizon" in result.stderr and "requests[0].target.dec" in result.stderr
