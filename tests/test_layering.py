"""The package's layout holds: imports point down the layers, no cycle, no private name crosses a folder.

Layers, lowest first (a module may import its own layer's folder and any lower
layer, never a higher one). The order follows the flow of a study, with two
deliberate turns: the evaluators (``runs``) sit below the study reader, which
checks each evaluator's options when a study is loaded, and ``design`` sits
above ``surrogate``, because choosing the next runs reads a fitted surrogate.
Every import counts, also one made inside a function.
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "doe"

LAYERS = [
    {"errors", "seeds", "files", "defaults", "checks", "version"},
    {"space"},
    {"aero", "vehicle"},
    {"runs"},
    {"study"},
    {"surrogate"},
    {"design"},
    {"sensitivity"},
    {"robust"},
    {"calibration"},
    {"report"},
    {"workflow"},
    {"testing"},
    {"cli", "__init__"},
]
RANK = {name: i for i, layer in enumerate(LAYERS) for name in layer}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path: Path):
    """(imported module, names imported from it) for every import in the file, relative ones resolved."""
    module = _module_name(path)
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] == "doe":
                    yield alias.name, []
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[:len(package.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "doe":
                continue
            names = [a.name for a in node.names]
            submodules = [f"{target}.{n}" for n in names if _exists(f"{target}.{n}")]
            if submodules:
                for sub in submodules:
                    yield sub, []
            else:
                yield target, names


def _exists(module: str) -> bool:
    path = ROOT.parent.joinpath(*module.split("."))
    return path.with_suffix(".py").exists() or (path / "__init__.py").exists()


def _folder(module: str) -> str:
    """``doe.surrogate.gp`` -> ``surrogate``; ``doe`` -> ``__init__``."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _graph():
    files = sorted(ROOT.rglob("*.py"))
    return {_module_name(f): list(_imports(f)) for f in files}


GRAPH = _graph()


def test_every_module_has_a_layer():
    assert {_folder(m) for m in GRAPH} <= set(RANK), sorted({_folder(m) for m in GRAPH} - set(RANK))


def _upward(module: str, targets) -> list:
    """The imports of ``module`` that point to a higher layer."""
    return [(t, _folder(t)) for t, _ in targets if RANK[_folder(t)] > RANK[_folder(module)]]


def _find_cycle(edges: dict) -> list:
    """One import cycle of a graph ``{module: set of modules}`` as a path, or [] when there is none."""
    state, stack = {}, []

    def visit(m):
        state[m] = "open"
        stack.append(m)
        for t in sorted(edges[m]):
            if state.get(t) == "open":
                return stack[stack.index(t):] + [t]
            if t not in state:
                found = visit(t)
                if found:
                    return found
        stack.pop()
        state[m] = "done"
        return []

    for m in sorted(edges):
        if m not in state:
            found = visit(m)
            if found:
                return found
    return []


@pytest.mark.parametrize("module", sorted(GRAPH))
def test_imports_point_down(module):
    up = _upward(module, GRAPH[module])
    assert not up, f"{module} imports a higher layer: {up}"


@pytest.mark.parametrize("module", sorted(GRAPH))
def test_no_private_name_crosses_a_folder(module):
    crossing = [(target, n) for target, names in GRAPH[module] for n in names
                if n.startswith("_") and not n.startswith("__") and _folder(target) != _folder(module)]
    assert not crossing, f"{module} imports private names of another folder: {crossing}"


def test_no_import_cycle():
    edges = {m: {t if t in GRAPH else t.rsplit(".", 1)[0] for t, _ in targets} & set(GRAPH) - {m}
             for m, targets in GRAPH.items()}
    assert _find_cycle(edges) == []


def test_the_checks_can_fail():
    # A made-up cycle is found, and an import from the evaluators up to the surrogates is flagged.
    assert _find_cycle({"doe.a": {"doe.b"}, "doe.b": {"doe.c"}, "doe.c": {"doe.a"}}) == [
        "doe.a", "doe.b", "doe.c", "doe.a"]
    assert _find_cycle({"doe.a": {"doe.b"}, "doe.b": set()}) == []
    assert _upward("doe.runs.results", [("doe.surrogate.gp", [])]) == [("doe.surrogate.gp", "surrogate")]
    assert _upward("doe.surrogate.gp", [("doe.runs.results", [])]) == []
