"""The package's layers import in one direction only, and no two modules import each other.

Layers, lowest first (DEVELOPERS.md shows the diagram): errors -> config -> physics -> solvers
-> result -> io -> plotting -> workflows -> cli.  A module may import its own layer and the
layers below it, never one above; `sim.io.atomic` imports nothing of `sim`; the package face
`sim/__init__.py` may load any layer (by name, on first use).  Every import statement counts,
at module level and inside functions.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

import sim

LAYERS = ("errors", "config", "physics", "solvers", "result", "io", "plotting", "workflows", "cli")
#: modules (below the package) that must import nothing of the package
SELF_CONTAINED = ("errors", "io.atomic")


def module_files(root: Path, package: str) -> dict[str, Path]:
    """Dotted module name -> file of every Python module under `root` (the package folder)."""
    out = {}
    for path in sorted(root.rglob("*.py")):
        parts = list(path.relative_to(root).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join([package, *parts])] = path
    return out


def imported_modules(name: str, path: Path, modules: dict[str, Path]) -> set[str]:
    """Package modules that module `name` imports anywhere in its body (relative imports
    resolved; `from X import y` counts as importing X.y when that is a module)."""
    is_package = path.name == "__init__.py"
    package = name if is_package else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                stem = ".".join(base + ([node.module] if node.module else []))
            else:
                stem = node.module or ""
            targets = [f"{stem}.{alias.name}" if f"{stem}.{alias.name}" in modules else stem
                       for alias in node.names]
        else:
            continue
        found.update(t for t in targets if t in modules)
    found.discard(name)
    return found


def layer_of(module: str, package: str) -> str | None:
    """The layer a module belongs to (None for the package face)."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else None


def violations(root: Path, package: str = "sim") -> list[str]:
    """Every import against the layer rule, and every import cycle, one line each."""
    modules = module_files(root, package)
    graph = {m: imported_modules(m, p, modules) for m, p in modules.items()}
    problems = []
    for module, targets in sorted(graph.items()):
        layer = layer_of(module, package)
        if layer is None:
            continue
        if layer not in LAYERS:
            problems.append(f"{module}: in no layer (allowed folders: {', '.join(LAYERS)})")
            continue
        for target in sorted(targets):
            if module.partition(".")[2] in SELF_CONTAINED:
                problems.append(f"{module} imports {target}: it must import nothing of {package}")
            target_layer = layer_of(target, package)
            if target_layer is None or target_layer not in LAYERS:
                problems.append(f"{module} imports {target}, which is in no layer")
            elif LAYERS.index(target_layer) > LAYERS.index(layer):
                problems.append(f"{module} ({layer}) imports {target} ({target_layer}), a higher "
                                "layer")
    problems += [f"import cycle: {' -> '.join(cycle)}" for cycle in cycles(graph)]
    return problems


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """One cycle through each strongly connected group of modules (Tarjan's algorithm)."""
    index, low, stack, on_stack, out = {}, {}, [], set(), []

    def visit(node):
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for nxt in sorted(graph.get(node, ())):
            if nxt not in index:
                visit(nxt)
                low[node] = min(low[node], low[nxt])
            elif nxt in on_stack:
                low[node] = min(low[node], index[nxt])
        if low[node] == index[node]:
            group = []
            while True:
                member = stack.pop()
                on_stack.discard(member)
                group.append(member)
                if member == node:
                    break
            if len(group) > 1:
                out.append(sorted(group) + [sorted(group)[0]])

    for node in sorted(graph):
        if node not in index:
            visit(node)
    return out


def test_package_imports_follow_the_layers():
    problems = violations(Path(sim.__file__).parent)
    assert not problems, "\n".join(problems)


def write_tree(root: Path, files: dict[str, str]) -> Path:
    for name, text in files.items():
        path = root / "pkg" / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text)
    return root / "pkg"


@pytest.mark.parametrize("files, expected", [
    ({"__init__.py": "", "config/__init__.py": "", "physics/__init__.py": "",
      "config/schema.py": "def f():\n    from ..physics import models\n",
      "physics/models.py": ""},
     "pkg.config.schema (config) imports pkg.physics.models (physics), a higher layer"),
    ({"__init__.py": "", "physics/__init__.py": "", "solvers/__init__.py": "",
      "physics/field.py": "from pkg.solvers.base import Solver\n", "solvers/base.py": ""},
     "pkg.physics.field (physics) imports pkg.solvers.base (solvers), a higher layer"),
    ({"__init__.py": "", "physics/__init__.py": "",
      "physics/a.py": "from . import b\n", "physics/b.py": "from .a import x\n"},
     "import cycle: pkg.physics.a -> pkg.physics.b -> pkg.physics.a"),
    ({"__init__.py": "", "io/__init__.py": "", "io/atomic.py": "from ..errors import E\n",
      "errors.py": ""},
     "pkg.io.atomic imports pkg.errors: it must import nothing of pkg"),
])
def test_the_rule_catches_a_backward_import_and_a_cycle(tmp_path, files, expected):
    assert expected in violations(write_tree(tmp_path, files), "pkg")


def test_the_rule_accepts_downward_imports(tmp_path):
    root = write_tree(tmp_path, {"__init__.py": "", "config/__init__.py": "",
                                 "physics/__init__.py": "", "config/schema.py": "",
                                 "physics/field.py": "from ..config.schema import Key\n"})
    assert violations(root, "pkg") == []
