"""The package's layout rule (DEVELOPERS.md, "Layout"): imports only point down, and nothing
imports in a circle. Read from the source with ast, every import counted, lazy ones included.

chainrun's own rule, no published source: each module has a floor; a module may import only
modules on lower floors, or siblings in its own package as long as no circle forms.
"""
from __future__ import annotations

import ast
from pathlib import Path
from support import REPO

PKG = REPO / "chainrun"

# Floors, lowest first. A package's floor covers all its modules.
FLOORS = {
    "chainrun.version": 0, "chainrun.text": 0, "chainrun.fsutil": 0, "chainrun.interrupt": 0, "chainrun.heap": 0,
    "chainrun.errors": 1, "chainrun.audio.source": 1, "chainrun.dsp": 1,
    "chainrun.designers": 2, "chainrun.audio": 2, "chainrun.meters": 2,
    "chainrun.section_types": 3,
    "chainrun.recipe": 4,
    "chainrun.design": 5, "chainrun.impulse": 5,
    "chainrun.guard": 6,
    "chainrun.results": 7,
    "chainrun.render": 8,
    "chainrun.batch": 9,
    "chainrun.report": 10, "chainrun.gate": 10,
    "chainrun.app": 11,
    "chainrun.cli": 12,
    "chainrun.__main__": 13, "chainrun": 13,
}


def _modules() -> dict[str, Path]:
    out = {}
    for path in PKG.rglob("*.py"):
        parts = path.relative_to(PKG.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = path
    for path in PKG.rglob("*.c"):          # a C extension's source: a module that imports nothing of ours
        out[".".join(path.relative_to(PKG.parent).with_suffix("").parts)] = path
    return out


def _owner(name: str) -> str:
    """The FLOORS entry a module belongs to (its longest matching prefix)."""
    return max((p for p in FLOORS if name == p or name.startswith(p + ".")), key=len)


def _floor(name: str) -> int:
    best = None
    for prefix, floor in FLOORS.items():
        if name == prefix or name.startswith(prefix + "."):
            if best is None or len(prefix) > len(best[0]):
                best = (prefix, floor)
    assert best is not None, f"{name} has no floor in FLOORS; add it"
    return best[1]


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    if path.suffix == ".c":
        return set()
    is_pkg = path.name == "__init__.py"
    base = name.split(".") if is_pkg else name.split(".")[:-1]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                stem = base[:len(base) - node.level + 1]
                mod = ".".join(stem + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            # ``from X import a``: the module X.a when there is one, else X itself
            targets = [f"{mod}.{a.name}" if f"{mod}.{a.name}" in known else mod for a in node.names]
        else:
            continue
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name and t.startswith("chainrun"):
                found.add(t)
    return found


def _graph() -> dict[str, set[str]]:
    mods = _modules()
    return {name: _imports(name, path, set(mods)) for name, path in mods.items()}


def _package(name: str) -> str:
    return name.rpartition(".")[0]


def test_every_import_points_down_or_to_a_sibling():
    upward = []
    for name, targets in _graph().items():
        for t in targets:
            if t == _package(name) and name.startswith(t + "."):
                upward.append(f"{name} -> {t} (a module importing its own package's __init__)")
            elif _owner(t) != _owner(name) and _floor(t) >= _floor(name):
                upward.append(f"{name} (floor {_floor(name)}) -> {t} (floor {_floor(t)})")
    assert not upward, "imports that do not point down:\n" + "\n".join(sorted(upward))


def test_no_import_circle():
    graph = _graph()
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n: str) -> list[str] | None:
        state[n] = 1
        stack.append(n)
        for t in sorted(graph.get(n, ())):
            if state.get(t) == 1:
                return stack[stack.index(t):] + [t]
            if t not in state and (cycle := visit(t)):
                return cycle
        stack.pop()
        state[n] = 2
        return None

    for n in sorted(graph):
        if n not in state and (cycle := visit(n)):
            raise AssertionError("import circle: " + " -> ".join(cycle))


def test_no_module_over_the_size_limit():
    # DEVELOPERS.md: no module over ~400 lines; "about" allows a tenth more, and no more.
    long = {str(p.relative_to(PKG.parent)): n for p in PKG.rglob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > 440}
    assert not long, f"modules over ~400 lines: {long}"
