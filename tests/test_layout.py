"""The layout rules of DEVELOPERS.md, read from the source (issue 15, point 5): no import
cycle among the project's modules (every import counted, also those inside functions),
and a planning core that imports nothing of the service, Flask, Redis or RQ. The cycle
check is the standard library's (``graphlib.TopologicalSorter`` raises ``CycleError``)."""

from __future__ import annotations

import ast
import graphlib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _modules() -> dict[str, Path]:
    out = {}
    for top in ("service", "workers"):
        for path in sorted((ROOT / top).rglob("*.py")):
            name = ".".join(path.relative_to(ROOT).with_suffix("").parts)
            out[name.removesuffix(".__init__")] = path
    return out


def _imports(name: str, path: Path, known: dict[str, Path]) -> set[str]:
    """The project modules ``name`` imports: ``from pkg import mod`` counts ``pkg.mod``,
    and ``pkg`` itself only for a name that is not a module of it."""
    pkg = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        targets: list[str] = []
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parts = pkg.split(".")[: len(pkg.split(".")) - node.level + 1]
                base = ".".join([*parts, base] if base else parts)
            subs = [f"{base}.{a.name}" for a in node.names if f"{base}.{a.name}" in known]
            # the package itself only when a name is not one of its modules
            targets = subs + ([base] if len(subs) < len(node.names) else [])
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name:
                found.add(t)
    return found


def test_no_import_cycle() -> None:
    """Every module can be ordered before the modules that import it."""
    known = _modules()
    graph = {name: _imports(name, path, known) for name, path in known.items()}
    sorter = graphlib.TopologicalSorter(graph)
    sorter.prepare()  # raises graphlib.CycleError naming the cycle


def test_the_planning_core_imports_no_adapter() -> None:
    """workers/planning is a library: no Flask, Redis, RQ or service module in it."""
    core = ROOT / "workers" / "planning"
    banned = ("flask", "redis", "rq", "werkzeug", "marshmallow", "service")
    found = []
    for path in sorted(core.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and not node.level:
                names = [node.module or ""]
            found += [f"{path.relative_to(ROOT)}: {n}" for n in names if n.split(".")[0] in banned]
    assert found == []
