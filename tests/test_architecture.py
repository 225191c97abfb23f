"""The layout's promises, read from the source with ast so they stay true: the packages depend
in one direction (acquire -> sim_instruments -> drivers, acquire -> drivers), there is no
import cycle (imports inside functions included), and no module is longer than 400 lines."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from tests.conftest import REPO

PACKAGES = ("acquire", "drivers", "sim_instruments")
# Which top-level package may import which (a package may always import itself).
ALLOWED = {
    "drivers": set(),
    "sim_instruments": {"drivers"},
    "acquire": {"drivers", "sim_instruments"},
}
MAX_LINES = 400


def module_name(path: Path) -> str:
    parts = list(path.relative_to(REPO).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def source_files() -> list[Path]:
    return sorted(path for package in PACKAGES for path in (REPO / package).rglob("*.py"))


MODULES = {module_name(path): path for path in source_files()}


def imported(path: Path) -> set[str]:
    """Every project module `path` imports, anywhere in the file (functions included)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = module_name(path) if path.name == "__init__.py" else module_name(path).rpartition(
        ".")[0]
    found: set[str] = set()
    for node in ast.walk(tree):
        names: list[str] = []
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")
                base = ".".join(anchor[: len(anchor) - node.level + 1] + ([base] if base else []))
            # `from package import module` imports the module; anything else, the package
            names = [f"{base}.{alias.name}" if f"{base}.{alias.name}" in MODULES else base
                     for alias in node.names]
        for name in names:
            if name in MODULES:
                found.add(name)
    found.discard(module_name(path))
    return found


GRAPH = {name: imported(path) for name, path in MODULES.items()}


def test_the_graph_sees_imports_inside_functions() -> None:
    # acquire.inputs.load imports the mode registry; the CLI imports its commands lazily.
    assert "acquire.modes" in GRAPH["acquire.inputs.load"]
    assert "acquire.runtime.session" in GRAPH["acquire.cli.run_commands"]


@pytest.mark.parametrize("name", sorted(MODULES))
def test_imports_go_one_way(name: str) -> None:
    own = name.split(".")[0]
    for target in GRAPH[name]:
        other = target.split(".")[0]
        assert other == own or other in ALLOWED[own], f"{name} imports {target}"


def test_no_import_cycle() -> None:
    state: dict[str, str] = {}
    path: list[str] = []

    def visit(node: str) -> None:
        state[node] = "open"
        path.append(node)
        for target in sorted(GRAPH[node]):
            if state.get(target) == "open":
                cycle = [*path[path.index(target):], target]
                raise AssertionError("import cycle: " + " -> ".join(cycle))
            if target not in state:
                visit(target)
        path.pop()
        state[node] = "done"

    for node in sorted(GRAPH):
        if node not in state:
            visit(node)


@pytest.mark.parametrize("name", sorted(MODULES))
def test_modules_stay_small(name: str) -> None:
    lines = MODULES[name].read_text(encoding="utf-8").count("\n")
    assert lines <= MAX_LINES, f"{name} has {lines} lines"
