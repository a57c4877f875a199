"""The ``simulate`` command: the chance of completion of a directory of proposals over one semester.

Exit codes: 0 done, 2 bad input (every problem on stderr, one line each, naming the
file and the field). Progress goes to stderr when the run takes more than one block
of realisations.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import click

from feasibility.cli.check import BAD_INPUT, _Errors
from feasibility.cli.inputs import read_observatory, read_schedule
from feasibility.documents import DocumentError, InstrumentSchedule, Observatory, Proposal, load_document
from feasibility.documents.loading import Problem, read_mapping
from feasibility.documents.proposal_problems import read_proposal
from feasibility.documents.reading import read_file

__all__ = ["register", "render_simulation"]

#: Proposal files the command reads from the directory.
_SUFFIXES = (".yaml", ".yml", ".json")
#: Most proposal files one run reads.
MAX_PROPOSALS = 2000


def register(main: click.Group) -> None:
    """Attach ``simulate`` to the ``feasibility`` group."""
    main.add_command(simulate)


@click.command("simulate")
@click.argument("directory", metavar="DIR", type=click.Path(file_okay=False, exists=True, path_type=Path))
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
    help="Instrument schedule. Default: the packaged demo schedule of the proposals' semester, if any.",
)
@click.option(
    "--ranks",
    "ranks_path",
    metavar="FILE",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Proposal ranks: a mapping of proposal id to a number, smaller goes first; unlisted proposals come last. Default: all equal.",
)
@click.option("--seed", type=click.IntRange(min=0), default=0, show_default=True, help="Seed of the random weather: same seed, same answer.")
@click.option("--realisations", type=click.IntRange(1, 100_000), default=1000, show_default=True, help="Semesters of weather to simulate.")
@click.option(
    "--hours",
    type=click.Choice(["needed", "requested"]),
    default="needed",
    show_default=True,
    help="Hours each request must obtain: the engine's hours needed for its goal, or the hours requested.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the full result as JSON instead of the report.")
@click.pass_context
def simulate(
    ctx: click.Context,
    directory: Path,
    observatory_path: Path | None,
    schedule_path: Path | None,
    ranks_path: Path | None,
    seed: int,
    realisations: int,
    hours: str,
    as_json: bool,
) -> None:
    """Simulate the semester of the proposals in DIR night by night: each request's chance of completion."""
    try:
        proposals, observatory, schedule, ranks = _load(directory, observatory_path, schedule_path, ranks_path)
    except DocumentError as error:
        click.echo(error.describe(), err=True)
        ctx.exit(BAD_INPUT)

    from feasibility.engine.simulate import BLOCK, simulate_semester

    def progress(done: int, total: int) -> None:
        click.echo(f"simulated {done} of {total} realisations", err=True)

    result = simulate_semester(
        proposals,
        observatory,
        schedule,
        ranks=ranks,
        realisations=realisations,
        seed=seed,
        hours=hours,  # type: ignore[arg-type]
        progress=progress if realisations > BLOCK else None,
    )
    if as_json:
        click.echo(json.dumps(result, indent=2, ensure_ascii=False))
    else:
        click.echo(render_simulation(result), nl=False)


def render_simulation(result: dict[str, Any]) -> str:
    """The simulation as a plain-text report: proposals and their requests, then the time per instrument and lunar time."""
    lines = [
        f"Chance of completion, semester {result['semester']} at {result['observatory']}: "
        f"{result['realisations']} simulated semesters (seed {result['seed']}), hours {result['hours_basis']}.",
        "",
    ]
    by_proposal: dict[str, list[dict[str, Any]]] = {}
    for row in result["requests"]:
        by_proposal.setdefault(row["proposal_id"], []).append(row)
    ranked = len({proposal["rank"] for proposal in result["proposals"]}) > 1
    for proposal in result["proposals"]:
        rank = f" (rank {proposal['rank']:g})" if ranked else ""
        lines.append(
            f"{proposal['proposal_id']}{rank}: all requests done {_percent(proposal['chance_of_completion'])}, "
            f"at least half the hours {_percent(proposal['chance_of_half'])}; {_hours(proposal)}"
        )
        for row in by_proposal.get(proposal["proposal_id"], []):
            if not row.get("dispatched", True):
                lines.append(f"  {row['label']:<24} {row['instrument']:<10} not simulated: infeasible, so never done")
                continue
            lines.append(
                f"  {row['label']:<24} {row['instrument']:<10} done {_percent(row['chance_of_completion']):>5}  "
                f"half {_percent(row['chance_of_half']):>5}  {_hours(row)}"
            )
    lines += ["", "Time per instrument and lunar time (hours; expected over the simulated semesters):"]
    lines.append(f"  {'instrument':<10} {'lunar':<7} {'offered':>8} {'lost':>8} {'used':>8} {'asked':>8} {'oversubscribed':>15}")
    for row in result["time"]:
        over = row["oversubscription"]
        lines.append(
            f"  {row['instrument']:<10} {row['lunar_time']:<7} {row['hours_offered']:8.1f} {row['hours_lost_to_weather']['mean']:8.1f} "
            f"{row['hours_used']['mean']:8.1f} {row['hours_asked']:8.1f} {('-' if over is None else f'{over:.2f}x'):>15}"
        )
    for note in result["notes"]:
        lines.append(f"Note: {note}")
    return "\n".join(lines) + "\n"


