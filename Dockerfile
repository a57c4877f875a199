# The feasibility service: one image for the web app, the Celery workers and Celery beat.
# Configuration comes from the environment only (see docker-compose.yml).
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    FEASIBILITY_HOME=/var/lib/feasibility \
    FEASIBILITY_CACHE_DIR=/var/cache/feasibility

WORKDIR /app
COPY pyproject.toml README.md ./
COPY feasibility ./feasibility
COPY worker ./worker
COPY migrations ./migrations
# Editable install: the Alembic migrations are found beside the package.
RUN pip install -e '.[server]' \
    && useradd --system --home-dir /var/lib/feasibility --create-home feasibility \
    && mkdir -p /var/cache/feasibility && chown feasibility /var/cache/feasibility

USER feasibility
EXPOSE 8000
# The web app; docker-compose.yml overrides the command for workers and beat.
CMD ["gunicorn", "--bind", "0.0.0.0:8000", "--workers", "2", "--threads", "4", "--timeout", "60", "feasibility.web:create_app()"]
