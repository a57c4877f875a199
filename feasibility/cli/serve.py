"""``feasibility serve``: the one command that starts the web face (API and pages) with its embedded workers.

It is the only place where the command line reaches into the web app (tests/test_layers.py allows this one module):
serving pages is what it is for. Every other command works on the service's runtime alone.
"""

from __future__ import annotations

import click
from sqlalchemy import func, select

from feasibility.cli.service import safe_url

__all__ = ["serve"]


@click.command()
@click.option("--host", default="127.0.0.1", show_default=True, help="Address to listen on.")
@click.option("--port", default=5000, show_default=True, type=click.IntRange(0, 65535), help="Port to listen on (0: any free port).")
@click.option("--workers", default=2, show_default=True, type=click.IntRange(1, 32), help="Embedded check workers (threads).")
@click.option(
    "--demo", is_flag=True, help="Also submit the demo proposals and a generated semester, and make a reviewer, a proposer and an admin to sign in as."
)
def serve(host: str, port: int, workers: int, demo: bool) -> None:
    """Run the service on this machine: store (SQLite by default), embedded workers, API and pages.

    The store is upgraded and the demo observatory loaded when empty. With no
    user yet, an admin token is made and printed once.
    """
    from werkzeug.serving import make_server

    from feasibility.settings import load_settings
    from feasibility.store.migrate import upgrade
    from feasibility.web import create_app, settle_for_serving

    settings = load_settings()
    url = settings.store_url()
    upgrade(url)
    overrides: dict[str, object] = {"EMBEDDED_WORKERS": workers}
    if demo and _loopback(host) and settings.session_cookie_secure is None:
        overrides["SESSION_COOKIE_SECURE"] = False  # the demo on this machine is plain http; nobody else can reach it
    app = create_app(overrides, settings=settings)
    with app.app_context():
        _first_admin_token()
        if demo:
            from feasibility.cli.demo import seed_demo_store

            seed_demo_store()
    dispatcher = app.extensions["feasibility.dispatch"]
    if hasattr(dispatcher, "start"):
        dispatcher.start()
    settle_for_serving()
    server = make_server(host, port, app, threaded=True)
    mode = "Celery workers via BROKER_URL" if app.config["BROKER_URL"] else f"{workers} embedded workers"
    click.echo(f"Serving on http://{host}:{server.server_port}/  (dashboard: /, API: /api/v1, store: {safe_url(app.config['DATABASE_URL'])}, {mode})")
    if app.config["SESSION_COOKIE_SECURE"]:
        click.echo(
            "The dashboard's cookie is sent over https only: sign in through an https proxy, "
            "or set FEASIBILITY_SESSION_COOKIE_SECURE=false on a closed network."
        )
    click.echo("Press Ctrl+C to stop.")
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
        if hasattr(dispatcher, "shutdown"):
            dispatcher.shutdown()


def _first_admin_token() -> None:
    from feasibility.service.accounts import create_token, create_user
    from feasibility.store.db import session_scope
    from feasibility.store.models import User

    with session_scope() as session:
        if session.scalar(select(func.count()).select_from(User)):
            return
        admin = create_user(session, "admin", "admin")
        token = create_token(session, admin, "made by the first `feasibility serve`")
    click.echo(f"Admin API token (shown once; keep it): {token}")


def _loopback(host: str) -> bool:
    """Whether ``host`` is this machine only (localhost, 127.0.0.0/8, ::1)."""
    import ipaddress

    if host.lower() in ("localhost", "localhost."):
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False
