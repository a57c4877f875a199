"""The layers hold: no module imports upward, the faces do not import each other, and the parts form no cycle.

Floors, lowest first (the project's rule, README "Layers"): the documents and results
(with the settings, the logging set-up and the offline astropy set-up beside them),
the engine, the store, the service, then the three faces (web, cli, worker), which
stand side by side. Every ``import`` counts, inside functions too: an import that
runs only when a function is called still ties the two parts together.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: Each part of the code and its floor. The faces share the top floor and may not import one another.
FLOORS: dict[str, int] = {
    "feasibility": 0,  # the package's own __init__
    "feasibility.documents": 0,
    "feasibility.results": 0,
    "feasibility.settings": 0,
    "feasibility.logs": 0,
    "feasibility.offline": 0,
    "feasibility.engine": 1,
    "feasibility.report": 1,
    "feasibility.demo_semester": 1,
    "feasibility.store": 2,
    "feasibility.service": 3,
    "feasibility.web": 4,
    "feasibility.cli": 4,
    "worker": 4,
}
FACES = {"feasibility.web", "feasibility.cli", "worker"}
#: The one module of a face allowed to import another face: ``feasibility serve`` starts the web app, which is its job.
FACE_DOORS = {("feasibility.cli.serve", "feasibility.web")}


def part_of(module: str) -> str | None:
    """The longest part in :data:`FLOORS` that ``module`` belongs to (None: outside the project)."""
    best = None
    for part in FLOORS:
        if (module == part or module.startswith(part + ".")) and (best is None or len(part) > len(best)):
            best = part
    return best


def module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imports_of(path: Path, root: Path) -> Iterator[tuple[int, str]]:
    """Every module ``path`` imports (line, name), at any depth in the file; relative imports made absolute."""
    name = module_name(path, root)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield node.lineno, alias.name
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[: len(package.split(".")) - (node.level - 1)] if package else []
                base = ".".join([*anchor, base] if base else anchor)
            yield node.lineno, base
            for alias in node.names:  # `from feasibility import engine` imports the engine
                yield node.lineno, f"{base}.{alias.name}"


def violations(root: Path) -> tuple[list[str], dict[str, set[str]]]:
    """The upward and sideways imports under ``root``, and the graph of the parts (who imports whom)."""
    problems: list[str] = []
    graph: dict[str, set[str]] = {}
    files = [p for top in ("feasibility", "worker") if (root / top).is_dir() for p in sorted((root / top).rglob("*.py"))]
    for path in files:
        name = module_name(path, root)
        source = part_of(name)
        if source is None:
            continue
        seen: set[tuple[int, str]] = set()
        for line, target_module in imports_of(path, root):
            target = part_of(target_module)
            if target is None or target == source or (line, target) in seen:
                continue
            seen.add((line, target))
            if target_module == "feasibility" and source != "feasibility":
                continue  # the bare package, imported for its name only
            if (name, target) in FACE_DOORS:
                continue
            graph.setdefault(source, set()).add(target)
            where = f"{path.relative_to(root)}:{line} imports {target_module}"
            if FLOORS[target] > FLOORS[source]:
                problems.append(f"{where} (upward: {source} stands on floor {FLOORS[source]}, {target} on {FLOORS[target]})")
            elif source in FACES and target in FACES:
                problems.append(f"{where} (one face importing another)")
    return problems, graph


def cycle_in(graph: dict[str, set[str]]) -> list[str] | None:
    """One cycle of the graph, as the parts along it, or None."""
    state: dict[str, int] = {}
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                return path[path.index(nxt) :] + [nxt]
            if nxt not in state and (found := visit(nxt)) is not None:
                return found
        path.pop()
        state[node] = 2
        return None

    for node in sorted(graph):
        if node not in state and (found := visit(node)) is not None:
            return found
    return None


def test_no_module_imports_upward_or_across_the_faces() -> None:
    problems, _ = violations(ROOT)
    assert problems == []


def test_the_parts_form_no_cycle() -> None:
    _, graph = violations(ROOT)
    assert cycle_in(graph) is None
    assert "feasibility.web" not in graph.get("worker", set()) and "worker" not in graph.get("feasibility.web", set())


def test_every_module_belongs_to_a_floor() -> None:
    loose = [str(p.relative_to(ROOT)) for top in ("feasibility", "worker") for p in (ROOT / top).rglob("*.py") if part_of(module_name(p, ROOT)) is None]
    assert loose == []


@pytest.mark.parametrize(
    ("where", "text", "expected"),
    [
        ("feasibility/store/bad.py", "def f():\n    from feasibility.service import runs\n", "upward"),
        ("feasibility/engine/bad.py", "from ..web import create_app\n", "upward"),
        ("worker/bad.py", "import feasibility.web\n", "one face importing another"),
        ("feasibility/cli/bad.py", "from worker import celery_app\n", "one face importing another"),
    ],
)
def test_the_check_finds_a_planted_import(tmp_path: Path, where: str, text: str, expected: str) -> None:
    """The scanner itself: an import inside a function, a relative one, and a face importing a face are all caught."""
    for package in ("feasibility", "feasibility/store", "feasibility/engine", "feasibility/service", "feasibility/web", "feasibility/cli", "worker"):
        (tmp_path / package).mkdir(parents=True, exist_ok=True)
        (tmp_path / package / "__init__.py").write_text("")
    (tmp_path / where).write_text(text)
    problems, _ = violations(tmp_path)
    assert len(problems) == 1 and expected in problems[0]


def test_the_cycle_search_finds_a_cycle() -> None:
    assert cycle_in({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert cycle_in({"a": {"b"}, "b": {"c"}}) is None


@pytest.mark.parametrize(
    "code",
    [
        "import worker.celery_app",  # a Celery worker process starting
        "from click.testing import CliRunner\nfrom feasibility.cli import main\n"
        "for args in (['db', 'upgrade'], ['token', 'create', '--user', 'ada', '--role', 'admin'], ['recheck']):\n"
        "    result = CliRunner().invoke(main, args)\n    assert result.exit_code == 0, result.output",
    ],
    ids=["worker", "command"],
)
def test_workers_and_commands_start_without_the_web_app(code: str, tmp_path: Path) -> None:
    """Run for real in a fresh interpreter: neither Flask nor any module of the web face is loaded."""
    import os
    import subprocess
    import sys

    env = {k: v for k, v in os.environ.items() if not k.startswith("FEASIBILITY_") and k not in ("DATABASE_URL", "BROKER_URL")}
    env.update(FEASIBILITY_HOME=str(tmp_path), FEASIBILITY_SEED_DEMO="false")
    check = code + "\nimport sys\nloaded = sorted(m for m in sys.modules if m == 'flask' or m.startswith('feasibility.web'))\nassert not loaded, loaded\n"
    done = subprocess.run([sys.executable, "-c", check], env=env, cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
