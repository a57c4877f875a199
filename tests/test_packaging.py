"""What the installed package carries: a plain (non-editable) install can migrate a database, every imported
distribution is declared, and the licence file matches pyproject.toml."""

from __future__ import annotations

import ast
import os
import sqlite3
import subprocess
import sys
import tomllib
from importlib.metadata import packages_distributions
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))


def test_a_plain_install_migrates_a_database(tmp_path: Path) -> None:
    """Build the wheel, install it (no editable link) into a folder and run `feasibility db upgrade` from there."""
    dist, site = tmp_path / "dist", tmp_path / "site"
    build = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "--no-build-isolation", "-w", str(dist), str(ROOT)],
        capture_output=True,
        text=True,
        cwd=tmp_path,
    )
    assert build.returncode == 0, build.stderr
    (wheel,) = dist.glob("feasibility-*.whl")
    install = subprocess.run(
        [sys.executable, "-m", "pip", "install", "-q", "--no-deps", "--no-index", "--target", str(site), str(wheel)],
        capture_output=True,
        text=True,
        cwd=tmp_path,
    )
    assert install.returncode == 0, install.stderr
    database = tmp_path / "store.db"
    env = {k: v for k, v in os.environ.items() if k not in ("FEASIBILITY_MIGRATIONS", "DATABASE_URL")}
    env |= {"PYTHONPATH": str(site), "FEASIBILITY_HOME": str(tmp_path / "home"), "DATABASE_URL": f"sqlite:///{database}"}
    script = (
        "import sys, feasibility, feasibility.store.migrate as m\n"
        "print(feasibility.__file__); print(m.migrations_dir())\n"
        "from feasibility.cli import main\n"
        "sys.argv = ['feasibility', 'db', 'upgrade']\n"
        "main()\n"
    )
    upgraded = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, cwd=tmp_path, env=env)
    assert upgraded.returncode == 0, upgraded.stdout + upgraded.stderr
    package_file, migrations = upgraded.stdout.splitlines()[:2]
    assert Path(package_file).is_relative_to(site), "the installed copy, not the source tree, was imported"
    assert Path(migrations) == site / "feasibility" / "store" / "migrations"
    head = sorted(p.name for p in (ROOT / "migrations" / "versions").glob("[0-9]*.py"))[-1].split("_")[0]
    with sqlite3.connect(database) as connection:
        (version,) = connection.execute("SELECT version_num FROM alembic_version").fetchone()
        tables = {row[0] for row in connection.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert version.startswith(head)
    from feasibility.store.models import Base

    assert tables == set(Base.metadata.tables) | {"alembic_version"}  # every table the models declare, no more


def _imported_top_level_modules(*folders: str) -> set[str]:
    names: set[str] = set()
    for folder in folders:
        for path in (ROOT / folder).rglob("*.py"):
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, ast.Import):
                    names |= {alias.name.split(".")[0] for alias in node.names}
                elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                    names.add(node.module.split(".")[0])
    return names


def _declared(requirements: list[str]) -> set[str]:
    import re

    return {re.split(r"[\s\[<>=!~;]", line, maxsplit=1)[0].lower().replace("_", "-") for line in requirements}


@pytest.mark.parametrize(("folders", "extras"), [(("feasibility", "worker", "migrations"), ()), (("tests", "benchmarks"), ("test",))])
def test_every_imported_distribution_is_declared(folders: tuple[str, ...], extras: tuple[str, ...]) -> None:
    """Each third-party module the code imports comes from a distribution pyproject.toml names (PEP 508 names)."""
    project = PYPROJECT["project"]
    declared = _declared(project["dependencies"])
    for extra in extras:
        declared |= _declared(project["optional-dependencies"][extra])
    ours = {"feasibility", "worker", "tests", "web", "test_exposure", "integration", "conftest", "support", "private_services", "bench_service"}
    providers = packages_distributions()
    missing = {}
    for name in sorted(_imported_top_level_modules(*folders) - set(sys.stdlib_module_names) - ours):
        distributions = {d.lower().replace("_", "-") for d in providers.get(name, [])}
        assert distributions, f"{name} is imported but no installed distribution provides it"
        if not distributions & declared:
            missing[name] = sorted(distributions)
    assert not missing, f"imported but not declared in pyproject.toml: {missing}"


def test_the_licence_file_matches_pyproject() -> None:
    declared = PYPROJECT["project"]["license"]["text"]
    assert declared == "BSD-3-Clause"
    text = (ROOT / "LICENSE").read_text(encoding="utf-8")
    assert text.startswith("BSD 3-Clause License") and "Neither the name of the copyright holder" in text  # SPDX BSD-3-Clause text
