"""The package layout: imports run one way, from the CLI down to the arm, with no circles.

Layers, bottom up: the foundation modules at the top of the package (errors, files, progress,
BLAS guard, shared text), then ``arm`` (the model and its dynamics), ``data`` (logs and their
conditioning), ``motion`` (excitation design, simulator) and ``estimation`` (the fit) side by
side, ``handover`` (parameter file, check, export, report), ``fleet``, and the CLI (``commands``,
``cli``). A module may import its own subpackage and any lower layer, never a higher one, and
``motion`` and ``estimation`` do not import each other.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "ident"

#: Layer of each subpackage; top-level modules not listed are the foundation (layer 0).
LAYERS = {"arm": 1, "data": 2, "motion": 3, "estimation": 3, "handover": 4, "fleet": 5, "commands": 6}
TOP_LEVEL_CLI = {"cli": 6, "__main__": 7}


def _module_name(path: Path) -> str:
    parts = path.relative_to(PKG.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in PKG.rglob("*.py")}


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """Modules of the package that `name` imports anywhere in its body (lazy imports included)."""
    is_pkg = path.name == "__init__.py"
    here = name.split(".") if is_pkg else name.split(".")[:-1]
    out = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = here[: len(here) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if not mod.startswith("ident"):
                continue
            for alias in node.names:
                sub = f"{mod}.{alias.name}"
                out.add(sub if sub in known else mod)
        elif isinstance(node, ast.Import):
            out.update(a.name for a in node.names if a.name.startswith("ident"))
    out.discard(name)
    return out


def _layer(mod: str) -> int:
    parts = mod.split(".")
    if len(parts) == 1:
        return 0
    if parts[1] in LAYERS:
        return LAYERS[parts[1]]
    return TOP_LEVEL_CLI.get(parts[1], 0)


def _graph() -> dict[str, set[str]]:
    mods = _modules()
    known = set(mods)
    return {m: {d for d in _imports(m, p, known) if d in known} for m, p in mods.items()}


GRAPH = _graph()


def test_the_walker_sees_the_package():
    # guards the test itself: an empty graph would pass every check below
    assert "ident.arm.model" in GRAPH and "ident.commands.fit" in GRAPH
    assert "ident.arm.model" in GRAPH["ident.arm.dynamics"]


@pytest.mark.parametrize("mod", sorted(m for m in GRAPH if not m.startswith("ident.commands") and m not in ("ident.cli", "ident.__main__")))
def test_nothing_below_the_cli_imports_it(mod):
    bad = sorted(d for d in GRAPH[mod] if d.startswith("ident.commands") or d == "ident.cli")
    assert not bad, f"{mod} imports the CLI layer: {bad}"


def test_imports_run_down_the_layers():
    bad = []
    for mod, deps in GRAPH.items():
        if mod == "ident":  # the package's public names gather every layer
            continue
        pkg = mod.split(".")[1] if mod.count(".") >= 1 else ""
        for d in deps:
            dpkg = d.split(".")[1] if d.count(".") >= 1 else ""
            # the package itself gathers every layer: only the CLI, at the top, may import it
            if (d == "ident" and _layer(mod) < LAYERS["commands"]) or (d != "ident" and dpkg != pkg and _layer(d) >= _layer(mod) and _layer(d) > 0):
                bad.append(f"{mod} -> {d}")
    assert not bad, "imports that run up or sideways: " + "; ".join(sorted(bad))


def test_no_import_circles():
    # Tarjan's strongly connected components over the module graph
    index, low, stack, on, comps = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in GRAPH[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                comps.append(sorted(comp))

    for v in sorted(GRAPH):
        if v not in index:
            visit(v)
    # a subpackage __init__ that re-exports its modules is not a circle of ideas; none exist today
    assert not comps, f"import circles: {comps}"


def test_files_stay_readable():
    # one idea a file: about 600 lines at most (common practice for readable modules)
    long = {m: sum(1 for _ in p.open()) for m, p in _modules().items()}
    assert not {m: n for m, n in long.items() if n > 650}, {m: n for m, n in long.items() if n > 650}