def _percent(value: float) -> str:
    return f"{100.0 * value:.0f}%"


def _hours(row: dict[str, Any]) -> str:
    obtained = row["hours_obtained"]
    return f"{obtained['mean']:.1f} ± {obtained['spread']:.1f} of {row['hours_to_obtain']:.1f} h"


def _load(
    directory: Path, observatory_path: Path | None, schedule_path: Path | None, ranks_path: Path | None
) -> tuple[list[Proposal], Observatory, InstrumentSchedule | None, dict[str, float] | None]:
    """Read every document; raise :class:`DocumentError` naming every problem of every file."""
    errors: list[DocumentError] = []
    observatory = read_observatory(observatory_path, errors)

    files = sorted(p for p in directory.iterdir() if p.is_file() and p.suffix.lower() in _SUFFIXES)
    if not files:
        errors.append(DocumentError([Problem("", f"holds no proposal files ({', '.join(_SUFFIXES)})")], str(directory)))
    elif len(files) > MAX_PROPOSALS:
        errors.append(DocumentError([Problem("", f"holds {len(files)} proposal files; at most {MAX_PROPOSALS} per run")], str(directory)))
        files = []
    proposals: list[tuple[Path, Proposal]] = []
    for path in files:
        try:
            if observatory is None:
                proposals.append((path, load_document(Proposal, path)))
            else:
                proposals.append((path, read_proposal(read_file(path), observatory, str(path))))
        except DocumentError as error:
            errors.append(error)
    errors += _mixed(proposals)
    semester = proposals[0][1].semester if proposals else None

    schedule = read_schedule(schedule_path, semester, observatory, errors, whose="the proposals'")

    ranks = None
    if ranks_path is not None:
        try:
            ranks = _ranks(ranks_path, {p.id for _, p in proposals})
        except DocumentError as error:
            errors.append(error)
    if errors:
        raise _Errors(errors)
    assert observatory is not None
    return [p for _, p in proposals], observatory, schedule, ranks


def _mixed(proposals: list[tuple[Path, Proposal]]) -> list[DocumentError]:
    """A proposal of another semester than the first, or an id used twice, named by its file."""
    errors: list[DocumentError] = []
    if not proposals:
        return errors
    first_path, first = proposals[0]
    seen: dict[str, Path] = {}
    for path, proposal in proposals:
        problems = []
        if proposal.semester != first.semester:
            problems.append(
                Problem("semester", f"{proposal.semester!r} is not the semester of {first_path.name} ({first.semester!r}); simulate one semester at a time")
            )
        if proposal.id in seen:
            problems.append(Problem("id", f"{proposal.id!r} is also the id of {seen[proposal.id].name}"))
        seen.setdefault(proposal.id, path)
        if problems:
            errors.append(DocumentError(problems, str(path)))
    return errors


def _ranks(path: Path, known: set[str]) -> dict[str, float]:
    """The ranks file: a mapping of proposal id to a finite number; every problem names the id."""
    data = read_mapping(read_file(path), str(path))
    ranks: dict[str, float] = {}
    problems = []
    for key, value in data.items():
        field = str(key)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            problems.append(Problem(field, f"a rank must be a number, got {value!r}"))
        elif field not in known:
            problems.append(Problem(field, "is not the id of any proposal in the directory"))
        else:
            ranks[field] = float(value)
    if problems:
        raise DocumentError(problems, str(path))
    return ranks
