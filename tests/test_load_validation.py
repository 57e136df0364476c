"""Saved fits that were truncated, edited or damaged are refused with DataError, naming the key.

The records are real: two animals of the invented goat demo (plasma δ13C, with the pens'
diets and the body masses, so each record carries a diet history and a fitted growth curve)
analysed and written as ``isoturnover fit --ci asymptotic --no-figures`` does, and three
library fits whose records carry ties and bounds, a body-mass block, a lag, a robust loss
and a fixed value. Each record is then damaged with a fixed seed — keys deleted, types
changed, NaN inserted, arrays swapped for scalars, values edited, deep nesting, the file
truncated at many offsets — and every damaged record must raise DataError (never another
exception type) whose message names the damaged key path; the untouched file loads and
predicts as the original fits.
"""

from __future__ import annotations

import copy
import json
import math
import re
import warnings

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.errors import DataError
from isoturnover.serialization import MAX_DEPTH

SEED = 20261203
GRID = np.linspace(0.0, 180.0, 37)

# Keys that load_fit accepts missing (records of earlier releases lack them): deleting one
# may load or be refused, but never raise another error. Paths from the record's root.
OPTIONAL = {
    ("model", "propagate_growth"), ("data", "info"), ("data", "masses"),
    ("data", "block_scale"), ("data", "fingerprint"), ("solution", "param_names"),
    ("options", "tied"), ("options", "bounds"),
    ("solution", "coords"), ("solution", "coords", "rate_anchor"),
    ("solution", "coords", "fraction_anchor"),
    *[("model", "diet", k) for k in ("start", "previous", "isotope", "label")],
    *[("model", "growth", "curve", k) for k in ("version", "sigma", "warnings", "nfev",
                                                "rss", "stderr")],
}
# Descriptive content (where the data came from; the derived values, which load_fit
# recomputes): any change may load or be refused, but never raise another error.
FREE = (("data", "info"), ("derived",))
# Entries a user chose (a bound, a starting value): deleting one is an edit, not damage.
ENTRIES = (("options", "bounds"), ("options", "init"))


