"""The error convention (isoturnover.errors): bad data or a bad argument raises DataError.

* :class:`~isoturnover.DataError` is a ``ValueError``; :class:`~isoturnover.ScaleError` and
  :class:`~isoturnover.UnknownIsotopeError` are kinds of it.
* Messages name the argument and say what is expected (each tested with ``match=``).
* A wrong-typed argument is a DataError too, not a ``TypeError``; no input is mutated.
* The package raises no plain ``ValueError`` or ``TypeError`` of its own (an ``ast`` scan).

All data are invented: a one-pool diet switch from δ0 = −24 ‰ to δ_eq = −12 ‰.
"""

from __future__ import annotations

import ast
import copy
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.diet import DietHistory
from isoturnover.errors import DataError, ScaleError, UnknownIsotopeError
from isoturnover.kinetics import TurnoverKinetics

PACKAGE = Path(iso.__file__).resolve().parent
T = np.array([0.0, 1, 2, 4, 7, 10, 14, 20, 28, 40, 60, 90])


def _series():
    # invented: k = 0.05/d, a fixed small deterministic scatter so the fit is not exact
    return T.copy(), -12.0 - 12.0 * np.exp(-0.05 * T) + 0.05 * np.sin(3 * T)


def test_error_classes():
    assert issubclass(DataError, ValueError) and issubclass(DataError, iso.IsoturnoverError)
    assert issubclass(ScaleError, DataError) and issubclass(UnknownIsotopeError, DataError)
    assert issubclass(iso.FitError, iso.IsoturnoverError)
    assert not issubclass(iso.FitError, ValueError)
    with pytest.raises(DataError, match=r"unknown isotope code 'C13'"):
        iso.isotopes.delta_to_ratio(0.0, "C13")
    with pytest.raises(DataError, match=r"law must be one of 'mass_dependent', 'refuse'"):
        iso.isotopes.delta_to_atom_fraction(0.0, "d18O", law="none")


# -- kinetics ------------------------------------------------------------------------------
def test_kinetics_wrong_types_are_data_errors():
    with pytest.raises(DataError, match=r"'pools' must be an integer from 1 to 4; got '2' "
                                        r"\(str\)"):
        TurnoverKinetics("2")
    with pytest.raises(DataError, match=r"'diet' must be a DietHistory or None; got list"):
        TurnoverKinetics(1, diet=[(0.0, -12.0)])
    with pytest.raises(DataError, match=r"'structure' must be one of 'parallel', 'chain'; "
                                        r"got 'serial'"):
        TurnoverKinetics(1, structure="serial")

    class Masses:  # has predict(t) but is not a growth curve of isoturnover.growth
        def predict(self, t):
            return np.ones_like(np.asarray(t, dtype=float))

    with pytest.raises(DataError, match=r"'growth_params'=True needs a growth curve from "
                                        r"isoturnover.growth .*; got Masses"):
        TurnoverKinetics(1, growth=Masses(), growth_params=True)


def test_kinetics_predict_checks_name_the_argument():
    kin = TurnoverKinetics(1)
    good = [-24.0, -12.0, 0.05, 1.0]
    with pytest.raises(DataError, match=r"'theta' must be an array of 4 numbers \(delta0, "
                                        r"delta_eq, k1, f1\); got"):
        kin.predict(T, ["a", -12.0, 0.05, 1.0])
    with pytest.raises(DataError, match=r"'theta' values must be numbers; got"):
        kin.predict(T, {"delta0": -24.0, "delta_eq": "x", "k1": 0.05, "f1": 1.0})
    with pytest.raises(DataError, match=r"'theta': parameters missing: f1"):
        kin.predict(T, {"delta0": -24.0, "delta_eq": -12.0, "k1": 0.05})
    with pytest.raises(DataError, match=r"'theta': rates must be positive; got \{'k1': -0.05\}"):
        kin.predict(T, [-24.0, -12.0, -0.05, 1.0])
    with pytest.raises(DataError, match=r"'t' must be a number or an array of numbers; got"):
        kin.predict("day 3", good)
    # the checked path gives what the formula gives: δ = δ_eq + (δ0 − δ_eq) e^{−kt} (by hand)
    np.testing.assert_allclose(kin.predict(T, good), -12.0 - 12.0 * np.exp(-0.05 * T),
                               rtol=0, atol=1e-12)


# -- diet ----------------------------------------------------------------------------------
def test_diet_from_table_refuses_bad_tables_without_mutating():
    with pytest.raises(DataError, match=r"'frame' must be a pandas DataFrame of diet rows; "
                                        r"got list"):
        DietHistory.from_table([(0.0, -26.0)])
    frame = pd.DataFrame({"start": [-100.0, "day 0"], "value": [-26.0, -12.0]})
    before = frame.copy()
    with pytest.raises(DataError, match=r"diet table: column 'start' must hold numbers; row 1 "
                                        r"holds 'day 0'"):
        DietHistory.from_table(frame)
    pd.testing.assert_frame_equal(frame, before)


