"""Commands for proposers: ``check`` a proposal, print a document's ``schema``, write the ``demo-files``.

Exit codes of ``check``: 0 feasible, 3 marginal, 4 infeasible, 5 unchecked, 2 bad
input (every problem on stderr, one line each, naming the field path).
"""

from __future__ import annotations

import json
from importlib.resources.abc import Traversable
from pathlib import Path

import click
from pydantic import BaseModel

from feasibility.cli.inputs import packaged, read_observatory, read_schedule
from feasibility.documents import DocumentError, InstrumentSchedule, Observatory, Proposal, load_document
from feasibility.documents.loading import json_schema
from feasibility.documents.proposal_problems import read_proposal
from feasibility.documents.reading import read_file

__all__ = ["register"]

BAD_INPUT = 2
_SCHEMAS: dict[str, type[BaseModel]] = {"proposal": Proposal, "observatory": Observatory, "schedule": InstrumentSchedule}


def register(main: click.Group) -> None:
    """Attach ``check``, ``schema`` and ``demo-files`` to the ``feasibility`` group."""
    main.add_command(check)
    main.add_command(schema)
    main.add_command(demo_files)


@click.command("check")
@click.argument("proposal_path", metavar="PROPOSAL", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--observatory",
    "observatory_path",
    metavar="FILE",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Observatory description (YAML or JSON). Default: the packaged demo observatory.",
)
@click.option(
    "--schedule",
    "schedule_path",
    metavar="FILE",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Instrument schedule. Default: the packaged demo schedule of the proposal's semester, if any.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the full result as JSON instead of the report.")
@click.pass_context
def check(ctx: click.Context, proposal_path: Path, observatory_path: Path | None, schedule_path: Path | None, as_json: bool) -> None:
    """Check the technical feasibility of the proposal in PROPOSAL (YAML or JSON)."""
    try:
        proposal, observatory, schedule, notes = _load_inputs(proposal_path, observatory_path, schedule_path)
    except DocumentError as error:
        click.echo(error.describe(), err=True)
        ctx.exit(BAD_INPUT)

    from feasibility.engine import check_proposal

    result = check_proposal(proposal, observatory, schedule)
    if as_json:
        click.echo(json.dumps(result.model_dump(mode="json"), indent=2, ensure_ascii=False))
    else:
        from feasibility.report import render_report

        click.echo(render_report(result, notes), nl=False)
    ctx.exit(result.verdict.exit_code)


@click.command("schema")
@click.argument("document", type=click.Choice(sorted(_SCHEMAS)))
@click.option(
    "--base-url",
    metavar="URL",
    envvar="FEASIBILITY_PUBLIC_URL",
    default=None,
    help="The service's public address, to make the schema's $id absolute (default: $FEASIBILITY_PUBLIC_URL, "
    "else the path /api/v1/schemas/DOCUMENT-VERSION.json).",
)
def schema(document: str, base_url: str | None) -> None:
    """Print the published JSON Schema (Draft 2020-12) of a DOCUMENT: proposal, observatory or schedule."""
    click.echo(json_schema(_SCHEMAS[document], base_url))


@click.command("demo-files")
@click.argument("directory", metavar="DIR", type=click.Path(file_okay=False, path_type=Path))
@click.option("--force", is_flag=True, help="Overwrite files that already exist.")
@click.option(
    "--semester", "generated", is_flag=True, help="Write the generated demo semester (about 150 invented proposals, the set `serve --demo` loads) instead."
)
@click.pass_context
def demo_files(ctx: click.Context, directory: Path, force: bool, generated: bool) -> None:
    """Write the demo observatory, schedule and example proposals into DIR, to edit and check."""
    wanted: dict[Path, bytes] = _generated_files(directory) if generated else {p: s.read_bytes() for p, s in _demo_files(directory).items()}
    existing = [path for path in wanted if path.exists()]
    if existing and not force:
        for path in existing:
            click.echo(f"{path}: already exists; not overwritten (use --force to overwrite)", err=True)
        ctx.exit(BAD_INPUT)
    for path, content in wanted.items():
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(content)
        click.echo(str(path))


def _load_inputs(
    proposal_path: Path, observatory_path: Path | None, schedule_path: Path | None
) -> tuple[Proposal, Observatory, InstrumentSchedule | None, list[str]]:
    """Read and cross-check the documents; raise :class:`DocumentError` naming every problem of every document.

    The proposal's schema problems and its misfits with the observatory come in one
    answer (:func:`feasibility.documents.proposal_problems.read_proposal`), with the
    observatory's and the schedule's problems beside them.
    """
    errors: list[DocumentError] = []
    observatory = read_observatory(observatory_path, errors)

    proposal: Proposal | None = None
    try:
        if observatory is None:
            proposal = load_document(Proposal, proposal_path)
        else:
            proposal = read_proposal(read_file(proposal_path), observatory, str(proposal_path))
    except DocumentError as error:
        errors.append(error)

    notes: list[str] = []
    semester = proposal.semester if proposal is not None else None
    schedule = read_schedule(schedule_path, semester, observatory, errors, whose="the proposal's")
    if errors:
        raise _Errors(errors)
    assert proposal is not None and observatory is not None
    if schedule is None:
        notes.append("no instrument schedule: every instrument is assumed mounted and the telescope open every night")
    return proposal, observatory, schedule, notes


class _Errors(DocumentError):
    """The problems of several documents, each line naming its document and field."""

    def __init__(self, errors: list[DocumentError]) -> None:
        self.errors = errors
        super().__init__([p for e in errors for p in e.problems], errors[0].document)

    def describe(self) -> str:
        return "\n".join(error.describe() for error in self.errors)


def _demo_files(directory: Path) -> dict[Path, Traversable]:
    """Where each packaged demo file goes under ``directory``."""
    data = packaged()
    wanted: dict[Path, Traversable] = {}
    for item in sorted(data.iterdir(), key=lambda t: t.name):
        if item.is_file() and item.name.endswith(".yaml"):
            wanted[directory / item.name] = item
    proposals = data / "proposals"
    for item in sorted(proposals.iterdir(), key=lambda t: t.name):
        if item.is_file() and item.name.endswith(".yaml"):
            wanted[directory / "proposals" / item.name] = item
    return wanted


def _generated_files(directory: Path) -> dict[Path, bytes]:
    """Where each proposal of the generated demo semester goes under ``directory``, with its YAML text."""
    from feasibility.demo_semester import demo_semester, semester_yaml

    return {directory / f"{document['id']}.yaml": semester_yaml(document).encode("utf-8") for document in demo_semester()}