# -- the records ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """An analysis of two demo goats written to disk; its fits.json and original fits."""
    from isoturnover.demo import demo_path

    samples = pd.read_csv(demo_path("goat_samples"))
    samples = samples[samples["subject"].isin(["G01", "G05"]) & (samples["tissue"] == "plasma")
                      & (samples["isotope"] == "d13C")]
    small = tmp_path_factory.mktemp("in") / "samples.csv"
    samples.to_csv(small, index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = iso.analyse(str(small), diets=str(demo_path("goat_diets")),
                        masses=str(demo_path("goat_masses")), ci="asymptotic")
        out = tmp_path_factory.mktemp("out") / "run"
        a.write(out, figures=False)
    originals = {}
    for part, fs in a.parts.items():
        for key, r in fs.items():
            for label, f in r.fits.items():
                if f is not None:
                    originals[(part, tuple(str(v) for v in key), label)] = f
    return out / "fits.json", originals


def _two_pool(t, seed):
    # by hand: δ(t) = δeq + (δ0 − δeq)(f1 e^{−k1 t} + (1 − f1) e^{−k2 t}), δ0 −25, δeq −12,
    # k1 0.5, k2 0.1, f1 0.4, plus N(0, 0.05) noise with a fixed seed
    rng = np.random.default_rng(seed)
    clean = -12 + (-25 + 12) * (0.4 * np.exp(-0.5 * t) + 0.6 * np.exp(-0.1 * t))
    return clean + rng.normal(0, 0.05, t.size)


@pytest.fixture(scope="module")
def library_records():
    """Records with ties and bounds, a body-mass block, a lag, a robust loss, a fixed value."""
    t = np.array([0, 1, 2, 3, 5, 7, 10, 14, 21, 28, 35, 42, 56, 70, 84, 100.0])
    y = _two_pool(t, 3)
    out = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = iso.TurnoverModel(pools=2)
        p = m.make_params(delta0=-25.0)
        p["k2"].expr = "k1/5"
        p["delta_eq"].set(min=-20.0)
        out["ties, bounds"] = m.fit(t, y, params=p)
        # body masses by hand: W = 20 e^{0.004 t} (exponential growth), ×(1 ± 0.5 %) noise
        tm = np.arange(0.0, 101.0, 7.0)
        wm = 20 * np.exp(0.004 * tm) * (1 + np.random.default_rng(5).normal(0, 0.005, tm.size))
        out["growth, masses"] = iso.TurnoverModel(1, growth="exponential").fit(
            t, y, masses=(tm, wm), sigma=0.05)
        diet = iso.DietHistory(-26.0, changes=[(0.0, -12.0), (60.0, -26.0)], start=-200.0,
                               previous=-26.0, isotope="d13C", label="invented ration")
        out["diet, lag, robust, fixed"] = iso.TurnoverModel(1, lag=True, diet=diet).fit(
            t, y, loss="huber", fixed={"f1": 1.0}, label="lag series")
    return out


# -- helpers -------------------------------------------------------------------------------
def _paths(obj, pt=()):
    """Every node of a JSON value as a tuple of keys and indices (the root excluded)."""
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield pt + (k,)
            yield from _paths(v, pt + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield pt + (i,)
            yield from _paths(v, pt + (i,))


def _get(obj, pt):
    for k in pt:
        obj = obj[k]
    return obj


def _changed(rec, pt, how):
    """A deep copy of ``rec`` with the node at ``pt`` replaced (``how(old)``) or deleted."""
    new = copy.deepcopy(rec)
    parent = _get(new, pt[:-1])
    if how is None:
        del parent[pt[-1]]
    else:
        parent[pt[-1]] = how(parent[pt[-1]])
    return new


def _name(root, pt):
    """The key path as the messages write it: ``d.solution.theta[1]``."""
    s = root
    for k in pt:
        s += f"[{k}]" if isinstance(k, int) else f".{k}"
    return s


def _outcome(load, obj):
    """None when ``obj`` loads, else the DataError's message (any other error propagates)."""
    try:
        load(obj)
    except DataError as e:
        return str(e)
    return None


def _wrong_type(v):
    """A value of another kind than ``v`` (never one that the writer could have written)."""
    if isinstance(v, bool):
        return "yes"
    if isinstance(v, (int, float)):
        return "text"
    if isinstance(v, str):
        return 12345
    if isinstance(v, list):
        return {"a": 1}
    if isinstance(v, dict):
        return [1, 2]
    return {"unexpected": 1}  # None


def _first_scalar(v):
    """A scalar in place of an array: its first item when that is a scalar, else 1.0."""
    return v[0] if v and not isinstance(v[0], (list, dict)) else 1.0


def _sample(rng, paths, k):
    """Up to ``k`` paths, keeping one of every key path shape (indices beyond the first two of
    an array are sampled)."""
    keep = [p for p in paths if not any(isinstance(x, int) and x > 1 for x in p)]
    kept = set(keep)
    rest = [p for p in paths if p not in kept]
    if len(keep) > k:
        keep = [keep[i] for i in sorted(rng.choice(len(keep), k, replace=False))]
    extra = [rest[i] for i in rng.choice(len(rest), min(len(rest), 10), replace=False)]
    return keep + extra


def _records(written, library_records):
    path, _ = written
    entries = json.loads(path.read_text(encoding="utf-8"))["fits"]
    out = {f"file fit {i}": e["fit"] for i, e in enumerate(entries[:2])}
    out.update({k: f.to_dict() for k, f in library_records.items()})
    return out


def _check_refused(msg, where, *, what):
    assert msg is not None, f"{what} at {where} loaded without an error"
    assert where in msg, f"{what} at {where}: the message does not name it: {msg}"


# -- the untouched file --------------------------------------------------------------------
def test_untouched_file_loads_and_predicts_as_the_original(written):
    path, originals = written
    raw = path.read_text(encoding="utf-8")
    fits = iso.load_fits(path)
    assert len(fits) == len(originals) >= 4
    for e in fits:
        f = originals[(e["part"], tuple(str(v) for v in e["key"].values()), e["candidate"])]
        # the original fit's own predictions are the reference (same model, same θ)
        np.testing.assert_allclose(e["fit"].predict(GRID), f.predict(GRID), rtol=0,
                                   atol=1e-12)
        assert e["fit"].values == f.values
    assert path.read_text(encoding="utf-8") == raw
    d = json.loads(raw)
    kept = copy.deepcopy(d)
    assert len(iso.load_fits(d)) == len(fits) and d == kept  # the dict is not modified


def test_library_records_round_trip(library_records):
    for f in library_records.values():
        d = f.to_dict()
        back = iso.load_fit(json.dumps(d))
        # the original fit's own predictions are the reference
        np.testing.assert_allclose(back.predict(GRID), f.predict(GRID), rtol=0, atol=1e-12)
        assert back.to_dict() == d


# -- the fuzz ------------------------------------------------------------------------------
def test_fuzz_every_damage_is_refused_naming_the_key(written, library_records):
    rng = np.random.default_rng(SEED)
    counts = {"deleted": 0, "retyped": 0, "nan": 0, "scalar": 0, "edited": 0, "loaded": 0}
    for label, rec in _records(written, library_records).items():
        paths = list(_paths(rec))
        for pt in _sample(rng, paths, 120):
            where = _name("d", pt)
            free = any(pt[:len(f)] == f for f in FREE)
            old = _get(rec, pt)
            # delete a key (array items are not keys)
            if not isinstance(pt[-1], int):
                msg = _outcome(iso.load_fit, _changed(rec, pt, None))
                if pt in OPTIONAL or free or pt[:-1] in ENTRIES:
                    counts["loaded" if msg is None else "deleted"] += 1
                elif pt[:-1] in (("options", "fixed"), ("options", "tied")):
                    # one fewer fixed or tied value: the stored coordinates no longer fit
                    # (unless the value was fixed anyway: f1 = 1 of a single pool)
                    if msg is not None or pt != ("options", "fixed", "f1"):
                        _check_refused(msg, _name("d", pt[:-1]), what=f"{label}: deleting")
                    counts["loaded" if msg is None else "deleted"] += 1
                else:
                    _check_refused(msg, "'format'" if pt == ("format",) else where,
                                   what=f"{label}: deleting")
                    counts["deleted"] += 1
            # change the type
            msg = _outcome(iso.load_fit, _changed(rec, pt, _wrong_type))
            if free:
                counts["loaded" if msg is None else "retyped"] += 1
            else:
                _check_refused(msg, "'format'" if pt == ("format",) else where,
                               what=f"{label}: retyping")
                counts["retyped"] += 1
            # NaN in place of a number
            if isinstance(old, (int, float)) and not isinstance(old, bool) and not free:
                msg = _outcome(iso.load_fit, _changed(rec, pt, lambda v: math.nan))
                _check_refused(msg, where, what=f"{label}: NaN")
                assert "not a finite number" in msg or "not an integer" in msg, msg
                counts["nan"] += 1
            # an array swapped for a scalar (its first item)
            if isinstance(old, list) and not free:
                msg = _outcome(iso.load_fit, _changed(rec, pt, _first_scalar))
                _check_refused(msg, where, what=f"{label}: array to scalar")
                counts["scalar"] += 1
        # edited values of the right type: θ no longer agrees with the stored coordinates
        sol = rec["solution"]
        for key in ("theta", "z"):
            for i in rng.choice(len(sol[key]), min(3, len(sol[key])), replace=False):
                bad = _changed(rec, ("solution", key, int(i)), lambda v: v * 1.01 + 1e-3)
                msg = _outcome(iso.load_fit, bad)
                _check_refused(msg, "d.solution.theta[", what=f"{label}: editing {key}[{i}]")
                assert "disagrees" in msg or "must be" in msg, msg
                counts["edited"] += 1
    # every kind of damage was tried many times (not a test that cannot fail for want of cases)
    assert counts["deleted"] > 100 and counts["retyped"] > 300 and counts["nan"] > 100, counts
    assert counts["scalar"] > 50 and counts["edited"] >= 20, counts


def test_nan_parameter_in_a_file_is_refused_naming_file_and_key(written, tmp_path):
    path, _ = written
    d = json.loads(path.read_text(encoding="utf-8"))
    fit = d["fits"][3]["fit"]
    names = iso.load_fit(fit).kinetics.param_names
    j = names.index("k1")
    fit["solution"]["theta"][j] = math.nan
    bad = tmp_path / "fits.json"
    bad.write_text(json.dumps(d), encoding="utf-8")  # json writes NaN as the token NaN
    with pytest.raises(DataError) as e:
        iso.load_fits(bad)
    assert str(e.value) == (f"{bad}: fits[3].fit.solution.theta[{j}] (k1): not a finite "
                            "number (got nan)")


def test_damaged_file_levels_are_refused_naming_file_and_key(written, tmp_path):
    path, _ = written
    d = json.loads(path.read_text(encoding="utf-8"))
    cases = {
        "fits": lambda x: x.pop("fits"),
        "version": lambda x: x.update(version="1"),
        "level": lambda x: x.update(level=math.nan),
        "fits[1]": lambda x: x["fits"].__setitem__(1, "a fit"),
        "fits[2].fit": lambda x: x["fits"][2].__setitem__("fit", [1, 2]),
        "fits[0].chosen": lambda x: x["fits"][0].pop("chosen"),
        "fits[1].key.subject": lambda x: x["fits"][1]["key"].update(subject=[1]),
        "fits[2].fit.data.t[3]": lambda x: x["fits"][2]["fit"]["data"]["t"].__setitem__(
            3, "day 4"),
        "fits[3].fit.model.diet.changes": lambda x: x["fits"][3]["fit"]["model"][
            "diet"].update(changes=4.0),
        "fits[1].fit.model.growth.curve.values[1]": lambda x: x["fits"][1]["fit"]["model"][
            "growth"]["curve"]["values"].__setitem__(1, math.inf),
    }
    for where, damage in cases.items():
        bad = copy.deepcopy(d)
        damage(bad)
        f = tmp_path / "fits.json"
        f.write_text(json.dumps(bad), encoding="utf-8")
        msg = _outcome(iso.load_fits, f)
        _check_refused(msg, where, what="file damage")
        assert msg.startswith(f"{f}: "), msg
        msg = _outcome(iso.load_fits, bad)  # the parsed content: the same key path
        _check_refused(msg, where, what="dict damage")
    wrong = tmp_path / "other.json"
    wrong.write_text("[1, 2]", encoding="utf-8")
    with pytest.raises(DataError, match=r"other\.json: not a fits\.json written by isoturnover"):
        iso.load_fits(wrong)
    with pytest.raises(DataError, match=r"cannot read .*missing\.json"):
        iso.load_fits(tmp_path / "missing.json")
    (tmp_path / "binary.json").write_bytes(b'{"format": "\xff\xfe"}')
    with pytest.raises(DataError, match=r"binary\.json is not UTF-8 text \(byte 12"):
        iso.load_fits(tmp_path / "binary.json")
    with pytest.raises(DataError, match=r"'path_or_dict' must be the path of a fits\.json"):
        iso.load_fits(42)


def test_truncated_file_names_file_line_and_column(written, tmp_path):
    path, _ = written
    text = path.read_text(encoding="utf-8")
    rng = np.random.default_rng(SEED + 1)
    offsets = sorted({0, 1, 2, len(text) - 1, *rng.integers(1, len(text), 150).tolist()})
    f = tmp_path / "fits.json"
    for n in offsets:
        f.write_text(text[:n], encoding="utf-8")
        msg = _outcome(iso.load_fits, f)
        assert msg is not None and msg.startswith(f"{f} is not valid JSON text ("), (n, msg)
        assert ("it is empty" if n == 0 else "line 1, column ") in msg, (n, msg)
    # one record's JSON text, truncated (json.dumps with indent: lines and columns)
    one = json.dumps(json.loads(text)["fits"][0]["fit"], indent=1)
    for n in rng.integers(1, len(one), 40).tolist():
        msg = _outcome(iso.load_fit, one[:n])
        assert msg is not None and msg.startswith("'d' is not valid JSON text (line "), msg
        line = one[:n].count("\n") + 1
        assert f"(line {line}, column " in msg or f"(line {line + 1}, column " in msg, msg


def test_deep_nesting_is_refused_before_parsing(written, tmp_path):
    path, _ = written
    text = path.read_text(encoding="utf-8")
    rng = np.random.default_rng(SEED + 2)
    f = tmp_path / "fits.json"
    deep = "[" * 100_000 + "1" + "]" * 100_000
    # in place of a value of the file, at random positions of '"t": ' / '"theta": ' / ...
    keys = ['"t": ', '"theta": ', '"fixed": ', '"info": ', '"fits": ', '"curve": ']
    for key in keys:
        starts = [m.end() for m in re.finditer(re.escape(key), text)]
        i = int(rng.choice(starts))
        f.write_text(text[:i] + deep + ", " + text[i:] if key != '"fits": ' else
                     text[:i] + deep + "}", encoding="utf-8")
        msg = _outcome(iso.load_fits, f)
        assert msg is not None and msg.startswith(f"{f} is not a saved fit"), msg
        # the depth counted: 100 000 brackets plus those around the place of the value
        depth = int(re.search(r"nest (\d+) deep", msg).group(1))
        assert 100_001 <= depth <= 100_010 and f"more than the {MAX_DEPTH}" in msg, msg
    # unbalanced (a truncated deep file) and as a single record's text
    f.write_text('{"format": "isoturnover-fits", "fits": ' + "[" * 50_000, encoding="utf-8")
    assert "nest 50001 deep" in _outcome(iso.load_fits, f)
    assert "'d' is not a saved fit" in _outcome(iso.load_fit, "{" + '"a":{' * 5000)
    # a string holding brackets does not count
    ok = json.loads(text)
    ok["fits"][0]["fit"]["options"]["label"] = "[" * 500
    f.write_text(json.dumps(ok), encoding="utf-8")
    assert iso.load_fits(f)[0]["fit"].label == "[" * 500


def test_deeply_nested_objects_in_a_parsed_record_are_refused(written, library_records):
    rec = next(iter(_records(written, library_records).values()))
    nested = 1.0
    for _ in range(100_000):  # built without recursion; no check may recurse into it
        nested = [nested]
    for pt in [("data", "t"), ("data", "y", 0), ("options", "fixed"), ("data", "info", "x"),
               ("model", "diet", "changes", 0), ("solution", "jac_z", 0)]:
        bad = copy.deepcopy(rec)
        parent = _get(bad, pt[:-1])
        parent[pt[-1]] = nested
        msg = _outcome(iso.load_fit, bad)
        assert msg is not None and _name("d", pt) in msg, (pt, msg)


def test_parameter_names_and_data_fingerprint_when_the_record_carries_them(library_records):
    f = library_records["ties, bounds"]
    d = f.to_dict()
    d["solution"]["param_names"] = list(f.kinetics.param_names)
    d["data"]["fingerprint"] = f.data_fingerprint
    back = iso.load_fit(d)
    # the original fit's own predictions are the reference
    np.testing.assert_allclose(back.predict(GRID), f.predict(GRID), rtol=0, atol=1e-12)
    names = _changed(d, ("solution", "param_names", 0), lambda v: "delta_zero")
    with pytest.raises(DataError, match=r"d\.solution\.param_names: \['delta_zero', .* are not "
                                        r"the parameters of the model described"):
        iso.load_fit(names)
    # a value edited after saving: θ still agrees with z, the fingerprint does not
    edited = _changed(d, ("data", "y", 4), lambda v: v + 0.5)
    with pytest.raises(DataError, match=r"d\.data: the data do not match d\.data\.fingerprint"):
        iso.load_fit(edited)
    with pytest.raises(DataError, match=r"d\.data\.fingerprint: not a string"):
        iso.load_fit(_changed(d, ("data", "fingerprint"), lambda v: 12345))
