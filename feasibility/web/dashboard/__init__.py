"""The reviewers' dashboard and the proposers' upload page: server-rendered pages over stored results.

Registering :data:`bp` on an app (one line in ``create_app``'s blueprint list) also
registers the sign-in pages (:mod:`feasibility.web.auth_pages`), the template
filters and the pages' security headers. Pages only read what check runs stored;
nothing here calls the engine.
"""

from __future__ import annotations

from flask import Blueprint

__all__ = ["bp"]

bp = Blueprint(
    "dashboard",
    __name__,
    template_folder="../templates",
    static_folder="../static",
    static_url_path="/assets",
)


@bp.record_once
def _setup(state: object) -> None:
    from feasibility.web import auth_pages
    from feasibility.web.dashboard import chance, formatting

    app = state.app  # type: ignore[attr-defined]
    auth_pages.init_app(app)
    formatting.init_app(app)
    chance.init_app(app)  # the chance of completion (semester simulation) for the page partials


# One import per group of pages, each with its note, so import sorting is off here.
# isort: off
from feasibility.web.dashboard import upload, views  # noqa: E402,F401  (routes attach to bp)
from feasibility.web.dashboard import schedule_changes  # noqa: E402,F401  (re-check helper's page)
from feasibility.web.dashboard import packet, review_pages  # noqa: E402,F401  (technical review and meeting packet)
from feasibility.web.dashboard import schedule_admin  # noqa: E402,F401  (admins' schedule upload and calendar)
from feasibility.web.dashboard import chance_form  # noqa: E402,F401  (the overview's form asking for a simulation)
# isort: on
