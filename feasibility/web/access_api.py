"""The API for taking access away (under /api/v1, admin only): list and revoke tokens, set a user's password.

The same actions as ``feasibility token list|revoke`` and ``feasibility user
set-password``. A new password ends every dashboard session of the user
(:func:`feasibility.web.auth.set_password`); tokens are revoked, never deleted,
so the list still shows when each one stopped working.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from flask import Blueprint, abort, request
from sqlalchemy import select
from sqlalchemy.orm import Session

from feasibility.documents.loading import DocumentError, Problem
from feasibility.service import access
from feasibility.store.db import session_scope
from feasibility.store.models import ApiToken, User
from feasibility.web.auth import password_problem, require, revoke_tokens, set_password

__all__ = ["bp", "token_json"]

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
    return moment.isoformat()


def _user(session: Session, name: str) -> User:
    user = session.scalar(select(User).where(User.name == name))
    if user is None:
        abort(404, description=f"no user named {name!r}")
    return user
