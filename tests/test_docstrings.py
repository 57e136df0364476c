"""Every public name has a numpydoc docstring that matches its signature.

Checked with ``numpydoc.validate.validate`` (numpydoc's own validator, the one its Sphinx
extension and pre-commit hook run). The public API is every callable in
``isoturnover.__all__`` and in the ``__all__`` of the public modules ``isoturnover.isotopes``,
``isoturnover.plotting`` and ``isoturnover.uncertainty``; for a class, also every public
method and property that the package defines (inherited ones from Python or other libraries
are theirs to document).

The checks that must pass, by numpydoc's codes (``numpydoc/validate.py``, ``ERROR_MSGS``):

* ``GL08`` the object has no docstring;
* ``PR01`` a parameter of the signature is not documented;
* ``PR02`` a documented parameter is not in the signature;
* ``RT01`` a function or method that returns a value has no Returns section (numpydoc looks
  for a ``return`` with a value outside nested functions; properties are not checked).

A failure prints one line per problem, ``name: code message``.
"""

from __future__ import annotations

import functools
import importlib
import inspect
from pathlib import Path

import pytest
from numpydoc.docscrape import get_doc_object
from numpydoc.validate import validate

import isoturnover as iso

CHECKS = ("GL08", "PR01", "PR02", "RT01")
PUBLIC_MODULES = ("isoturnover.isotopes", "isoturnover.plotting", "isoturnover.uncertainty")
PACKAGE = Path(iso.__file__).resolve().parent


def _ours(obj) -> bool:
    return (getattr(obj, "__module__", None) or "").split(".")[0] == "isoturnover"


def _members(cls, prefix: str):
    """Dotted names of the public methods and properties the package defines on ``cls``."""
    out = []
    for name in sorted(dir(cls)):
        if name.startswith("_"):
            continue
        owner = next((c for c in cls.__mro__ if name in vars(c)), None)
        if owner is None or not _ours(owner):
            continue
        attr = vars(owner)[name]
        if isinstance(attr, (staticmethod, classmethod)):
            attr = attr.__func__
        if inspect.isfunction(attr) or isinstance(attr, (property, functools.cached_property)):
            out.append(f"{prefix}.{name}")
    return out


def _names(module_name: str, names):
    """Dotted names to validate: the module's public callables, and their classes' members."""
    module = importlib.import_module(module_name)
    out = []
    for name in names:
        obj = getattr(module, name)
        if inspect.ismodule(obj) or not _ours(obj):
            continue
        if inspect.isclass(obj):
            out.append(f"{module_name}.{name}")
            out += _members(obj, f"{module_name}.{name}")
        elif callable(obj):
            out.append(f"{module_name}.{name}")
    return out


GROUPS = {
    "isoturnover": ("isoturnover", iso.__all__),
    **{m: (m, importlib.import_module(m).__all__) for m in PUBLIC_MODULES},
}


def _failures(dotted_names):
    lines = []
    for name in dotted_names:
        for code, message in validate(name)["errors"]:
            if code in CHECKS:
                lines.append(f"{name}: {code} {message}")
    return lines


def test_the_public_api_is_collected():
    # the collector finds functions, classes, methods and properties (else the audit
    # below could pass by checking nothing)
    top = _names(*GROUPS["isoturnover"])
    for name in ("isoturnover.TurnoverModel", "isoturnover.TurnoverModel.fit",
                 "isoturnover.TurnoverFit.half_lives", "isoturnover.TurnoverFit.params",
                 "isoturnover.DietHistory.step", "isoturnover.compare",
                 "isoturnover.DataError"):
        assert name in top, name
    assert "isoturnover.isotopes.delta_to_ratio" in _names(*GROUPS["isoturnover.isotopes"])
    assert "isoturnover.plotting.plot_fit" in _names(*GROUPS["isoturnover.plotting"])
    assert _names(*GROUPS["isoturnover.uncertainty"])
    # inherited members of Python's own classes are not ours to document
    assert not any(n.endswith((".with_traceback", ".add_note")) for n in top)


def _undocumented(x, y=1.0):
    return x + y


def _documented(x, y=1.0):
    """Add two numbers.

    Parameters
    ----------
    x : float
        First.
    z : float
        Not in the signature.
    """
    return x + y


def test_the_checks_fire_on_crafted_docstrings():
    # numpydoc's validator, given the objects directly: the four codes are the ones it
    # reports for these faults (numpydoc/validate.py, ERROR_MSGS)
    codes = {c for c, _ in validate(get_doc_object(_undocumented))["errors"]}
    assert "GL08" in codes
    codes = {c for c, _ in validate(get_doc_object(_documented))["errors"]}
    assert {"PR01", "PR02", "RT01"} <= codes


def test_no_check_is_silenced_in_the_source():
    # numpydoc honours "# numpydoc ignore=CODE" comments; the package uses none
    hits = [f"{p.name}:{i}" for p in sorted(PACKAGE.glob("*.py"))
            for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1)
            if "numpydoc ignore" in line]
    assert not hits, hits


@pytest.mark.parametrize("group", list(GROUPS))
def test_public_docstrings(group):
    failures = _failures(_names(*GROUPS[group]))
    assert not failures, (f"{len(failures)} docstring problem(s) in {group}:\n"
                          + "\n".join(failures))