def test_diet_from_dict_round_trip_and_errors():
    d = DietHistory(-26.0, changes=[(0.0, -12.0), (120.0, None)], isotope="d13C").to_dict()
    kept = copy.deepcopy(d)
    back = DietHistory.from_dict(d)
    assert back == DietHistory(-26.0, changes=[(0.0, -12.0), (120.0, None)])
    assert back.isotope == "d13C" and d == kept
    with pytest.raises(DataError, match=r"'d' must be a dict made by DietHistory.to_dict\(\) "
                                        r"\(keys 'initial' and 'changes'\)"):
        DietHistory.from_dict({"initial": -26.0})
    with pytest.raises(DataError, match=r"'d': 'changes' must be a list of \[time, value\] "
                                        r"pairs; got 5"):
        DietHistory.from_dict({"initial": -26.0, "changes": 5})


# -- selection -----------------------------------------------------------------------------
def test_compare_and_lr_test_arguments():
    t, y = _series()
    f1 = iso.TurnoverModel(1).fit(t, y, warn=False)
    f2 = iso.TurnoverModel(2).fit(t, y, warn=False)
    with pytest.raises(DataError, match=r"'fits' must be a sequence of fits \(TurnoverFit or "
                                        r"GrowthFit\); got int"):
        iso.compare(5)
    with pytest.raises(DataError, match=r"'fits': the entries at positions \[1\] are not fits"):
        iso.compare([f1, "2 pools"])
    with pytest.raises(DataError, match=r"'n_boot' must be a positive integer; got True"):
        iso.lr_test(f1, f2, n_boot=True)


# -- serialization -------------------------------------------------------------------------
def test_load_fit_refuses_broken_records_without_mutating():
    t, y = _series()
    fit = iso.TurnoverModel(1).fit(t, y, warn=False)
    d = fit.to_dict()
    kept = copy.deepcopy(d)
    back = iso.load_fit(d)
    assert d == kept
    np.testing.assert_allclose(back.predict(t), fit.predict(t), rtol=0, atol=1e-12)
    with pytest.raises(DataError, match=r"'d' is not valid JSON text"):
        iso.load_fit("{not json")
    with pytest.raises(DataError, match=r"'d' is not a complete fit record: section 'model' is "
                                        r"missing or not a dict \(got NoneType\)"):
        iso.load_fit({"format": "isoturnover-fit"})
    broken = json.loads(json.dumps(d))
    del broken["solution"]["z"]
    with pytest.raises(DataError, match=r"section 'solution' lacks 'z'"):
        iso.load_fit(broken)
    with pytest.raises(DataError, match=r"load_fit needs a dict made by TurnoverFit.to_dict\(\) "
                                        r".*; 'd' is list"):
        iso.load_fit([1, 2])


# -- the whole package ---------------------------------------------------------------------
def _plain_raises_in(name: str, source: str):
    """``name:line: raise X`` for every ``raise ValueError/TypeError`` in ``source``."""
    out = []
    for node in ast.walk(ast.parse(source)):
        if not isinstance(node, ast.Raise) or node.exc is None:
            continue
        exc = node.exc.func if isinstance(node.exc, ast.Call) else node.exc
        if isinstance(exc, ast.Name) and exc.id in ("ValueError", "TypeError"):
            out.append((node.lineno, f"{name}:{node.lineno}: raise {exc.id}"))
    return [text for _, text in sorted(out)]


def _plain_raises():
    return [hit for path in sorted(PACKAGE.glob("*.py"))
            for hit in _plain_raises_in(path.stem, path.read_text(encoding="utf-8"))]


def test_the_scan_finds_plain_raises():
    # the scan itself, on a crafted source (else the check below could pass by finding
    # nothing): a plain raise is found, a DataError, a re-raise and a qualified name are not
    src = ("def f(x):\n"
           "    if x:\n"
           "        raise TypeError('no')\n"
           "    if x is None:\n"
           "        raise ValueError\n"
           "    try:\n"
           "        raise DataError('bad')\n"
           "    except DataError:\n"
           "        raise\n"
           "    raise argparse.ArgumentTypeError('x')\n")
    assert _plain_raises_in("m", src) == ["m:3: raise TypeError", "m:5: raise ValueError"]
    assert len(list(PACKAGE.glob("*.py"))) > 10  # the scan reads the package's modules


def test_no_plain_value_or_type_error():
    found = _plain_raises()
    assert not found, f"{len(found)} plain raise(s):\n" + "\n".join(found)
