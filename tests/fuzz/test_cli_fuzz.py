"""Fuzzing ``feasibility check FILE``: a poisoned file exits 2 with one line per problem and no traceback.

The command runs in this process (click's runner) on poisoned demo proposals written
as JSON or YAML files, and on the special files a user might name by mistake.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner, Result
from hypothesis import given
from hypothesis import strategies as st

from feasibility.cli import main
from feasibility.documents.problems import MAX_PROBLEMS
from feasibility.documents.reading import MAX_DOCUMENT_BYTES

from . import tally
from .mutations import fuzz, poisoned

BAD_INPUT = 2  # the command's documented exit status for bad input


def _check(path: Path) -> Result:
    return CliRunner().invoke(main, ["check", str(path)])


def assert_bad_input(result: Result, path: Path, done: list[str]) -> None:
    crashed = result.exception is not None and not isinstance(result.exception, SystemExit)
    tally.count("feasibility check FILE", server_error=crashed)
    assert not crashed, f"{type(result.exception).__name__} after {done}: {result.exception}"
    assert result.exit_code == BAD_INPUT, (done, result.output)
    assert "Traceback" not in result.output and result.stdout == ""
    lines = result.stderr.splitlines()
    assert 1 <= len(lines) <= MAX_PROBLEMS + 1
    assert all(line.startswith(f"{path}:") for line in lines), lines  # one line per problem, each naming the file


@fuzz(200)
@given(data=st.data())
def test_poisoned_proposal_files_exit_2(tmp_path: Path, data: st.DataObject) -> None:
    encoding = data.draw(st.sampled_from(["json", "yaml"]))
    text, done = data.draw(poisoned("proposal", encoding))
    path = tmp_path / f"proposal.{encoding}"
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    assert_bad_input(_check(path), path, done)


@pytest.mark.parametrize("name", ["/dev/zero", "/dev/null"])
def test_special_files_exit_2(name: str) -> None:
    # /dev/zero never ends: it is read up to the size limit, then refused.
    result = _check(Path(name))
    assert_bad_input(result, Path(name), [name])


def test_a_file_over_the_limit_exits_2(tmp_path: Path) -> None:
    path = tmp_path / "big.yaml"
    path.write_bytes(b"title: x\n" + b"#" * MAX_DOCUMENT_BYTES)
    result = _check(path)
    assert_bad_input(result, path, ["big"])
    assert f"larger than the limit of {MAX_DOCUMENT_BYTES} bytes" in result.stderr


@pytest.mark.parametrize("command", ["schedule", "observatory"])
def test_admin_uploads_from_the_command_line_read_at_most_the_limit(runner: object, command: str) -> None:
    result = runner.invoke([command, "upload", "/dev/zero"])  # type: ignore[attr-defined]
    assert result.exit_code == BAD_INPUT and "Traceback" not in result.output
    assert result.stderr.strip() == f"/dev/zero: is larger than the limit of {MAX_DOCUMENT_BYTES} bytes"
