"""The import graph of chiropt keeps its layers: rules checked on the parsed source (ast).

Every module under chiropt/ is parsed and all its imports (module level and inside
functions, absolute and relative) are collected; each rule names a group of modules and the
groups it must not import.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "chiropt"


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _imports(path: Path) -> set[str]:
    """Dotted names of the chiropt modules (or names in them) that ``path`` imports."""
    package = _module_name(path).split(".")
    if path.name != "__init__.py":
        package = package[:-1]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module or ""
            found.add(module)
            found |= {f"{module}.{a.name}" for a in node.names}
    return {name for name in found if name == "chiropt" or name.startswith("chiropt.")}


GRAPH = {_module_name(p): _imports(p) for p in sorted(PACKAGE.rglob("*.py"))}


def _in(name: str, group: str) -> bool:
    return name == group or name.startswith(group + ".")


def _violations(importers: str, forbidden: tuple[str, ...], allowed=()) -> list[str]:
    return [f"{mod} imports {name}" for mod, names in GRAPH.items()
            if _in(mod, importers) and not any(_in(mod, a) for a in allowed)
            for name in sorted(names) for group in forbidden if _in(name, group)]


def test_graph_sees_known_imports():
    # common practice, no source: the parser finds edges that exist, so an empty list of
    # violations below means the rule holds, not that nothing was read
    assert "chiropt.particles.ebcm" in GRAPH["chiropt.multipole.tmatrix"]
    assert "chiropt.sphericalwaves" in GRAPH["chiropt.particles.ebcm"]
    assert "chiropt.report.front" in GRAPH["chiropt.run"]
    assert _violations("chiropt.multipole", ("chiropt.particles",))


RULES = [
    # (importers, forbidden groups, exempt importers)
    ("chiropt.particles", ("chiropt.multipole",), ()),
    ("chiropt.multipole", ("chiropt.farfield", "chiropt.fields", "chiropt.metrics"), ()),
    ("chiropt.store", ("chiropt.search",), ()),
    ("chiropt", ("chiropt.report",), ("chiropt.cli", "chiropt.run", "chiropt.report",
                                      "chiropt.robustness")),
    # robustness sampling sits below the goals and above the forward model
    ("chiropt.robust", ("chiropt.goals", "chiropt.search", "chiropt.store", "chiropt.run",
                        "chiropt.robustness", "chiropt.cli"), ()),
    ("chiropt.robustness", ("chiropt.cli",), ()),
    # no solver imports another; solvers compute no far- or near-field quantities
    ("chiropt.solve", ("chiropt.multipole", "chiropt.fourier"), ()),
    ("chiropt.multipole", ("chiropt.solve", "chiropt.fourier"), ()),
    ("chiropt.fourier", ("chiropt.solve", "chiropt.multipole", "chiropt.farfield",
                         "chiropt.fields", "chiropt.metrics"), ()),
    ("chiropt.solution", ("chiropt.solve", "chiropt.multipole", "chiropt.fourier",
                          "chiropt.farfield", "chiropt.fields", "chiropt.metrics"), ()),
]


@pytest.mark.parametrize("importers,forbidden,allowed", RULES, ids=[r[0] for r in RULES])
def test_layer_rule(importers, forbidden, allowed):
    # common practice, no source: a lower layer never imports a higher one
    bad = _violations(importers, forbidden, allowed)
    assert not bad, "\n".join(bad)


@pytest.mark.parametrize("module", ["chiropt.sphericalwaves", "chiropt.problem"])
def test_shared_kernels_import_nothing_of_chiropt(module):
    # common practice, no source: a module shared by several layers depends on none of them
    # (chiropt.autodiff, itself importing nothing of chiropt, is a tool, not a layer)
    layers = {n for n in GRAPH[module] if not _in(n, "chiropt.autodiff")}
    assert not layers, sorted(layers)


def test_capacity_imports_only_errors():
    # DEVELOPERS.md table: the capacity functions are pure (metrics.py calls them)
    assert GRAPH["chiropt.capacity"] <= {"chiropt.errors", "chiropt.errors.InputError"}
