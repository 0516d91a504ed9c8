"""Rules of the package's shape, read from the source with the standard library's ast.

* The import graph has no circles (imports under ``TYPE_CHECKING`` and inside functions count).
* Nothing outside ``cli/`` imports ``cli/``; only ``cli/`` and ``report/`` import ``report/``;
  only ``cli/`` and ``report/`` import ``batch/`` (the core never reaches up).
* No module outside an estimator reads an estimator's fitted attributes (names ending in ``_``).
* No module outside ``calibration/methods.py`` compares anything with the method names
  ``"cls"``/``"pls"`` (one dispatch point).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src"
#: Modules whose classes are estimators (and their base): the only ones that may read fitted
#: attributes.
ESTIMATOR_MODULES = {"bandsolve._estimator", "bandsolve.cls", "bandsolve.cls_leverage",
                     "bandsolve.cls_predict", "bandsolve.pls", "bandsolve.preprocess"}
DISPATCH = "bandsolve.calibration.methods"
#: Which packages may import each application package.
UPWARD = {"bandsolve.cli": {"bandsolve.cli"},
          "bandsolve.report": {"bandsolve.cli", "bandsolve.report"},
          "bandsolve.batch": {"bandsolve.cli", "bandsolve.report", "bandsolve.batch"}}


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted((SRC / "bandsolve").rglob("*.py")):
        parts = list(path.relative_to(SRC).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


MODULES = _modules()
TREES = {name: ast.parse(path.read_text(encoding="utf-8")) for name, path in MODULES.items()}


def _owner(name: str) -> str | None:
    while name and name not in MODULES:
        name = name.rpartition(".")[0]
    return name or None


def _imports(name: str) -> set[str]:
    """Modules of the package that ``name`` imports, anywhere in its source."""
    package = name if MODULES[name].name == "__init__.py" else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(TREES[name]):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                up = package.split(".")[:len(package.split(".")) - node.level + 1]
                base = ".".join(up + ([base] if base else []))
            subs = [f"{base}.{a.name}" for a in node.names]
            targets = subs if all(s in MODULES for s in subs) else [*subs, base]
        else:
            continue
        found |= {o for t in targets if t.startswith("bandsolve")
                  and (o := _owner(t)) is not None and o != name}
    return found


GRAPH = {name: _imports(name) for name in MODULES}


def test_import_graph_has_no_circles():
    # Depth-first search with three colours finds every back edge (Cormen et al., from memory).
    state: dict[str, int] = {}
    circles = []

    def visit(node: str, path: list[str]) -> None:
        state[node] = 1
        for nxt in sorted(GRAPH[node]):
            if state.get(nxt) == 1:
                circles.append([*path[path.index(nxt):], node, nxt])
            elif nxt not in state:
                visit(nxt, [*path, node])
        state[node] = 2

    for node in sorted(GRAPH):
        if node not in state:
            visit(node, [])
    assert not circles, circles


@pytest.mark.parametrize("package", sorted(UPWARD))
def test_the_core_does_not_reach_up(package):
    allowed = UPWARD[package]
    offenders = sorted(f"{src} -> {dst}" for src, targets in GRAPH.items() for dst in targets
                       if (dst == package or dst.startswith(package + "."))
                       and src != "bandsolve"
                       and not any(src == a or src.startswith(a + ".") for a in allowed))
    assert not offenders


def _fitted_reads(name: str) -> list[str]:
    out = []
    for node in ast.walk(TREES[name]):
        if (isinstance(node, ast.Attribute) and node.attr.endswith("_")
                and not node.attr.endswith("__") and node.attr[0] != "_"
                and not (isinstance(node.value, ast.Name) and node.value.id in ("np", "numpy"))):
            out.append(f"{name}:{node.lineno} .{node.attr}")
    return out


def test_only_estimators_read_fitted_attributes():
    reads = [r for name in MODULES if name not in ESTIMATOR_MODULES
             for r in _fitted_reads(name)]
    assert not reads


def test_the_rule_sees_a_fitted_attribute_read():
    # The check above must be able to fail: an estimator module reads its own attributes.
    assert any(".pure_spectra_" in r for r in _fitted_reads("bandsolve.cls"))


def _method_branches(name: str) -> list[str]:
    out = []
    for node in ast.walk(TREES[name]):
        if isinstance(node, ast.Compare):
            for side in (node.left, *node.comparators):
                items = side.elts if isinstance(side, ast.Tuple | ast.List | ast.Set) else [side]
                if any(isinstance(i, ast.Constant) and isinstance(i.value, str)
                       and i.value.lower() in ("cls", "pls") for i in items):
                    out.append(f"{name}:{node.lineno}")
    return out


def test_no_method_branching_outside_the_dispatch_point():
    branches = [b for name in MODULES if name != DISPATCH for b in _method_branches(name)]
    assert not branches


def test_the_rule_sees_a_method_branch():
    tree = ast.parse('if cal.method == "cls":\n    pass\n')
    TREES["example"] = tree
    try:
        assert _method_branches("example")
    finally:
        del TREES["example"]
