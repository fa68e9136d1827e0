"""The house rules of the package layout, read from the source (no imports run).

- ``wellwright.physics`` never imports ``wellwright.optimize``, matplotlib or Optuna.
- The stages of ``wellwright.optimize`` import only downwards, in the order of
  ``STAGE_ORDER`` (DEVELOPERS.md explains the cut): a stage may import itself and
  any stage before it.
- No import cycle between modules, counting imports at module level, inside
  functions and under ``TYPE_CHECKING``.
- No function in ``physics/`` or ``optimize/`` longer than :data:`MAX_BODY_LINES` lines
  after its docstring (issue 16: long functions split into named steps).
"""

from __future__ import annotations

import ast
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
ROOTS = {"wellwright.physics": REPO / "physics", "wellwright.optimize": REPO / "optimize"}
#: Lowest first. physics below everything; cli on top.
STAGE_ORDER = (
    "wellwright.physics",
    "wellwright.optimize.shared",
    "wellwright.optimize.study",
    "wellwright.optimize.tolerance",
    "wellwright.optimize.search",
    "wellwright.optimize.calibrate",
    "wellwright.optimize.report",
    "wellwright.optimize.cli",
)


def _modules() -> dict[str, Path]:
    out = {}
    for pkg, root in ROOTS.items():
        for path in root.rglob("*.py"):
            rel = path.relative_to(root).with_suffix("").parts
            if rel[-1] == "__init__":
                rel = rel[:-1]
            out[".".join((pkg, *rel))] = path
    return out


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """Project modules imported anywhere in the file (absolute and relative)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    is_pkg = path.name == "__init__.py"
    base = name.split(".") if is_pkg else name.split(".")[:-1]
    found = set()
    for node in ast.walk(tree):
        targets = []
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                anchor = base[: len(base) - node.level + 1]
                mod = ".".join(anchor + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            targets = [mod] + [f"{mod}.{a.name}" for a in node.names]
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name and t not in ROOTS and not name.startswith(t + "."):
                found.add(t)
    return found


def _graph() -> dict[str, set[str]]:
    mods = _modules()
    known = set(mods)
    return {m: _imports(m, p, known) for m, p in mods.items()}


def _stage(module: str) -> int:
    if module == "wellwright.optimize":  # the facade re-exports every stage's public names
        return len(STAGE_ORDER)
    best = -1
    for i, prefix in enumerate(STAGE_ORDER):
        if module == prefix or module.startswith(prefix + "."):
            best = i
    return best


def test_no_import_cycles():
    graph = _graph()
    state: dict[str, int] = {}
    cycles = []

    def visit(node, trail):
        state[node] = 1
        for nxt in sorted(graph[node]):
            if state.get(nxt) == 1:
                cycles.append(trail[trail.index(nxt) :] + [nxt] if nxt in trail else [node, nxt])
            elif nxt not in state:
                visit(nxt, trail + [nxt])
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert not cycles, "import cycles: " + "; ".join(" -> ".join(c) for c in cycles)


def test_stages_import_only_downwards():
    wrong = []
    for module, deps in _graph().items():
        here = _stage(module)
        for dep in deps:
            if _stage(dep) > here:
                wrong.append(f"{module} -> {dep}")
    assert not wrong, "imports that climb a stage: " + ", ".join(sorted(wrong))


def test_physics_is_pure_numerics():
    banned = ("matplotlib", "optuna", "SALib", "joblib", "tqdm", "wellwright.optimize")
    bad = []
    for path in (REPO / "physics").rglob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            mods = []
            if isinstance(node, ast.Import):
                mods = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and not node.level:
                mods = [node.module or ""]
            bad += [f"{path.name}: {m}" for m in mods if m.startswith(banned)]
    assert not bad, bad


def test_every_module_belongs_to_a_stage():
    assert all(_stage(m) >= 0 for m in _graph())


def test_installed_under_wellwright_only(tmp_path):
    """After install, `import wellwright.physics` works and the bare names do not (issue: generic
    top-level names collide with other packages). Run from a folder outside the repository."""
    import subprocess
    import sys

    code = (
        "import importlib.util, wellwright.physics, wellwright.optimize;"
        "print(importlib.util.find_spec('physics') is None, importlib.util.find_spec('optimize') is None)"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, check=True
    )
    assert out.stdout.split() == ["True", "True"]


def test_report_reads_files_not_the_search_engine_or_physics():
    """The report is built from the run folder's finished files (DESIGN.md, data flow): its
    modules import neither the search engine, its storage or Optuna, nor any function of the
    physics that computes curves (the stages that ran it wrote the curves and figures);
    constants (UPPER_CASE names, e.g. a metric's name) may come from anywhere below."""
    banned = (
        "wellwright.optimize.search.engine",
        "wellwright.optimize.search.storage",
        "wellwright.optimize.search.designs",
        "wellwright.optimize.search.robust",
        "wellwright.physics.iv",
        "wellwright.physics.transmission",
        "wellwright.physics.current",
        "wellwright.physics.resonances",
        "wellwright.physics.electrostatics",
        "optuna",
        "sqlalchemy",
    )

    def hit(module: str) -> bool:
        return any(module == b or module.startswith(b + ".") for b in banned)

    bad = []
    for module, path in _modules().items():
        if not module.startswith("wellwright.optimize.report"):
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                bad += [f"{module} -> {a.name}" for a in node.names if hit(a.name)]
            elif isinstance(node, ast.ImportFrom) and not node.level and hit(node.module or ""):
                bad += [
                    f"{module} -> {node.module}.{a.name}"
                    for a in node.names
                    if not a.name.isupper()
                ]
    assert not bad, bad


#: Longest function body allowed: lines after the docstring, comments and blank lines included.
MAX_BODY_LINES = 80
#: Functions still longer than MAX_BODY_LINES while they are being split (issue 16). This list
#: must only shrink, to empty: remove an entry once its function is split; never add one.
LONG_FUNCTIONS_ALLOWED: set[tuple[str, str]] = set()


def _body_lines(node: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    """Lines of a function's body after its docstring, to its last line (comments and blank
    lines included)."""
    first = node.body[0]
    if ast.get_docstring(node, clean=False) is not None:
        if len(node.body) == 1:
            return 0
        start = first.end_lineno + 1
    else:
        start = first.lineno
    return node.end_lineno - start + 1


def _function_lengths() -> dict[tuple[str, str], int]:
    """(file relative to the repository, function name) -> body lines, for every function and
    method (nested ones too) of physics/ and optimize/; the longest of equal names."""
    out: dict[tuple[str, str], int] = {}
    for root in ROOTS.values():
        for path in sorted(root.rglob("*.py")):
            rel = path.relative_to(REPO).as_posix()
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                    key = (rel, node.name)
                    out[key] = max(out.get(key, 0), _body_lines(node))
    return out


def test_no_function_longer_than_the_limit():
    too_long = [
        f"{rel} {name}: {n} lines"
        for (rel, name), n in sorted(_function_lengths().items())
        if n > MAX_BODY_LINES and (rel, name) not in LONG_FUNCTIONS_ALLOWED
    ]
    assert not too_long, (
        f"function bodies longer than {MAX_BODY_LINES} lines after the docstring (split them "
        "into named steps): " + "; ".join(too_long)
    )


def test_long_function_allowlist_only_shrinks():
    lengths = _function_lengths()
    stale = [
        f"{rel} {name}: " + (f"{lengths[rel, name]} lines" if (rel, name) in lengths else "gone")
        for rel, name in sorted(LONG_FUNCTIONS_ALLOWED)
        if lengths.get((rel, name), 0) <= MAX_BODY_LINES
    ]
    assert not stale, (
        f"no longer over {MAX_BODY_LINES} lines, remove from LONG_FUNCTIONS_ALLOWED: "
        + "; ".join(stale)
    )


def test_physics_functions_take_keywords_beyond_their_main_inputs():
    # issue 16: same-typed arguments passed by position swap silently (two Fermi levels, two
    # node grids); a public physics function takes at most three positional parameters and
    # the rest by keyword
    offenders = []
    for path in sorted((REPO / "physics").rglob("*.py")):
        for node in ast.parse(path.read_text()).body:
            if isinstance(node, ast.FunctionDef) and not node.name.startswith("_"):
                positional = node.args.posonlyargs + node.args.args
                if len(positional) > 3:
                    offenders.append(f"{path.relative_to(REPO)} {node.name}: {len(positional)}")
    assert not offenders, offenders
