"""Docstring rules of physics/ and optimize/ (STYLE.md, item 6; issue 16): every public function
(and public method of a public class) with two or more parameters has a numpydoc Parameters
section, and the names it documents are parameters.

Reads the source with ``ast`` (no import); a regression check of the project's own style,
common practice in numpydoc projects.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = (ROOT / "physics", ROOT / "optimize")
SECTION = re.compile(r"^(\s*)(\w[\w ]*)\n\1-{3,}\n", re.M)


def _public_functions(packages=PACKAGES):
    for path in sorted(p for package in packages for p in package.rglob("*.py")):
        rel = path.relative_to(ROOT)
        if any(part.startswith("_") and part != "__init__.py" for part in rel.parts):
            continue
        tree = ast.parse(path.read_text())
        scopes = [(tree, "")] + [
            (node, node.name + ".")
            for node in tree.body
            if isinstance(node, ast.ClassDef) and not node.name.startswith("_")
        ]
        for scope, prefix in scopes:
            for node in scope.body:
                if not isinstance(node, ast.FunctionDef) or node.name.startswith("_"):
                    continue
                if any(
                    getattr(d, "id", getattr(d, "attr", "")) == "overload"
                    for d in node.decorator_list
                ):
                    continue
                yield f"{rel}:{node.lineno} {prefix}{node.name}", node


def _parameters(node: ast.FunctionDef) -> list[str]:
    a = node.args
    names = [x.arg for x in a.posonlyargs + a.args + a.kwonlyargs if x.arg not in ("self", "cls")]
    names += [f"*{a.vararg.arg}"] if a.vararg else []
    names += [f"**{a.kwarg.arg}"] if a.kwarg else []
    return names


def _documented(doc: str) -> list[str] | None:
    """Names in the Parameters section, or None without one."""
    heads = list(SECTION.finditer(doc))
    for k, m in enumerate(heads):
        if m.group(2) != "Parameters":
            continue
        end = heads[k + 1].start() if k + 1 < len(heads) else len(doc)
        indent = m.group(1)
        names = []
        for line in doc[m.end() : end].splitlines():
            if line.startswith(indent) and line[len(indent) :][:1] not in ("", " "):
                names += [n.strip() for n in line.strip().split(",")]
        return names
    return None


def test_public_functions_document_their_parameters():
    missing = [
        where
        for where, node in _public_functions()
        if len(_parameters(node)) >= 2 and _documented(ast.get_docstring(node) or "") is None
    ]
    assert not missing, "no numpydoc Parameters section: " + ", ".join(missing)


def test_documented_parameters_exist():
    stale = []
    for where, node in _public_functions():
        documented = _documented(ast.get_docstring(node) or "") or []
        real = set(_parameters(node))
        stale += [f"{where}: {n}" for n in documented if n not in real]
    assert not stale, "documented but not a parameter: " + "; ".join(stale)
