"""503 Service Unavailable while the store cannot be reached, instead of a 500 and a traceback.

A PostgreSQL restart, a dropped connection, a full connection pool or an SQLite
store locked past its busy timeout are passing states: the client is told so
(RFC 9110 section 15.6.4, 503 Service Unavailable) and when to try again
(section 10.2.3, Retry-After in seconds). Under /api/ the answer is JSON; elsewhere
it is a plain page that needs nothing from the store (the site's own pages look
up the signed-in user, which is exactly what cannot be done now). Once the store
is back, the engine's pre-ping replaces the dead pooled connections.
"""

from __future__ import annotations

import logging
from typing import Any

from flask import Flask, current_app, request
from sqlalchemy.exc import InterfaceError, OperationalError
from sqlalchemy.exc import TimeoutError as PoolTimeout

__all__ = ["STORE_ERRORS", "register"]

log = logging.getLogger(__name__)

#: What a store that is down, restarting, overloaded or locked raises (DBAPI connection errors
#: arrive as OperationalError or InterfaceError; PoolTimeout: no pooled connection came free).
STORE_ERRORS: tuple[type[Exception], ...] = (OperationalError, InterfaceError, PoolTimeout)

MESSAGE = "The database cannot be used just now (it is unreachable, restarting or busy). Nothing was changed; please try again shortly."

_PAGE = """<!doctype html>
<html lang="en">
<head><meta charset="utf-8"><title>503 Service Unavailable</title></head>
<body>
<h1>Service unavailable</h1>
<p>{message}</p>
<p>Try again in {seconds} seconds.</p>
</body>
</html>
"""


def register(app: Flask) -> None:
    """Answer 503 with Retry-After (the ``RETRY_AFTER_S`` setting, in seconds) whenever a request meets a store error."""
    for error in STORE_ERRORS:
        app.register_error_handler(error, _store_unavailable)


def _store_unavailable(error: Exception) -> Any:
    seconds = int(current_app.config["RETRY_AFTER_S"])
    log.warning("store unavailable during %s %s: %s", request.method, request.path, getattr(error, "orig", None) or error)
    headers = {"Retry-After": str(seconds), "Cache-Control": "no-store"}
    if request.path.startswith("/api/"):
        return {"error": "service unavailable", "message": MESSAGE, "retry_after_s": seconds}, 503, headers
    return _PAGE.format(message=MESSAGE, seconds=seconds), 503, {**headers, "Content-Type": "text/html; charset=utf-8"}
