"""What ``serve --demo`` adds to a store: the demo proposals, the generated semester and three people to sign in as.

Each demo person (a reviewer, a proposer and an admin) gets a random password,
printed once when the person is made; a later ``serve --demo`` leaves them alone
(``feasibility user set-password NAME`` gives a new one). A demo store is still a
store: a password written in the README would open every copy of it.
"""

from __future__ import annotations

import json
import secrets
import threading
import time
from dataclasses import dataclass
from importlib import resources

import click
from sqlalchemy import select

__all__ = ["DEMO_PEOPLE", "DEMO_PROPOSER_OWNS", "DemoPerson", "ask_demo_simulation", "make_demo_people", "submit_demo_proposals", "seed_demo_store"]


@dataclass(frozen=True)
class DemoPerson:
    """One person ``serve --demo`` makes: a name, a role and what the role is for."""

    name: str
    role: str
    purpose: str


#: The people ``serve --demo`` makes, one per role of the dashboard.
DEMO_PEOPLE = (
    DemoPerson("demo-reviewer", "reviewer", "sees every proposal and the semester overview"),
    DemoPerson("demo-proposer", "proposer", "sees and uploads their own proposals"),
    DemoPerson("demo-admin", "admin", "everything, and uploads instrument schedules"),
)
#: The hand-written demo proposal the demo proposer owns.
DEMO_PROPOSER_OWNS = "SQ-2027A-001"
#: Realisations of the demo's simulation: steady enough to read, done within minutes on a laptop.
DEMO_REALISATIONS = 500
#: How often, and at most how long, the demo's simulation waits for the check runs to finish, in seconds.
_POLL_S, _WAIT_AT_MOST_S = 2.0, 3600.0


def seed_demo_store() -> None:
    """Submit the demo proposals and make the demo people (with the service's runtime bound), printing what was made."""
    from feasibility.service.dispatch import enqueue

    created = submit_demo_proposals()
    enqueue(created)
    click.echo(f"Demo proposals submitted: {len(created)} new check runs.")
    simulation_id = ask_demo_simulation()
    if simulation_id is not None:
        click.echo(f"Simulation #{simulation_id} of the demo semester asked for: it runs when the check runs have finished.")
    passwords = make_demo_people()
    for person in DEMO_PEOPLE:
        if person.name in passwords:
            click.echo(f"Dashboard sign-in as {person.role} ({person.purpose}), shown once; keep it: user {person.name!r}, password {passwords[person.name]!r}")
    if passwords:
        click.echo("A new password for any of them: feasibility user set-password NAME")


def submit_demo_proposals() -> list[int]:
    """Store the eight hand-written demo proposals and the generated semester; the ids of the new check runs."""
    from feasibility.demo_semester import demo_semester
    from feasibility.documents.loading import DocumentError
    from feasibility.service.submissions import submit
    from feasibility.store.db import session_scope

    documents: list[tuple[str, bytes]] = []
    folder = resources.files("feasibility") / "data" / "proposals"
    for item in sorted(folder.iterdir(), key=lambda p: p.name):
        if item.name.endswith(".yaml"):
            documents.append((item.name, item.read_bytes()))
    documents += [(document["id"], json.dumps(document).encode()) for document in demo_semester()]
    created: list[int] = []
    for name, content in documents:
        try:
            with session_scope() as session:
                result = submit(session, content, None, reason="demo")
                if result.created:
                    created.append(result.run.id)
        except DocumentError as exc:
            click.echo(f"demo proposal {name} skipped: {exc}", err=True)
    return created


def make_demo_people() -> dict[str, str]:
    """Make the demo people that do not exist yet; their new passwords by name.

    The demo proposer becomes the owner of :data:`DEMO_PROPOSER_OWNS` when nobody owns it.
    """
    from feasibility.service import access
    from feasibility.service.accounts import create_user
    from feasibility.store.db import session_scope
    from feasibility.store.models import ProposalRecord, User

    passwords: dict[str, str] = {}
    with session_scope() as session:
        for person in DEMO_PEOPLE:
            user = session.scalar(select(User).where(User.name == person.name))
            if user is None:
                passwords[person.name] = secrets.token_urlsafe(9)
                user = create_user(session, person.name, person.role, password=passwords[person.name])
            if access.may(person.role, access.OWN_PROPOSALS):
                record = session.scalar(select(ProposalRecord).where(ProposalRecord.proposal_id == DEMO_PROPOSER_OWNS))
                if record is not None and record.owner_id is None:
                    record.owner_id = user.id
    return passwords


def ask_demo_simulation(realisations: int = DEMO_REALISATIONS) -> int | None:
    """Store a simulation of the demo semester (none when one has finished already) and send it once no check run waits.

    The simulation reads the proposals' latest versions, stored before their runs, so it
    could run at once; it waits so that it does not take the CPU from the check runs the
    pages show first (the embedded pool knows only check runs). A daemon thread polls the
    store until no run is queued or running (at most an hour), then sends it as the API does.
    Returns the simulation's id, or None when none was asked for.
    """
    from feasibility.demo_semester import DEMO_SEMESTER
    from feasibility.service.runtime import current_runtime
    from feasibility.service.simulations import SimulationSettings, ask_for_simulation, send_simulation
    from feasibility.store.db import session_scope
    from feasibility.store.models import Simulation

    with session_scope() as session:
        finished = session.scalar(select(Simulation.id).where(Simulation.semester == DEMO_SEMESTER, Simulation.state == "done").limit(1))
        if finished is not None:
            return None
        simulation_id = ask_for_simulation(session, DEMO_SEMESTER, SimulationSettings(realisations=realisations), None).id
    runtime = current_runtime()
    if runtime is None:
        raise RuntimeError("the demo's simulation needs the service's runtime bound")

    def send_when_runs_are_done() -> None:
        with runtime.bound():
            wait_for_check_runs()
            send_simulation(simulation_id)

    threading.Thread(target=send_when_runs_are_done, name=f"feasibility-demo-simulation-{simulation_id}", daemon=True).start()
    return simulation_id


def wait_for_check_runs(poll_s: float = _POLL_S, at_most_s: float = _WAIT_AT_MOST_S) -> bool:
    """Wait until the store has no check run queued or running; False when ``at_most_s`` passed first."""
    from sqlalchemy import func

    from feasibility.store.db import session_scope
    from feasibility.store.models import CheckRun

    deadline = time.monotonic() + at_most_s
    while True:
        with session_scope(read_only=True) as session:
            waiting = session.scalar(select(func.count()).select_from(CheckRun).where(CheckRun.state.in_(("queued", "running"))))
        if not waiting:
            return True
        if time.monotonic() >= deadline:
            return False
        time.sleep(poll_s)
