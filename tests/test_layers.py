"""The imports run one way: errors → tables → calculators → decision → present → widgets → cli.

Every ``import`` and ``from … import`` in ``knowledge/`` and ``widgets/`` is read from the source (at
module level and inside functions alike, so a function-level import cannot hide an arrow), resolved to
a module of the project, and checked: no module imports from a higher layer, nothing inside the core
imports the ``knowledge`` package's own facade, and no two modules import each other, directly or
around a circle.

Every function of ``knowledge/`` and ``widgets/`` (methods and nested functions too) is a short, named
stage: at most ``MAX_FUNCTION_LINES`` lines, ``decide`` at most ``MAX_DECIDE_LINES``. ``python
tests/test_layers.py`` lists the functions over the limit.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

#: lowest first; a module may import only from its own layer or those below it
LAYERS = [
    "knowledge.errors",
    "knowledge.tables",
    "knowledge.calculators",
    "knowledge.decision",
    "knowledge.present",
    "knowledge.review",
    "widgets",
    "knowledge.cli",
]


def layer_of(module: str) -> int | None:
    if module == "knowledge.__main__":
        return LAYERS.index("knowledge.cli")
    best = None
    for i, prefix in enumerate(LAYERS):
        if module == prefix or module.startswith(prefix + "."):
            best = i
    return best


def modules() -> dict[str, Path]:
    out = {}
    for package in ("knowledge", "widgets"):
        for path in sorted((ROOT / package).rglob("*.py")):
            parts = list(path.relative_to(ROOT).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            out[".".join(parts)] = path
    return out


def imports_of(name: str, path: Path, known: set[str]) -> set[str]:
    """Project modules that ``name`` imports (a package's __init__ counts as the package)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    is_package = path.name == "__init__.py"
    found: set[str] = set()

    def resolve(target: str) -> str | None:
        while target and target not in known:
            target = target.rpartition(".")[0]
        return target or None

    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                hit = resolve(alias.name)
                if hit:
                    found.add(hit)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = name.split(".") if is_package else name.split(".")[:-1]
                base = base[: len(base) - (node.level - 1)]
                prefix = ".".join(base + ([node.module] if node.module else []))
            else:
                prefix = node.module or ""
            for alias in node.names:
                hit = resolve(f"{prefix}.{alias.name}") if f"{prefix}.{alias.name}" in known else resolve(prefix)
                if hit:
                    found.add(hit)
    found.discard(name)
    return found


def graph() -> dict[str, set[str]]:
    mods = modules()
    known = set(mods)
    return {name: imports_of(name, path, known) for name, path in mods.items()}


def test_every_module_has_a_layer():
    missing = [name for name in graph() if name != "knowledge" and layer_of(name) is None]
    assert missing == []


def test_no_import_runs_upward():
    upward = []
    for name, targets in graph().items():
        if name == "knowledge":  # the facade re-exports the public API and is imported by nothing inside
            continue
        for target in targets:
            if target == "knowledge":
                upward.append(f"{name} -> the knowledge facade")
            elif layer_of(target) > layer_of(name):
                upward.append(f"{name} ({LAYERS[layer_of(name)]}) -> {target} ({LAYERS[layer_of(target)]})")
    assert upward == []


def test_no_circles():
    g = graph()
    circles: list[list[str]] = []
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(g.get(node, ())):
            if state.get(nxt) == 1:
                circles.append(stack[stack.index(nxt):] + [nxt])
            elif nxt not in state:
                visit(nxt)
        stack.pop()
        state[node] = 2

    for node in sorted(g):
        if node not in state:
            visit(node)
    assert circles == []


def test_only_the_command_line_imports_widgets_and_the_core_never_imports_the_ui():
    g = graph()
    for name, targets in g.items():
        if name.startswith("knowledge") and not name.startswith("knowledge.cli"):
            assert not any(t.startswith("widgets") for t in targets), name
    core = [ROOT / "knowledge" / p for p in ("errors.py", "tables", "calculators", "decision", "present")]
    for root in core:
        for path in ([root] if root.is_file() else root.rglob("*.py")):
            text = path.read_text(encoding="utf-8")
            assert "import ipywidgets" not in text and "from ipywidgets" not in text, path


def test_the_walker_sees_a_function_level_import(tmp_path):
    # the walker itself can fail: a hidden upward import inside a function is found
    probe = tmp_path / "probe.py"
    probe.write_text("def f():\n    from ..decision.engine import decide\n", encoding="utf-8")
    assert imports_of("knowledge.tables.probe", probe, set(modules())) == {"knowledge.decision.engine"}


# ----------------------------------------------------------------------------- short, named stages
#: every function of knowledge/ and widgets/ (methods and nested functions included, docstring counted) is
#: a short, named stage that can be read and tested on its own (DEVELOPERS.md, "Architecture")
MAX_FUNCTION_LINES = 45
#: decide() is a pipeline of named stages (DEVELOPERS.md, "How data flows"): it stays shorter still
MAX_DECIDE_LINES = 30
#: "path:qualified name" of functions allowed to be longer for now, with the reason; an entry that is no
#: longer needed fails test_every_length_exemption_is_still_needed, so it is removed with the fix
LENGTH_EXEMPT: dict[str, str] = {}


def function_lengths(path: Path) -> list[tuple[str, int]]:
    """("path:Qualified.name", lines) of every function in a file: module functions, methods, nested
    functions and those under an ``if`` or ``try`` (from ``def`` to its last line, decorators left out).
    The path is relative to the project (a file outside it: its name)."""
    rel = path.relative_to(ROOT).as_posix() if path.is_relative_to(ROOT) else path.name
    out: list[tuple[str, int]] = []

    def walk(node: ast.AST, prefix: str) -> None:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef)):
                out.append((f"{rel}:{prefix}{child.name}", child.end_lineno - child.lineno + 1))
                walk(child, f"{prefix}{child.name}.")
            elif isinstance(child, ast.ClassDef):
                walk(child, f"{prefix}{child.name}.")
            else:
                walk(child, prefix)

    walk(ast.parse(path.read_text(encoding="utf-8")), "")
    return out


