"""The request, query and answer shapes of the JSON API under /api/v1, as pydantic models.

:mod:`feasibility.web.openapi` builds the published OpenAPI document from these
models alone (through its registry of routes), so the document and the answers
cannot drift apart unnoticed: the test suite checks every JSON answer its API calls
get against the document. Answer models forbid keys they do not name (an answer
with a new key fails that check until the key is described here).

A field whose limit is a setting carries ``x-setting-maximum`` (or
``x-setting-max-items``) naming it; the document is built with the app's value.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, RootModel

from feasibility.results import ProposalResult
from feasibility.service.review import NOTE_MAX_CHARS

__all__ = [
    "Answer",
    "BulkAnswer",
    "BulkAssignment",
    "BulkAssignmentBody",
    "BulkBody",
    "BulkItem",
    "Change",
    "ChangeList",
    "ChangesQuery",
    "CompareQuery",
    "DecisionBody",
    "Error",
    "Health",
    "Invalid",
    "Me",
    "NoteBody",
    "ObservatoryView",
    "OpenApiDocument",
    "PageQuery",
    "PasswordAnswer",
    "PasswordBody",
    "ProposalListQuery",
    "ProposalPage",
    "ProposalSummary",
    "ProposalView",
    "RecheckBody",
    "RecheckPlan",
    "ReviewAnswer",
    "RevokedToken",
    "RevokedTokens",
    "Run",
    "RunPage",
    "ScheduleChanges",
    "ScheduleComparison",
    "ScheduleVersions",
    "ScheduleView",
    "SchemaDocument",
    "SchemaIndex",
    "SimulationList",
    "SimulationView",
    "StoredVersion",
    "SubmitQuery",
    "Submitted",
    "TokenInfo",
    "TokenList",
    "UploadAnswer",
    "WebhookAnswer",
    "WebhookBody",
    "AssignmentBody",
]

Verdict = Literal["feasible", "marginal", "unchecked", "infeasible"]
RunState = Literal["queued", "running", "done", "failed"]
Time = str  # ISO 8601 with a UTC offset, as the API writes it


class Answer(BaseModel):
    """Base of every answer: only the keys named (additionalProperties: false in the document)."""

    model_config = ConfigDict(extra="forbid", populate_by_name=True)


class Query(BaseModel):
    """Base of the query parameters and request bodies."""

    model_config = ConfigDict(extra="forbid", populate_by_name=True)


# --- errors ------------------------------------------------------------------------------------


class Error(Answer):
    """An error: a short name and what went wrong."""

    error: str
    message: str | None = None
    retry_after_s: int | None = Field(None, description="Seconds to wait before trying again (also in the Retry-After header).")
    limit: str | None = Field(None, description="The rate limit that was reached, e.g. '30 per 1 minute'.")


class ProblemItem(Answer):
    field: str = Field(description="Field path, e.g. requests[0].target.dec; empty for the whole document.")
    problem: str


class Invalid(Answer):
    """A document or parameter with problems: each field path and its problem."""

    error: str
    document: str
    problems: list[ProblemItem]


# --- proposals and runs ------------------------------------------------------------------------


class SubmitQuery(Query):
    wait: float | None = Field(
        None, ge=0, description="Wait up to this many seconds for the verdict (a self-check).", json_schema_extra={"x-setting-maximum": "MAX_WAIT_S"}
    )
    on_behalf_of: str | None = Field(None, description="Portals: the user name of the proposer submitted for.")


class PageQuery(Query):
    page: int = Field(1, ge=1, le=1_000_000)
    per_page: int = Field(50, ge=1, le=200)


class ProposalListQuery(PageQuery):
    semester: str | None = None
    verdict: Verdict | None = None
    instrument: str | None = None
    failed_check: str | None = Field(None, description="A check that came out worse than feasible.")


class RunLinks(Answer):
    self_: str = Field(alias="self")
    proposal: str


class Run(Answer):
    """A check run; ``result`` (every finding and figure) once done, where asked for."""

    id: int
    proposal_id: str
    proposal_version: int
    state: RunState
    reason: str
    verdict: Verdict | None
    attempts: int
    observatory_version: int
    schedule_version: int | None
    engine_version: str
    queued_at: Time | None
    started_at: Time | None
    finished_at: Time | None
    error: str | None
    links: RunLinks
    result: ProposalResult | None = None


class Submitted(Answer):
    """The run of a submission: new (202) or the existing one for identical content (200)."""

    created: bool = Field(description="Whether this submission made a new check run.")
    run: Run


class BulkBody(Query):
    proposals: list[dict[str, Any]] = Field(description="Proposals, each as in POST /api/v1/proposals.", json_schema_extra={"x-setting-max-items": "MAX_BULK"})


class BulkItem(Answer):
    """One item's own answer: 202 or 200 stored, 403, 422 with its problems, 503 store unavailable (send it again)."""

    index: int
    status: int
    created: bool | None = None
    run_id: int | None = None
    run: str | None = Field(None, description="The run's address.")
    error: str | None = None
    message: str | None = None
    document: str | None = None
    problems: list[ProblemItem] | None = None


