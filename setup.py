"""Packaging beyond what pyproject.toml can say: the top-level ``migrations/`` folder is installed as
``feasibility.store.migrations`` (setuptools' package-dir mapping), so a plain ``pip install .`` can migrate.
Package data (templates, demo files, the migration script template) is listed in pyproject.toml."""

from setuptools import find_packages, setup

MIGRATIONS = ["feasibility.store.migrations", "feasibility.store.migrations.versions"]

setup(
    packages=[*find_packages(include=["feasibility", "feasibility.*", "worker", "worker.*"]), *MIGRATIONS],
    package_dir={"feasibility.store.migrations": "migrations"},
)
