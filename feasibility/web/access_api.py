"""The API for taking access away (under /api/v1, admin only): list and revoke tokens, set a user's password.

The same actions as ``feasibility token list|revoke`` and ``feasibility user
set-password``. A new password ends every dashboard session of the user
(:func:`feasibility.web.auth.set_password`); tokens are revoked, never deleted,
so the list still shows when each one stopped working.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from flask import Blueprint, abort, request
from sqlalchemy import select
from sqlalchemy.orm import Session

from feasibility.documents.loading import DocumentError, Problem
from feasibility.service import access
from feasibility.store.db import session_scope
from feasibility.store.models import ApiToken, User
from feasibility.web.auth import password_problem, require, revoke_tokens, set_password

__all__ = ["OPENAPI_PATHS", "bp", "token_json"]

bp = Blueprint("access_api", __name__, url_prefix="/api/v1")


@bp.errorhandler(DocumentError)
def _invalid(error: DocumentError) -> tuple[dict[str, Any], int]:
    return error.as_dict(), 422


@bp.get("/users/<name>/tokens")
@require(access.MANAGE_ACCESS)
def list_tokens(name: str) -> dict[str, Any]:
    """The user's API tokens, live and revoked (never the tokens themselves)."""
    with session_scope(read_only=True) as session:
        user = _user(session, name)
        tokens = session.scalars(select(ApiToken).where(ApiToken.user_id == user.id).order_by(ApiToken.id)).all()
        return {"name": user.name, "items": [token_json(token, user.name) for token in tokens]}


@bp.post("/tokens/<int:token_id>/revoke")
@require(access.MANAGE_ACCESS)
def revoke_token(token_id: int) -> dict[str, Any]:
    """Revoke one token by its id; revoking a revoked token changes nothing and says when it was revoked."""
    with session_scope() as session:
        token = session.get(ApiToken, token_id)
        if token is None:
            abort(404, description=f"no token with id {token_id}")
        newly = bool(revoke_tokens(session, token_id=token_id)) if token.revoked_at is None else False
        return {**token_json(token, token.user.name), "revoked_now": newly}


@bp.post("/users/<name>/tokens/revoke")
@require(access.MANAGE_ACCESS)
def revoke_user_tokens(name: str) -> dict[str, Any]:
    """Revoke every live token of the user; the ones revoked now."""
    with session_scope() as session:
        user = _user(session, name)
        revoked = revoke_tokens(session, user=user)
        return {"name": user.name, "revoked": [token_json(token, user.name) for token in revoked]}


@bp.put("/users/<name>/password")
@require(access.MANAGE_ACCESS)
def put_password(name: str) -> dict[str, Any]:
    """Set the user's password (``{"password": ...}``) and end their dashboard sessions."""
    body = request.get_json(silent=True)
    if not isinstance(body, dict):
        raise DocumentError([Problem("", "send a JSON object with 'password'")], "password")
    password = body.get("password")
    if not isinstance(password, str):
        raise DocumentError([Problem("password", "is required (text)")], "password")
    if (problem := password_problem(password)) is not None:
        raise DocumentError([Problem("password", problem)], "password")
    with session_scope() as session:
        user = _user(session, name)
        ended = set_password(session, user, password)
        return {"name": user.name, "role": user.role, "sessions_ended": ended}


def token_json(token: ApiToken, user_name: str) -> dict[str, Any]:
    """One token as the API shows it: id, owner, note and times (never the token or its hash)."""
    return {
        "id": token.id,
        "user": user_name,
        "label": token.label,
        "created_at": _iso(token.created_at),
        "revoked_at": _iso(token.revoked_at),
    }


def _iso(moment: datetime | None) -> str | None:
    if moment is None:
        return None
    return (moment if moment.tzinfo is not None else moment.replace(tzinfo=UTC)).isoformat()


def _user(session: Session, name: str) -> User:
    user = session.scalar(select(User).where(User.name == name))
    if user is None:
        abort(404, description=f"no user named {name!r}")
    return user


_NAME = {"name": "name", "in": "path", "required": True, "schema": {"type": "string"}}
_TOKEN_ID = {"name": "token_id", "in": "path", "required": True, "schema": {"type": "integer"}}
_ADMIN_ONLY = {"401": {"$ref": "#/components/responses/Error"}, "403": {"$ref": "#/components/responses/Error"}}
_TOKEN_SCHEMA = {"$ref": "#/components/schemas/TokenInfo"}

#: The OpenAPI path items of this blueprint (merged into /api/v1/openapi.json).
OPENAPI_PATHS: dict[str, Any] = {
    "/api/v1/users/{name}/tokens": {"get": {
        "summary": "A user's API tokens, live and revoked (admin)",
        "parameters": [_NAME],
        "responses": {"200": {"description": "The tokens (never the secret itself).", "content": {"application/json": {"schema": {
            "type": "object", "properties": {"name": {"type": "string"}, "items": {"type": "array", "items": _TOKEN_SCHEMA}}}}}},
            "404": {"$ref": "#/components/responses/Error"}, **_ADMIN_ONLY},
    }},
    "/api/v1/tokens/{token_id}/revoke": {"post": {
        "summary": "Revoke one API token (admin)",
        "description": "The token stops working at once. Revoking a revoked token changes nothing (`revoked_now`: false).",
        "parameters": [_TOKEN_ID],
        "responses": {"200": {"description": "The token, with `revoked_at` and `revoked_now`.", "content": {"application/json": {
            "schema": {"allOf": [_TOKEN_SCHEMA, {"type": "object", "properties": {"revoked_now": {"type": "boolean"}}}]}}}},
            "404": {"$ref": "#/components/responses/Error"}, **_ADMIN_ONLY},
    }},
    "/api/v1/users/{name}/tokens/revoke": {"post": {
        "summary": "Revoke every live API token of a user (admin)",
        "parameters": [_NAME],
        "responses": {"200": {"description": "The tokens revoked now.", "content": {"application/json": {"schema": {
            "type": "object", "properties": {"name": {"type": "string"}, "revoked": {"type": "array", "items": _TOKEN_SCHEMA}}}}}},
            "404": {"$ref": "#/components/responses/Error"}, **_ADMIN_ONLY},
    }},
    "/api/v1/users/{name}/password": {"put": {
        "summary": "Set a user's password (admin)",
        "description": "Ends every dashboard session of the user, including copies of their cookies. At least 8 characters.",
        "parameters": [_NAME],
        "requestBody": {"required": True, "content": {"application/json": {"schema": {
            "type": "object", "required": ["password"], "properties": {"password": {"type": "string", "minLength": 8, "maxLength": 1000}}}}}},
        "responses": {"200": {"description": "Changed; how many sessions were ended.", "content": {"application/json": {"schema": {
            "type": "object", "properties": {"name": {"type": "string"}, "role": {"type": "string"}, "sessions_ended": {"type": "integer"}}}}}},
            "404": {"$ref": "#/components/responses/Error"}, "422": {"$ref": "#/components/responses/Invalid"}, **_ADMIN_ONLY},
    }},
}

#: Schemas this blueprint's paths refer to.
OPENAPI_SCHEMAS: dict[str, Any] = {
    "TokenInfo": {
        "type": "object",
        "required": ["id", "user"],
        "properties": {
            "id": {"type": "integer"},
            "user": {"type": "string"},
            "label": {"type": ["string", "null"]},
            "created_at": {"type": ["string", "null"], "format": "date-time"},
            "revoked_at": {"type": ["string", "null"], "format": "date-time"},
        },
    },
}
