"""The layers of ARCHITECTURE.md, checked on the source: imports go down, faces stand apart.

Read from the abstract syntax tree of every module in ``diagnose/`` (imports
inside functions count too, since a deferred import is still a dependency):

* a module imports only from its own layer or the layers below it;
* a face (the command line's commands, the shell, the analysis report, the
  benchmark) never imports another face; only ``diagnose.cli``, the entry
  point, names them all;
* no module imports a private name (``_x``) of another module;
* the packages import one another without a cycle;
* no ``except ImportError`` guards an import of the project's own modules
  (a missing module is a bug to see, not a feature to skip).
"""

from __future__ import annotations

import ast
from pathlib import Path

import networkx as nx
import pytest

ROOT = Path(__file__).parent.parent / "diagnose"

#: Layer of each top-level part of the package, lowest first (ARCHITECTURE.md, "Layers").
LAYERS = {
    "diagnose": 0, "diagnose.errors": 0, "diagnose.text": 0, "diagnose.settings": 0,
    "diagnose.physics": 1,
    "diagnose.kb": 2,
    "diagnose.reasoning": 3,
    "diagnose.session": 4, "diagnose.journal": 4, "diagnose.events": 4,
    "diagnose.service": 5, "diagnose.report_analysis": 5, "diagnose.views": 5,
    "diagnose.views_reasoning": 5,
    "diagnose.commands": 6, "diagnose.shell": 6,
    "diagnose.bench": 6,
    "diagnose.cli": 7, "diagnose.__main__": 7,
}
FACES = {"diagnose.commands", "diagnose.shell", "diagnose.bench"}


def _module_name(path: Path) -> str:
    rel = path.relative_to(ROOT.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _part(module: str) -> str:
    """The entry of LAYERS a module belongs to (its longest listed prefix)."""
    best = ""
    for name in LAYERS:
        if (module == name or module.startswith(name + ".")) and len(name) > len(best):
            best = name
    assert best, f"{module} is in no layer of LAYERS"
    return best


def _imports(tree: ast.AST, module: str, is_package: bool) -> list[tuple[str, list[str], int]]:
    """(imported module, names taken from it, line) for every import of the project's own."""
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, [], node.lineno) for a in node.names if a.name.startswith("diagnose")]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = module.split(".") if is_package else module.split(".")[:-1]
                base = base[: len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.startswith("diagnose"):
                out.append((target, [a.name for a in node.names], node.lineno))
    return out


def _modules() -> dict[str, tuple[Path, ast.AST]]:
    found = {}
    for path in sorted(ROOT.rglob("*.py")):
        found[_module_name(path)] = (path, ast.parse(path.read_text(encoding="utf-8")))
    return found


MODULES = _modules()


def _where(path: Path, line: int) -> str:
    return f"{path.relative_to(ROOT.parent)}:{line}"


def test_imports_go_down_the_layers():
    wrong = []
    for module, (path, tree) in MODULES.items():
        mine = _part(module)
        for target, names, line in _imports(tree, module, path.name == "__init__.py"):
            for full in [target] + [f"{target}.{n}" for n in names if f"{target}.{n}" in MODULES]:
                theirs = _part(full)
                if LAYERS[theirs] > LAYERS[mine]:
                    wrong.append(f"{_where(path, line)}: {module} (layer {LAYERS[mine]}) imports "
                                 f"{full} (layer {LAYERS[theirs]})")
    assert not wrong, "imports that reach up a layer:\n" + "\n".join(sorted(set(wrong)))


def test_no_face_imports_another_face():
    wrong = []
    for module, (path, tree) in MODULES.items():
        mine = _part(module)
        if mine not in FACES:
            continue
        for target, names, line in _imports(tree, module, path.name == "__init__.py"):
            theirs = _part(target)
            if theirs in FACES and theirs != mine:
                wrong.append(f"{_where(path, line)}: {module} imports the face {target}")
    assert not wrong, "faces that lean on each other:\n" + "\n".join(wrong)


def test_no_private_names_of_other_modules():
    wrong = []
    for module, (path, tree) in MODULES.items():
        for target, names, line in _imports(tree, module, path.name == "__init__.py"):
            if target == module:
                continue
            for name in names:
                if name.startswith("_") and not name.startswith("__"):
                    wrong.append(f"{_where(path, line)}: {module} imports {target}.{name}")
    assert not wrong, "private names used across modules:\n" + "\n".join(wrong)


def test_no_import_cycle_between_packages():
    graph = nx.DiGraph()
    for module, (path, tree) in MODULES.items():
        mine = _part(module)
        graph.add_node(mine)
        for target, _, _ in _imports(tree, module, path.name == "__init__.py"):
            theirs = _part(target)
            if theirs != mine:
                graph.add_edge(mine, theirs)
    cycles = list(nx.simple_cycles(graph))
    assert not cycles, f"packages that import each other: {cycles}"


def test_no_import_guard_around_the_projects_own_modules():
    wrong = []
    for module, (path, tree) in MODULES.items():
        for node in ast.walk(tree):
            if not isinstance(node, ast.Try):
                continue
            guards = [h for h in node.handlers if h.type is not None and any(
                isinstance(n, ast.Name) and n.id in ("ImportError", "ModuleNotFoundError")
                for n in ast.walk(h.type))]
            if not guards:
                continue
            own = [i for stmt in node.body for i in ast.walk(stmt)
                   if isinstance(i, (ast.Import, ast.ImportFrom)) and (
                       (isinstance(i, ast.ImportFrom) and (i.level or (i.module or "").startswith(
                           "diagnose"))) or (isinstance(i, ast.Import) and any(
                               a.name.startswith("diagnose") for a in i.names)))]
            calls = [c for stmt in node.body for c in ast.walk(stmt) if isinstance(c, ast.Call)
                     and isinstance(c.func, ast.Name) and c.func.id == "import_module"]
            if own or calls:
                wrong.append(f"{_where(path, node.lineno)}: {module}")
    assert not wrong, "import guards around the project's own modules:\n" + "\n".join(wrong)


@pytest.mark.parametrize("module", sorted(MODULES))
def test_every_module_is_in_a_layer(module):
    assert _part(module) in LAYERS


def test_only_the_views_draw():
    """Results are values; only the view modules (layer 5) and the faces know how they look."""
    wrong = []
    for module, (path, tree) in MODULES.items():
        if LAYERS[_part(module)] >= 5:
            continue
        for node in ast.walk(tree):
            if isinstance(node, ast.FunctionDef) and node.name == "__rich_console__":
                wrong.append(f"{_where(path, node.lineno)}: {module}")
    assert not wrong, "drawing below the views:\n" + "\n".join(wrong)
