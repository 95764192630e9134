"""Docs in the code: every public function states its parameters and what it returns.

Public means not starting with an underscore.  A function with arguments (besides self/cls)
needs a numpydoc "Parameters" section; one that returns a value needs "Returns" (or "Yields");
properties only need a docstring, and so does a method overriding one that a base class of the
package documents in full (it inherits the interface's sections and states its own equation).
Every solver's `evolve` is documented in full all the same.  The code points to no document outside the repository.
"""

from __future__ import annotations

import ast
from pathlib import Path

import sim

PACKAGE = Path(sim.__file__).parent
#: methods documented in full in every class, whatever their base classes say
ALWAYS_IN_FULL = ("evolve",)


def class_index() -> dict[str, tuple[list[str], dict[str, str]]]:
    """Class name -> (base class names, method name -> docstring) over the whole package."""
    index = {}
    for path in PACKAGE.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ClassDef):
                bases = [b.id if isinstance(b, ast.Name) else getattr(b, "attr", "") for b in node.bases]
                methods = {f.name: ast.get_docstring(f) or "" for f in node.body
                           if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef))}
                index[node.name] = (bases, methods)
    return index


def documented_upstream(index, bases: list[str], method: str) -> bool:
    """Whether a base class (transitively) documents `method` with a Parameters section."""
    stack, seen = list(bases), set()
    while stack:
        name = stack.pop()
        if name in seen or name not in index:
            continue
        seen.add(name)
        parents, methods = index[name]
        if "Parameters" in methods.get(method, "") or "Returns" in methods.get(method, ""):
            return True
        stack.extend(parents)
    return False


def docstring_problems(path: Path, index=None, root: Path = PACKAGE.parent) -> list[str]:
    """One line per public class or function of `path` whose docstring misses a section."""
    problems = []
    index = class_index() if index is None else index

    def visit(node, prefix: str, bases: list[str]) -> None:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.ClassDef) and not child.name.startswith("_"):
                if not ast.get_docstring(child):
                    problems.append(f"{prefix}{child.name}: no docstring")
                visit(child, f"{prefix}{child.name}.", index.get(child.name, ([], {}))[0])
            elif isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef)):
                if child.name.startswith("_"):
                    continue
                if (child.name not in ALWAYS_IN_FULL and ast.get_docstring(child)
                        and documented_upstream(index, bases, child.name)):
                    continue
                problems.extend(f"{prefix}{child.name}: {p}" for p in function_problems(child))

    visit(ast.parse(path.read_text()), "", [])
    return [f"{path.relative_to(root)}: {p}" for p in problems]


def function_problems(node) -> list[str]:
    doc = ast.get_docstring(node)
    if not doc:
        return ["no docstring"]
    if any(isinstance(d, ast.Name) and d.id in ("property", "cached_property")
           for d in node.decorator_list):
        return []
    out = []
    arguments = [a.arg for a in node.args.args + node.args.kwonlyargs if a.arg not in ("self", "cls")]
    if (arguments or node.args.vararg or node.args.kwarg) and "Parameters" not in doc:
        out.append("no Parameters section")
    if returns_a_value(node) and "Returns" not in doc and "Yields" not in doc:
        out.append("no Returns section")
    return out


def returns_a_value(node) -> bool:
    """Whether the function itself (not a function nested in it) returns a value."""
    stack = list(node.body)
    while stack:
        child = stack.pop()
        if isinstance(child, ast.Return) and child.value is not None:
            return True
        if not isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda, ast.ClassDef)):
            stack.extend(ast.iter_child_nodes(child))
    return False


def test_every_public_function_has_a_numpydoc_docstring():
    index = class_index()
    problems = [p for path in sorted(PACKAGE.rglob("*.py")) for p in docstring_problems(path, index)]
    assert not problems, f"{len(problems)} problems:\n" + "\n".join(problems)


def test_an_override_without_its_own_docstring_is_still_caught(tmp_path):
    path = PACKAGE / "physics" / "models" / "galilean.py"
    index = class_index()
    bare = tmp_path / "galilean.py"
    bare.write_text(path.read_text().replace('"""Velocity dE/dp = p / M, the same for both levels."""',
                                             "pass"))
    assert any("velocity: no docstring" in line
               for line in docstring_problems(bare, index, root=tmp_path))


def test_the_code_points_to_no_outside_document():
    mentions = [f"{path.relative_to(PACKAGE.parent)}:{number}"
                for path in sorted(PACKAGE.rglob("*.py"))
                for number, line in enumerate(path.read_text().splitlines(), 1)
                if "physics.md" in line]
    assert not mentions, "the equations belong in the docstrings: " + ", ".join(mentions)
