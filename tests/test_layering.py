"""The package's modules import one way, down the layers drawn in DEVELOPERS.md.

Parses every module with ``ast`` (no import is executed) and fails when

* a module imports a module of a higher layer, or of the same layer that is not listed as
  allowed (no cycles), at module level or inside a function;
* a module imports another module's underscore name (``from .x import _y``) or reads one
  through a module alias (``x._y``);
* a module reads an underscore attribute (``obj._name``) that no class or function of its
  own defines: reaching into another module's private state.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "isoturnover"

# Layer of every module, lowest first. A module may import any module of a lower layer.
LAYERS = {
    "errors": 0, "lazystats": 0,
    "conventions": 1,
    "isotopes": 1, "references": 1,
    "tables": 2, "sampletimes": 2, "diet": 2, "data": 2, "demo": 2, "progress": 2, "growth": 2,
    "growthlaws": 2, "outputdir": 2,
    "progressvariable": 2, "responses": 2, "population": 2, "reportdoc": 2,
    "popinputs": 2, "randomeffects": 2, "popestimate": 2,
    "kinetics": 3, "segments": 3,
    "quantities": 4, "coordinates": 4, "starts": 4, "projection": 4, "state": 4,
    "inputs": 4,
    "engine": 5, "profiles": 5, "growthproblem": 5, "jointproblem": 5, "equilibration": 5,
    "derived": 6, "constrained": 6, "diagnostics": 6, "resampling": 6, "mcmc": 6, "bands": 6,
    "growthfit": 6, "allometry": 6,
    "results": 7, "growthdilution": 7, "uncertainty": 7, "summary": 7,
    "intervalcache": 7, "records": 7,
    "model": 8, "selection": 8, "serialization": 8, "seriesrows": 8, "inverse": 8,
    "dietoperator": 8, "dietsolvers": 8, "dietprofile": 8,
    "groups": 9, "seriesfit": 9, "sharedfit": 9, "designmodel": 9, "growthrate": 9,
    "plotting": 10, "plotkit": 10, "plotstudy": 10, "design": 10, "simulate": 10,
    "plotplan": 10, "plotpop": 10, "clocks": 10, "plotinverse": 10, "plotsegments": 10,
    "report": 11, "reportmethods": 11, "reportfigures": 11, "planreport": 11, "segmentplan": 11,
    "analysis": 12, "cliargs": 12, "clockrun": 12,
    "cli": 13,
    "__main__": 14, "__init__": 14,
}
# Same-layer imports that are allowed (one way only).
SAME_LAYER = {("isotopes", "conventions"), ("data", "diet"), ("demo", "data"),
              ("isotopes", "references"), ("segments", "kinetics"),
              ("serialization", "model"), ("data", "tables"), ("diet", "tables"),
              ("data", "sampletimes"), ("sampletimes", "tables"),
              ("coordinates", "quantities"), ("starts", "coordinates"),
              ("projection", "coordinates"), ("projection", "starts"),
              ("resampling", "derived"), ("derived", "constrained"), ("mcmc", "derived"),
              ("bands", "derived"), ("bands", "resampling"),
              ("results", "summary"), ("results", "growthdilution"),
              ("results", "intervalcache"), ("results", "records"),
              ("growth", "growthlaws"), ("plotting", "plotkit"),
              ("plotstudy", "plotkit"), ("report", "reportfigures"),
              ("progress", "progressvariable"), ("jointproblem", "profiles"),
              ("randomeffects", "popinputs"),
              ("popestimate", "popinputs"), ("popestimate", "randomeffects"),
              ("population", "popestimate"), ("population", "randomeffects"),
              ("simulate", "design"),
              ("plotplan", "plotkit"), ("plotplan", "design"), ("plotpop", "plotkit"),
              ("plotinverse", "plotkit"), ("plotsegments", "plotkit"),
              ("inverse", "dietoperator"), ("inverse", "dietsolvers"),
              ("inverse", "dietprofile"),
              ("sharedfit", "groups"), ("clockrun", "analysis"),
              ("groups", "seriesfit"), ("report", "reportmethods")}


def _modules():
    return sorted(p for p in PACKAGE.glob("*.py"))


def _imports(tree, name):
    """(imported module, imported names, line) for every relative import of the package."""
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.level == 1:
            if node.module is None:  # from . import x, y
                for a in node.names:
                    out.append((a.name, [], node.lineno))
            else:
                out.append((node.module.split(".")[0], [a.name for a in node.names],
                            node.lineno))
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module and \
                node.module.startswith("isoturnover."):
            out.append((node.module.split(".")[1], [a.name for a in node.names], node.lineno))
    return out


def _own_private_names(tree):
    """Underscore names a module defines: functions, classes, attributes set on objects."""
    own = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            own.add(node.name)
        elif isinstance(node, ast.Attribute) and isinstance(node.ctx, ast.Store):
            own.add(node.attr)
        elif isinstance(node, ast.Name) and isinstance(node.ctx, ast.Store):
            own.add(node.id)
        elif isinstance(node, ast.arg):
            own.add(node.arg)
        elif isinstance(node, ast.keyword) and node.arg:
            own.add(node.arg)
    return {n for n in own if n.startswith("_")}


def violations():
    found = []
    for path in _modules():
        name = path.stem
        tree = ast.parse(path.read_text(encoding="utf-8"))
        layer = LAYERS.get(name)
        if layer is None:
            found.append(f"{name}: module missing from the layer table")
            continue
        module_aliases = set()
        for mod, names, line in _imports(tree, name):
            if mod not in LAYERS:
                continue
            if not names:
                module_aliases.add(mod)
            lo = LAYERS[mod]
            if lo > layer or (lo == layer and mod != name and (name, mod) not in SAME_LAYER):
                found.append(f"{name}:{line} imports {mod} (layer {lo} >= {layer})")
            for n in names:
                if n.startswith("_") and not n.startswith("__"):
                    found.append(f"{name}:{line} imports private {mod}.{n}")
        own = _own_private_names(tree)
        for node in ast.walk(tree):
            if not isinstance(node, ast.Attribute):
                continue
            attr = node.attr
            if not attr.startswith("_") or attr.startswith("__"):
                continue
            base = node.value
            if isinstance(base, ast.Name) and base.id in module_aliases:
                found.append(f"{name}:{node.lineno} uses private {base.id}.{attr}")
            elif attr not in own:
                found.append(f"{name}:{node.lineno} reads another module's private .{attr}")
    return found


def test_every_module_has_a_layer():
    missing = [p.stem for p in _modules() if p.stem not in LAYERS]
    assert not missing, f"add these modules to LAYERS: {missing}"


def test_imports_go_down_the_layers_and_private_names_stay_home():
    found = violations()
    assert not found, "layering violations:\n" + "\n".join(found)


@pytest.mark.parametrize("source, expected", [
    ("from .results import TurnoverFit\n", "imports results"),
    ("from .kinetics import _psi\n", "imports private kinetics._psi"),
    ("def f(kin):\n    return kin._k_index\n", "reads another module's private ._k_index"),
])
def test_checker_catches_crafted_violations(tmp_path, monkeypatch, source, expected):
    # a throwaway copy of a low-layer module holding the crafted code
    fake = tmp_path / "isoturnover"
    fake.mkdir()
    (fake / "diet.py").write_text(source, encoding="utf-8")
    monkeypatch.setattr(__import__(__name__), "PACKAGE", fake)
    assert any(expected in v for v in violations())


def test_no_module_shares_a_name_with_a_public_function():
    # `iso.compare` must be the function whatever was imported before (a module of the same
    # name would replace it in the package namespace on `import isoturnover.compare`)
    import inspect

    import isoturnover as iso

    modules = {p.stem for p in _modules()}
    clash = [n for n in iso.__all__ if n in modules and not inspect.ismodule(getattr(iso, n))]
    assert not clash, clash
    assert inspect.isfunction(iso.compare)
