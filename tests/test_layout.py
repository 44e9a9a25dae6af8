"""The code's layout holds: one folder per stage, imports one way, no cycles.

Walks every module of ``analysis`` and ``server`` with :mod:`ast` (no extra tool),
collects the project imports of each (including those under ``TYPE_CHECKING`` and
inside functions: a cycle there is still a cycle for the reader), and checks:

- nothing in ``analysis`` imports ``server`` (or a web framework);
- the stages of ``analysis`` depend one way, in pipeline order: every stage uses the
  core; archive may use ingest (it checks a channel map before keeping it); detect
  may use archive; compare may use detect and archive; demo may use all of them;
  the core uses no stage;
- no import cycle between modules anywhere.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("analysis", "server")

#: Stage -> the stages it may import (besides itself and the core).
ALLOWED: dict[str, set[str]] = {
    "core": set(),
    "ingest": set(),  # ingest writes through a protocol, never imports the archive
    "archive": {"ingest"},  # the store checks a channel map before it keeps one
    "detect": {"archive"},
    "compare": {"detect", "archive"},
    "demo": {"ingest", "archive", "detect", "compare"},
}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    found = {}
    for pkg in PACKAGES:
        for path in sorted((ROOT / pkg).rglob("*.py")):
            found[_module_name(path)] = path
    return found


MODULES = _modules()


def _resolve(name: str) -> str | None:
    """The longest known module that ``name`` (a dotted import target) starts with."""
    parts = name.split(".")
    while parts:
        candidate = ".".join(parts)
        if candidate in MODULES:
            return candidate
        parts.pop()
    return None


def _imports(module: str) -> set[str]:
    tree = ast.parse(MODULES[module].read_text(encoding="utf-8"))
    out: set[str] = set()
    for node in ast.walk(tree):
        targets: list[str] = []
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            # `from analysis.demo import course` names the module analysis.demo.course
            targets = [f"{node.module}.{alias.name}" for alias in node.names] + [node.module]
        for target in targets:
            hit = _resolve(target)
            if hit is not None and hit != module:
                out.add(hit)
    # A package's __init__ is imported with each of its modules: it is no real edge.
    return {m for m in out if not (MODULES[m].name == "__init__.py" and module.startswith(m))}


GRAPH = {m: _imports(m) for m in MODULES}


def _stage(module: str) -> str:
    parts = module.split(".")
    if parts[0] != "analysis" or len(parts) < 2 or parts[1] not in ALLOWED:
        return "core"
    return parts[1]


def test_the_walk_sees_the_stages():
    # Guard: the test below would pass vacuously if the walk found nothing.
    assert "analysis.detect.pipeline" in GRAPH
    assert "analysis.archive.store" in GRAPH["analysis.detect.pipeline"]


def test_analysis_never_imports_server_or_a_web_framework():
    bad = []
    for module, path in MODULES.items():
        if not module.startswith("analysis"):
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            bad += [
                f"{module} imports {n}"
                for n in names
                if n.split(".")[0] in {"server", "fastapi", "starlette", "uvicorn"}
            ]
    assert bad == []


def test_stages_import_one_way():
    bad = []
    for module, deps in GRAPH.items():
        if not module.startswith("analysis"):
            continue
        own = _stage(module)
        for dep in deps:
            other = _stage(dep)
            if other in (own, "core"):
                continue
            if other not in ALLOWED[own]:
                bad.append(f"{module} ({own}) imports {dep} ({other})")
    # The core may import no stage at all.
    assert bad == []


def _find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                return stack[stack.index(nxt) :] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(graph):
        if node not in state:
            found = visit(node)
            if found:
                return found
    return None


def test_no_import_cycle():
    cycle = _find_cycle(GRAPH)
    assert cycle is None, " -> ".join(cycle or [])


def test_the_cycle_finder_finds_a_planted_cycle():
    # Guard against a finder that cannot fail.
    assert _find_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _find_cycle({"a": {"b"}, "b": set()}) is None


@pytest.mark.parametrize("stage", ["ingest", "archive", "detect", "compare", "demo"])
def test_each_stage_states_what_it_does(stage):
    doc = ast.get_docstring(ast.parse((ROOT / "analysis" / stage / "__init__.py").read_text()))
    assert doc and "Entry point" in doc