def long_functions(paths: list[Path] | None = None, limit: int = MAX_FUNCTION_LINES) -> list[tuple[str, int]]:
    """Every function over ``limit`` lines in ``paths`` (default: every module of knowledge/ and widgets/),
    longest first."""
    paths = paths if paths is not None else list(modules().values())
    found = [(name, n) for path in paths for name, n in function_lengths(path) if n > limit]
    return sorted(found, key=lambda item: (-item[1], item[0]))


def length_report(found: list[tuple[str, int]], limit: int = MAX_FUNCTION_LINES) -> str:
    return (f"{len(found)} function(s) over {limit} lines; split each into named stages (helpers with a "
            "docstring), behaviour unchanged:\n" + "\n".join(f"  {name}: {n} lines" for name, n in found))


def test_every_function_is_a_short_named_stage():
    offenders = [(name, n) for name, n in long_functions() if name not in LENGTH_EXEMPT]
    assert not offenders, length_report(offenders)


def test_every_length_exemption_is_still_needed():
    long = {name for name, _ in long_functions()}
    stale = [name for name in LENGTH_EXEMPT if name not in long]
    assert not stale, f"no longer over {MAX_FUNCTION_LINES} lines (or gone): remove from LENGTH_EXEMPT: {stale}"


def test_decide_is_a_short_pipeline():
    lengths = dict(function_lengths(ROOT / "knowledge" / "decision" / "engine.py"))
    n = lengths["knowledge/decision/engine.py:decide"]
    assert n <= MAX_DECIDE_LINES, f"decide() is {n} lines; at most {MAX_DECIDE_LINES}: move work into a stage"


def test_the_length_guard_finds_long_functions(tmp_path):
    # the guard itself can fail: a long method, a long nested function and a long function under an `if`
    # are found by their qualified names; one of exactly the limit is not
    def body(n: int, indent: str) -> str:
        return "".join(f"{indent}x{i} = {i}\n" for i in range(n))

    probe = tmp_path / "probe.py"
    probe.write_text(
        "def at_limit():\n" + body(MAX_FUNCTION_LINES - 1, "    ")
        + "class Panel:\n    def __init__(self):\n" + body(MAX_FUNCTION_LINES, "        ")
        + "def outer():\n    def inner():\n" + body(MAX_FUNCTION_LINES, "        ")
        + "if True:\n    async def hidden():\n" + body(MAX_FUNCTION_LINES, "        "),
        encoding="utf-8")
    lengths = dict(function_lengths(probe))
    assert lengths["probe.py:at_limit"] == MAX_FUNCTION_LINES
    over = MAX_FUNCTION_LINES + 1
    found = long_functions([probe])
    assert found == [("probe.py:outer", over + 1), ("probe.py:Panel.__init__", over), ("probe.py:hidden", over),
                     ("probe.py:outer.inner", over)]
    report = length_report(found)
    assert report.startswith(f"4 function(s) over {MAX_FUNCTION_LINES} lines")
    assert f"  probe.py:outer.inner: {over} lines" in report.splitlines()


if __name__ == "__main__":  # python tests/test_layers.py: list every function over the limit
    print(length_report(long_functions()))
