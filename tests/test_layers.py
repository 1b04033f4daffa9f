"""The imports run one way: errors → tables → calculators → decision → present → widgets → cli.

Every ``import`` and ``from … import`` in ``knowledge/`` and ``widgets/`` is read from the source (at
module level and inside functions alike, so a function-level import cannot hide an arrow), resolved to
a module of the project, and checked: no module imports from a higher layer, nothing inside the core
imports the ``knowledge`` package's own facade, and no two modules import each other, directly or
around a circle.
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


def test_the_decision_is_short_named_stages():
    # decide() is a pipeline of named stages (DEVELOPERS.md, "How data flows"); no stage of the decision
    # layer grows past about 45 lines, so each can be read and tested on its own
    long = []
    for path in sorted((ROOT / "knowledge" / "decision").glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.FunctionDef) and node.end_lineno - node.lineno + 1 > 45:
                long.append(f"{path.name}:{node.name} ({node.end_lineno - node.lineno + 1} lines)")
    assert long == []
    decide = next(n for n in ast.walk(ast.parse((ROOT / "knowledge/decision/engine.py").read_text(encoding="utf-8")))
                  if isinstance(n, ast.FunctionDef) and n.name == "decide")
    assert decide.end_lineno - decide.lineno + 1 <= 30
