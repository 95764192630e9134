"""Docs in the code: every public function states its parameters and what it returns.

Public means not starting with an underscore.  A function with arguments (besides self/cls)
needs a numpydoc "Parameters" section; one that returns a value needs "Returns" (or "Yields");
properties only need a docstring.  The code points to no document outside the repository.
"""

from __future__ import annotations

import ast
from pathlib import Path

import sim

PACKAGE = Path(sim.__file__).parent


def docstring_problems(path: Path) -> list[str]:
    """One line per public class or function of `path` whose docstring misses a section."""
    problems = []

    def visit(node, prefix: str) -> None:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.ClassDef) and not child.name.startswith("_"):
                if not ast.get_docstring(child):
                    problems.append(f"{prefix}{child.name}: no docstring")
                visit(child, f"{prefix}{child.name}.")
            elif isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef)):
                if child.name.startswith("_"):
                    continue
                problems.extend(f"{prefix}{child.name}: {p}" for p in function_problems(child))

    visit(ast.parse(path.read_text()), "")
    return [f"{path.relative_to(PACKAGE.parent)}: {p}" for p in problems]


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
    problems = [p for path in sorted(PACKAGE.rglob("*.py")) for p in docstring_problems(path)]
    assert not problems, f"{len(problems)} problems:\n" + "\n".join(problems)


def test_the_code_points_to_no_outside_document():
    mentions = [f"{path.relative_to(PACKAGE.parent)}:{number}"
                for path in sorted(PACKAGE.rglob("*.py"))
                for number, line in enumerate(path.read_text().splitlines(), 1)
                if "physics.md" in line]
    assert not mentions, "the equations belong in the docstrings: " + ", ".join(mentions)
