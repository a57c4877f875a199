"""``feasibility simulate``: the chance of completion of a directory of proposals, and its bad-input handling.

Bad input exits with status 2, one line per problem naming the file and the field, with no traceback.
The demo files are inputs only; the figures themselves are tested in tests/engine/test_simulate.py.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
import yaml
from click.testing import CliRunner, Result

from feasibility.cli import main


@pytest.fixture(autouse=True)
def _cache_dir(tmp_path_factory: pytest.TempPathFactory, monkeypatch: pytest.MonkeyPatch) -> None:
    """One sky-grid cache for this module's tests, away from the user's."""
    monkeypatch.setenv("FEASIBILITY_CACHE_DIR", str(tmp_path_factory.getbasetemp() / "cli-sky-cache"))


@pytest.fixture
def demo(tmp_path: Path) -> Path:
    """The packaged demo files written out (observatory, schedule, proposals/)."""
    result = _run("demo-files", str(tmp_path / "demo"))
    assert result.exit_code == 0, result.output
    return tmp_path / "demo"


def _run(*args: str) -> Result:
    return CliRunner().invoke(main, list(args))


def _bad(result: Result) -> list[str]:
    assert result.exit_code == 2, (result.exit_code, result.output)
    assert result.exception is None or isinstance(result.exception, SystemExit)
    assert "Traceback" not in result.stderr
    return result.stderr.strip().splitlines()


def test_simulate_prints_the_chance_of_completion_and_the_same_seed_gives_the_same_answer(demo: Path) -> None:
    result = _run("simulate", str(demo / "proposals"), "--realisations", "300", "--seed", "4")
    assert result.exit_code == 0, result.output
    assert "Chance of completion, semester 2027A" in result.stdout
    assert "halo-V" in result.stdout and "KESTREL" in result.stdout and "oversubscribed" in result.stdout
    first = _run("simulate", str(demo / "proposals"), "--realisations", "300", "--seed", "4", "--json")
    again = _run("simulate", str(demo / "proposals"), "--realisations", "300", "--seed", "4", "--json")
    assert first.exit_code == 0 and first.stdout == again.stdout
    data = json.loads(first.stdout)
    assert data["realisations"] == 300 and data["seed"] == 4 and data["schedule_version"] == "2027A-1"
    labels = {row["label"] for row in data["requests"]}
    assert {"halo-V", "rgb-spectra", "gc-J-dark"} <= labels
    for row in data["requests"]:
        assert 0.0 <= row["chance_of_completion"] <= row["chance_of_half"] <= 1.0
    assert {row["lunar_time"] for row in data["time"]} == {"dark", "grey", "bright"}


def test_long_runs_report_progress_on_stderr(demo: Path) -> None:
    result = _run("simulate", str(demo / "proposals"), "--realisations", "600", "--json")
    assert result.exit_code == 0, result.output
    assert "simulated 500 of 600 realisations" in result.stderr
    json.loads(result.stdout)  # progress never mixes into the result


def test_ranks_put_a_proposal_first(demo: Path, tmp_path: Path) -> None:
    ranks = tmp_path / "ranks.yaml"
    ranks.write_text("SQ-2027A-005: 1\nSQ-2027A-001: 2\n", encoding="utf-8")
    result = _run("simulate", str(demo / "proposals"), "--ranks", str(ranks), "--realisations", "50", "--json")
    assert result.exit_code == 0, result.output
    by_id = {row["proposal_id"]: row["rank"] for row in json.loads(result.stdout)["proposals"]}
    assert by_id["SQ-2027A-005"] == 1.0 and by_id["SQ-2027A-001"] == 2.0 and by_id["SQ-2027A-002"] == 3.0  # unlisted: last


def test_a_bad_proposal_names_its_file_and_field(demo: Path) -> None:
    path = demo / "proposals" / "SQ-2027A-001.yaml"
    data: dict[str, Any] = yaml.safe_load(path.read_text(encoding="utf-8"))
    data["requests"][0]["target"]["dec"] = 95
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    lines = _bad(_run("simulate", str(demo / "proposals")))
    assert any(line.startswith(f"{path}: requests[0].target.dec:") for line in lines), lines


def test_proposals_of_two_semesters_or_one_id_twice_are_refused(demo: Path) -> None:
    source = demo / "proposals" / "SQ-2027A-004.yaml"
    other: dict[str, Any] = yaml.safe_load(source.read_text(encoding="utf-8"))
    other["semester"] = "2027B"
    (demo / "proposals" / "zz-other.yaml").write_text(yaml.safe_dump(other), encoding="utf-8")
    (demo / "proposals" / "zz-copy.json").write_text(json.dumps(yaml.safe_load(source.read_text(encoding="utf-8"))), encoding="utf-8")
    lines = _bad(_run("simulate", str(demo / "proposals")))
    assert any(line.startswith(f"{demo / 'proposals' / 'zz-other.yaml'}: semester:") for line in lines), lines
    assert any(line.startswith(f"{demo / 'proposals' / 'zz-copy.json'}: id:") for line in lines), lines


def test_an_empty_directory_bad_ranks_and_bad_persistence_are_each_one_line(demo: Path, tmp_path: Path) -> None:
    empty = tmp_path / "empty"
    empty.mkdir()
    (line,) = _bad(_run("simulate", str(empty)))
    assert line.startswith(f"{empty}:") and "no proposal files" in line

    ranks = tmp_path / "ranks.yaml"
    ranks.write_text("SQ-2027A-001: first\nNOPE-1: 2\n", encoding="utf-8")
    lines = _bad(_run("simulate", str(demo / "proposals"), "--ranks", str(ranks)))
    assert f"{ranks}: SQ-2027A-001: a rank must be a number, got 'first'" in lines
    assert any(line.startswith(f"{ranks}: NOPE-1:") for line in lines), lines

    observatory: dict[str, Any] = yaml.safe_load((demo / "observatory.yaml").read_text(encoding="utf-8"))
    observatory["climate"]["clear_after_clear"][10] = 0.5  # October's fraction 0.88 needs at least 0.864
    bad = tmp_path / "observatory.yaml"
    bad.write_text(yaml.safe_dump(observatory), encoding="utf-8")
    lines = _bad(_run("simulate", str(demo / "proposals"), "--observatory", str(bad)))
    assert any(line.startswith(f"{bad}: climate.clear_after_clear:") and "month 10" in line for line in lines), lines


def test_out_of_range_options_are_bad_input(demo: Path) -> None:
    _bad(_run("simulate", str(demo / "proposals"), "--realisations", "0"))
    _bad(_run("simulate", str(demo / "proposals"), "--seed", "-1"))
