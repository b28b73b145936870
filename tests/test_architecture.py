"""The layout of the package: dependencies point one way and never form a cycle.

The layers, lowest first (DEVELOPERS.md, "Architecture in a page"):

    base         mixsolve/*.py (errors, units, names, spectra, library, noise, flags, ...)
    solve        the classical least-squares fit and its per-sample trust checks
    capabilities pls, wavelengths, instrument, uncertainty, plate, equations (side by side: none
                 imports another)
    io           reading and writing files
    report       tables, text, figures and pages made from results
    workflows    file-to-file jobs
    cli          the command line

A module may import from its own package and from lower layers only; the graph of
modules has no cycle. The imports are read with the standard library's ``ast`` (every
``import`` statement, also inside functions), so a lazy import counts too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "mixsolve"
LAYERS = ["base", "solve", "capability", "io", "report", "workflows", "cli"]
CAPABILITIES = {"pls", "wavelengths", "instrument", "uncertainty", "plate", "equations"}
#: Packages outside the layers: the facade re-exports lazily; the demo data package holds
#: the scripts that generate the (synthetic) demo files and sits with the workflows.
EXEMPT = {"mixsolve"}


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def modules() -> dict[str, Path]:
    found = {module_name(p): p for p in PACKAGE.rglob("*.py")}
    demo = PACKAGE.parent / "reference_spectra_demo"
    for p in demo.glob("*.py"):
        found[f"mixsolve.reference_spectra_demo.{p.stem}"] = p
    return found


def group(name: str) -> str:
    """The package a module belongs to ('base' for top-level modules)."""
    parts = name.split(".")
    if len(parts) == 2:
        return "cli" if parts[1] == "cli" else "base"
    return "workflows" if parts[1] == "reference_spectra_demo" else parts[1]


def layer(name: str) -> int:
    g = group(name)
    return LAYERS.index("capability" if g in CAPABILITIES else g)


def imports(path: Path, known: set[str], name: str = "") -> set[str]:
    """The mixsolve modules a file imports (a package import counts as its __init__).

    ``name`` is the importing module's dotted name, needed to resolve relative imports
    (``from ..io import tables`` in ``mixsolve.solve.design`` is ``mixsolve.io.tables``).
    """
    found = set()
    package = name.split(".")[:-1] if not path.name == "__init__.py" else name.split(".")
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parent = package[:len(package) - node.level + 1]
                base = ".".join([*parent, *([base] if base else [])])
            if not base:
                continue
            names = [f"{base}.{a.name}" for a in node.names]
            found.update(n for n in names if n in known)
            if not any(n in known for n in names):
                found.add(base)
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
    return {n for n in found if n in known}


GRAPH = {name: imports(path, set(modules()), name) - {name}
         for name, path in modules().items()}


def test_the_graph_is_read():
    """The walk finds the solver importing its kernels (else every other check is empty)."""
    assert "mixsolve.solve.design" in GRAPH["mixsolve.solve.unmix"]
    assert len(GRAPH) > 80


@pytest.mark.parametrize("name", sorted(n for n in GRAPH if n not in EXEMPT))
def test_no_upward_or_sideways_import(name):
    """Each import goes to the module's own package or to a lower layer."""
    bad = []
    for target in sorted(GRAPH[name]):
        if target in EXEMPT:
            bad.append(f"{target} (the lazy facade; import the defining module)")
        elif group(target) == group(name):
            continue
        elif layer(target) >= layer(name):
            bad.append(f"{target} ({group(target)} is not below {group(name)})")
    assert not bad, f"{name} imports " + "; ".join(bad)


def test_no_import_cycle():
    """Tarjan's strongly connected components of the module graph are all single modules."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    cycles = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        for w in GRAPH[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                cycles.append(sorted(component))

    for v in GRAPH:
        if v not in index:
            visit(v)
    assert not cycles, cycles


@pytest.mark.parametrize("line", ["from mixsolve.io.tables import read_rows",
                                  "from ..io.tables import read_rows",
                                  "from ..io import tables",
                                  "import mixsolve.io.tables"])
def test_a_planted_upward_import_is_caught(tmp_path, line):
    """The checker itself can fail: a solve module importing io is reported, written
    absolutely or relatively."""
    fake = tmp_path / "m.py"
    fake.write_text(line + "\n")
    found = imports(fake, set(GRAPH), "mixsolve.solve.m")
    assert found == {"mixsolve.io.tables"}
    assert layer("mixsolve.io.tables") > layer("mixsolve.solve.unmix")
