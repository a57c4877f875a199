"""The Celery workers' entry point: ``celery -A worker.celery_app worker``; settings come from the environment."""

from feasibility.web import create_app

flask_app = create_app()
celery_app = flask_app.extensions["celery"]
