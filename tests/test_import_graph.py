"""The package's imports run one way: no module imports itself back through another, and the
stages sit in layers (shared modules < model < design < bench < codegen < tune < cli).

Every module under ``coildrive/`` is parsed with :mod:`ast`, imports inside functions
included (a function-level import is still a dependency, only a later one). A relative
import is resolved against the module's package; ``from package import name`` counts as
an import of ``package.name`` when that is a module. A package's ``__init__`` is not
counted as imported by its own submodules (Python runs it first, and ours hold only
docstrings and re-exports of their own submodules).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "coildrive"

#: Stage layers, lowest first: a module may import from its own layer or any lower one.
#: The shared small modules (config, units, errors, file writing, resources, JSON and
#: console helpers) form the bottom layer.
LAYERS = ["shared", "model", "design", "bench", "codegen", "tune", "cli"]
#: The one import against the layers, and why it cannot make a cycle: config fills the
#: currents a drive file leaves out of ``[armature]`` from the static force balance in
#: ``model.magnet``, which is plain numpy and imports nothing of ours (checked below).
ALLOWED = {("coildrive.config", "coildrive.model.magnet")}


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE.parent).with_suffix("")
        parts = list(rel.parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def _imports(name: str, path: Path, modules: dict[str, Path]) -> set[str]:
    """Modules of ours that module ``name`` imports (anywhere in its body)."""
    is_package = path.name == "__init__.py"
    package = name if is_package else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                stem = ".".join(base + ([node.module] if node.module else []))
            else:
                stem = node.module or ""
            targets = [f"{stem}.{a.name}" if f"{stem}.{a.name}" in modules else stem
                       for a in node.names]
        else:
            continue
        for t in targets:
            while t and t not in modules:
                t = t.rpartition(".")[0]
            if t and t != name and not name.startswith(t + "."):
                found.add(t)
    return found


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    return {name: _imports(name, path, modules) for name, path in modules.items()}


def _stage(module: str) -> str:
    parts = module.split(".")
    if len(parts) > 1 and parts[1] in LAYERS:
        return parts[1]
    return "cli" if module in ("coildrive.__main__",) else "shared"


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import cycle as a list of modules (first == last), or None (depth-first search)."""
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n: str) -> list[str] | None:
        state[n] = 1
        stack.append(n)
        for m in sorted(graph.get(n, ())):
            if state.get(m) == 1:
                return stack[stack.index(m):] + [m]
            if m not in state:
                found = visit(m)
                if found:
                    return found
        stack.pop()
        state[n] = 2
        return None

    for n in sorted(graph):
        if n not in state:
            found = visit(n)
            if found:
                return found
    return None


def test_the_graph_sees_function_level_and_relative_imports():
    """The parser itself: a known module-level, relative and function-level import each."""
    g = _graph()
    assert "coildrive.design.result" in g["coildrive.design.hold_voltage"]
    assert "coildrive.model.circuit" in g["coildrive.design.hold_voltage"]
    # function-level: the design command imports the design stage inside its function
    assert "coildrive.design" in g["coildrive.cli.design_cmd"] or \
        "coildrive.design.core" in g["coildrive.cli.design_cmd"]


def test_a_planted_cycle_is_found():
    """The cycle search finds a cycle that is there (so a pass below means something)."""
    g = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert _cycle(g) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None


def test_no_import_cycles():
    cycle = _cycle(_graph())
    assert cycle is None, "import cycle: " + " -> ".join(cycle)


@pytest.mark.parametrize("stage", LAYERS)
def test_stages_import_one_way(stage):
    """A module imports only from its own stage or the stages below it."""
    rank = {s: k for k, s in enumerate(LAYERS)}
    bad = [f"{a} -> {b}" for a, deps in _graph().items() if _stage(a) == stage
           for b in deps if rank[_stage(b)] > rank[stage] and (a, b) not in ALLOWED]
    assert not bad, "imports against the stage order: " + "; ".join(bad)


def test_the_allowed_exception_imports_nothing_of_ours():
    g = _graph()
    for _, target in ALLOWED:
        assert g[target] == set(), f"{target} imports {g[target]}: the exception could make a cycle"