class BulkAnswer(Answer):
    """How many items were accepted and rejected, and each item's own answer."""

    accepted: int
    rejected: int
    items: list[BulkItem]


class ProposalLinks(Answer):
    self_: str = Field(alias="self")


class ProposalSummary(Answer):
    proposal_id: str
    semester: str
    version: int
    title: str
    pi: str
    instruments: list[str]
    hours_requested: float
    submitted_at: Time | None
    verdict: Verdict | None
    run_id: int | None
    links: ProposalLinks


class ProposalPage(Answer):
    """A page of proposals, newest first."""

    items: list[ProposalSummary]
    page: int
    per_page: int
    total: int


class ProposalView(Answer):
    """A proposal: its latest version, latest run and the verdict that stands with its run (findings and figures)."""

    proposal_id: str
    semester: str
    version: int
    title: str
    pi: str
    instruments: list[str]
    hours_requested: float
    submitted_at: Time | None
    versions: int
    latest_run: Run | None
    verdict: Verdict | None
    result: Run | None


class RunPage(Answer):
    """A page of a proposal's check runs, newest first (results left out)."""

    proposal_id: str
    page: int
    per_page: int
    items: list[Run]


class Me(Answer):
    """The token's user: name and role."""

    name: str
    role: str


class Health(Answer):
    """The store answers."""

    status: Literal["ok"]
    mode: str = Field(description="Which dispatcher computes runs.")


class OpenApiDocument(RootModel[dict[str, Any]]):
    """An OpenAPI 3.1 document."""


# --- schedules, observatory, re-checks, changes, webhooks --------------------------------------


class StoredVersion(Answer):
    """A stored version of an instrument schedule (with its semester) or an observatory description (with its name)."""

    id: int
    version: str
    content_hash: str
    uploaded_at: Time | None
    uploaded_by: int | None = Field(description="The id of the user who uploaded it (none for the demo and command-line loads).")
    semester: str | None = None
    name: str | None = None


class ScheduledEntry(Answer):
    instrument: str | None = Field(description="The instrument mounted; none on an engineering or shutdown night.")
    status: str
    note: str | None


class NightChange(Answer):
    night: str
    kind: str
    before: ScheduledEntry | None
    after: ScheduledEntry | None


class GainedLost(Answer):
    gained: int
    lost: int


class ScheduleChanges(Answer):
    """The night-by-night differences between two versions of a semester's schedule."""

    semester: str
    previous_version: str | None
    current_version: str
    nights_added: list[NightChange]
    nights_removed: list[NightChange]
    instrument_changed: list[NightChange]
    status_changed: list[NightChange]
    affected_instruments: dict[str, int]
    gained_and_lost: dict[str, GainedLost]


class RecheckPlan(Answer):
    """The re-checks queued, by reason and by instrument."""

    queued: int
    already_queued: int
    by_reason: dict[str, int]
    by_instrument: dict[str, int]
    proposals: list[str]
    run_ids: list[int]


class UploadAnswer(Answer):
    """The version stored (or found the same as the one in force), its changes and the re-checks queued."""

    kind: str
    created: bool
    version: StoredVersion
    previous: StoredVersion | None
    diff: ScheduleChanges | None
    rechecks: RecheckPlan


class ScheduleView(Answer):
    """The schedule in force, the version before it, what changed and the document."""

    version: StoredVersion
    previous: StoredVersion | None
    changes: ScheduleChanges
    document: dict[str, Any]


class ScheduleVersions(Answer):
    """Every stored version of a semester's schedule, newest first."""

    semester: str
    items: list[StoredVersion]


class CompareQuery(Query):
    from_: int | None = Field(None, alias="from", description="The earlier version's id (default: the one before `to`).")
    to: int | None = Field(None, description="The later version's id (default: the one in force).")


class ScheduleComparison(Answer):
    """The changes between two stored versions."""

    from_: StoredVersion | None = Field(alias="from")
    to: StoredVersion
    changes: ScheduleChanges


class ObservatoryView(Answer):
    """The observatory description in force."""

    version: StoredVersion
    document: dict[str, Any]


class RecheckBody(Query):
    changed_since: datetime | None = None
    stale_days: float | None = Field(None, gt=0, le=36_525, description="Re-check results older than this many days.")


class ChangesQuery(Query):
    since: datetime | None = None
    limit: int = Field(100, ge=1, le=1000)


class ChangeLinks(Answer):
    run: str
    proposal: str


class Change(Answer):
    id: int
    proposal_id: str
    semester: str
    run_id: int
    previous_run_id: int | None
    verdict_before: Verdict | None
    verdict_after: Verdict | None
    recorded_at: Time | None
    reason: str | None
    requests: list[Any]
    links: ChangeLinks


class ChangeList(Answer):
    """Verdict and key-figure changes, oldest first."""

    since: Time | None
    count: int
    items: list[Change]


class WebhookBody(Query):
    url: str = Field(description="http(s) address; a public internet address unless WEBHOOK_ALLOW_PRIVATE allows others.")
    secret: str = Field(min_length=16, max_length=200)


class WebhookAnswer(Answer):
    """The user and their webhook address now."""

    name: str
    role: str
    webhook_url: str | None


# --- access ------------------------------------------------------------------------------------


class TokenInfo(Answer):
    """An API token's id, owner, note and times (never the token or its hash)."""

    id: int
    user: str
    label: str | None
    created_at: Time | None
    revoked_at: Time | None


class RevokedToken(TokenInfo):
    """The token, with when it was revoked and whether that happened now."""

    revoked_now: bool


class TokenList(Answer):
    """The user's tokens, live and revoked."""

    name: str
    items: list[TokenInfo]


class RevokedTokens(Answer):
    """The tokens revoked now."""

    name: str
    revoked: list[TokenInfo]


class PasswordBody(Query):
    password: str = Field(min_length=8, max_length=1000)


class PasswordAnswer(Answer):
    """Changed; how many dashboard sessions were ended."""

    name: str
    role: str
    sessions_ended: int


# --- published schemas -------------------------------------------------------------------------


class SchemaEntry(Answer):
    document: str
    version: int
    url: str


class SchemaIndex(Answer):
    """Each document's current schema version and URL."""

    schemas: list[SchemaEntry]


class SchemaDocument(RootModel[dict[str, Any]]):
    """A JSON Schema (draft 2020-12)."""


# --- technical review --------------------------------------------------------------------------


class ReviewDecision(Answer):
    kind: Literal["confirm", "override"]
    verdict: Verdict
    engine_verdict: Verdict | None
    run_id: int | None
    reason: str | None
    by: str
    at: Time


class ReviewNote(Answer):
    request: str | None
    text: str
    by: str
    at: Time


class TrailEntry(Answer):
    what: str
    by: str | None
    at: Time
    text: str | None
    request: str | None


class Review(Answer):
    """The whole review as reviewers and admins see it."""

    proposal_id: str
    engine_verdict: Verdict | None
    run_id: int | None
    reviewer: str | None
    final_verdict: Verdict | None
    decided_by: str | None
    to_review_again: bool
    decision: ReviewDecision | None
    notes: list[ReviewNote]
    trail: list[TrailEntry]


class ProposerNote(Answer):
    request: str | None
    text: str
    written_at: Time


class ProposerReview(Answer):
    """What a proposer or portal is told: the verdict that stands, and the notes when the observatory shows them."""

    proposal_id: str
    verdict: Verdict | None
    reviewed: bool
    notes: list[ProposerNote] | None = None


class ReviewAnswer(RootModel[Review | ProposerReview]):
    """Reviewers and admins: everything; proposers and portals: the verdict that stands."""


class AssignmentBody(Query):
    reviewer: str


class BulkAssignmentBody(Query):
    semester: str
    instrument: str
    reviewer: str


class BulkAssignment(Answer):
    """The proposals assigned."""

    reviewer: str
    assigned: list[str]
    count: int


class NoteBody(Query):
    text: str = Field(max_length=NOTE_MAX_CHARS)
    request: str | None = Field(None, description="An observation request's label; the whole proposal when absent.")


class DecisionBody(Query):
    decision: Literal["confirm", "override"]
    verdict: Verdict | None = Field(None, description="An override's verdict.")
    reason: str | None = Field(None, max_length=NOTE_MAX_CHARS)


# --- simulations -------------------------------------------------------------------------------


class SimulationView(Answer):
    """A simulation: its state, settings and, when done, its result."""

    id: int
    semester: str
    state: RunState
    settings: dict[str, Any]
    queued_at: Time
    finished_at: Time | None
    error: str | None
    result: dict[str, Any] | None = Field(
        None,
        description="Per request and proposal the chance of completion, of at least half the "
        "hours and the hours obtained; per instrument and lunar time the hours offered, lost to "
        "weather, used and asked for.",
    )
    url: str | None = Field(None, description="Where to follow it (in the answer to a new simulation).")


class SimulationList(Answer):
    """The semester's simulations, newest first, without results."""

    semester: str
    items: list[SimulationView]
