"""Saving and loading fits: :func:`load_fit` rebuilds a fit from
:meth:`TurnoverFit.to_dict <isoturnover.TurnoverFit.to_dict>` (or its JSON text).

A saved record may have been truncated, edited by hand or damaged. Before anything is rebuilt,
the record is checked against what ``to_dict`` writes (format version 1): every section and
key, the type of every value, numbers finite where the writer writes finite numbers, array
lengths consistent with each other and with the model's parameters, the natural parameters
consistent with the optimizer's coordinates (and, in records that carry them, the parameter
names and the data's fingerprint). A record that fails raises
:class:`~isoturnover.errors.DataError` naming the key path (``d.solution.theta[1] (k1): not
a finite number (got nan)``) and the file it was read from. JSON text is checked for its
nesting depth (:data:`MAX_DEPTH`) before it is parsed, so a deeply nested file cannot exhaust
the parser's recursion; a file that is not valid JSON (truncated, for instance) is named with
the line and column of the first error.
"""

from __future__ import annotations

import itertools
import json
import math
import os
import re

import numpy as np

from .diet import DietHistory
from .engine import LOSSES, Engine, FitState, Solution, Ties, prepare_data
from .errors import DataError, FitError
from .growthfit import load_growth
from .growthlaws import check_curve_values, curve_law
from .model import RECORDS, TurnoverModel
from .results import TurnoverFit
from .segments import (
    ORIGINS,
    SegmentKinetics,
    check_length_unit,
    formation_intervals,
    growth_schedule,
)

__all__ = ["load_fit", "parse_json", "read_json", "MAX_DEPTH", "FORMAT_VERSION"]

#: Deepest nesting of arrays and objects accepted in JSON text (a saved fits file nests
#: about 8 deep; the parser's recursion limit is about 1000).
MAX_DEPTH = 64

#: The record format version this module reads (``version`` of ``TurnoverFit.to_dict``).
FORMAT_VERSION = 1

# Options of a segment fit (record="segments"), written only by such fits.
_SEGMENT_KEYS = ("record", "growth_rate", "formation_lag", "origin", "tissue_length",
                 "length_unit")
# The model's options as TurnoverModel.config() writes them (the constructor's arguments).
_MODEL_KEYS = tuple(TurnoverModel().config()) + _SEGMENT_KEYS
# Options that records written before they existed lack (the default is what those fits used).
_MODEL_OPTIONAL = ("propagate_growth",) + _SEGMENT_KEYS

# A JSON string (closed, or running to the end of a truncated text: the match never fails
# once started, so the scan stays linear) and anything that is not a bracket.
_JSON_STRING = re.compile(r'"(?:[^"\\]|\\.)*(?:"|\\?\Z)', re.S)
_NOT_BRACKET = re.compile(r"[^\[\]{}]+")


def _nesting_depth(text: str) -> int:
    """The deepest nesting of ``[`` and ``{`` in JSON text, outside strings (linear time)."""
    brackets = _NOT_BRACKET.sub("", _JSON_STRING.sub("", text))
    if not brackets:
        return 0
    b = np.frombuffer(brackets.encode("ascii"), dtype=np.uint8)
    step = np.where((b == ord("[")) | (b == ord("{")), 1, -1)
    return int(np.cumsum(step).max())


def parse_json(text, *, name: str = "d", source=None):
    """Parse JSON text after checking its nesting depth.

    Parameters
    ----------
    text : str or bytes
        JSON text (bytes are read as UTF-8).
    name : str, default "d"
        How the text is named in messages (an argument's name).
    source : str or path-like, optional
        The file the text was read from, named in messages instead of ``name``.

    Returns
    -------
    object
        The parsed value (``NaN`` and ``Infinity`` are read as floats, as
        :func:`json.loads` reads them; the record checks refuse them where a finite number
        is needed).

    Raises
    ------
    DataError
        When the text is not UTF-8, nests deeper than :data:`MAX_DEPTH`, or is not valid
        JSON (with the line and column of the first error, e.g. of a truncated file).
    """
    what = f"{os.fspath(source)}" if source is not None else f"{name!r}"
    hint = ("; load_fit needs the dict made by TurnoverFit.to_dict() or its JSON text"
            if source is None else "; the file may be truncated or edited")
    if isinstance(text, (bytes, bytearray)):
        try:
            text = bytes(text).decode("utf-8")
        except UnicodeDecodeError as e:
            raise DataError(f"{what} is not UTF-8 text (byte {e.start} cannot be read)"
                            f"{hint}") from None
    if not text.strip():
        raise DataError(f"{what} is not valid JSON text (it is empty){hint}")
    depth = _nesting_depth(text)
    if depth > MAX_DEPTH:
        raise DataError(f"{what} is not a saved fit: its arrays and objects nest {depth} "
                        f"deep, more than the {MAX_DEPTH} any isoturnover record needs{hint}")
    try:
        return json.loads(text)
    except json.JSONDecodeError as e:
        raise DataError(f"{what} is not valid JSON text (line {e.lineno}, column {e.colno}: "
                        f"{e.msg}){hint}") from None
    except (ValueError, RecursionError) as e:  # e.g. an integer with too many digits
        raise DataError(f"{what} is not valid JSON text ({e}){hint}") from None


def read_json(path):
    """Read a JSON file after checking its nesting depth.

    Parameters
    ----------
    path : str or path-like
        The file (UTF-8 JSON).

    Returns
    -------
    object
        The parsed value.

    Raises
    ------
    DataError
        When the file cannot be read, is not UTF-8, nests deeper than :data:`MAX_DEPTH` or
        is not valid JSON, naming the file (and the line and column of a JSON error).
    """
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as e:
        raise DataError(f"cannot read {os.fspath(path)}: {e.strerror or e}") from None
    return parse_json(raw, source=path)


def _show(v) -> str:
    """A short description of a value for messages: its repr (cut) and type."""
    if isinstance(v, (list, tuple)):  # no repr: a damaged record may nest very deeply
        return f"an array of {len(v)} item{'s' if len(v) != 1 else ''}"
    if isinstance(v, dict):
        return f"an object with {len(v)} key{'s' if len(v) != 1 else ''}"
    r = repr(v)
    if len(r) > 40:
        r = r[:37] + "..."
    return f"{r} ({type(v).__name__})"


_NUMBER_TYPES = (int, float, np.integer, np.floating)


def _is_number(v) -> bool:
    return isinstance(v, _NUMBER_TYPES) and not isinstance(v, (bool, np.bool_))


class _Checker:
    """Checks the values of one record; every message names the key path and the file."""

    def __init__(self, name: str, source):
        self.name = name
        self.source = None if source is None else os.fspath(source)

    def _head(self, complete: bool) -> str:
        if self.source is not None:
            return self.source
        return f"{self.name!r} is not a {'complete' if complete else 'valid'} fit record"

    def fail(self, path: str, problem: str, complete: bool = False):
        raise DataError(f"{self._head(complete)}: {path}: {problem}")

    def section(self, d: dict, key: str, path: str) -> dict:
        part = d.get(key)
        if not isinstance(part, dict):
            raise DataError(f"{self._head(True)}: section {key!r} is missing or not a dict "
                            f"(got {type(part).__name__}) ({path}.{key})")
        return part

    def require(self, d: dict, key: str, path: str, section: str):
        if key not in d:
            self.fail(f"{path}.{key}", f"missing (section {section!r} lacks {key!r})",
                      complete=True)
        return d[key]

    # -- scalars --------------------------------------------------------------------------
    def number(self, v, path, *, none=False, positive=False, integer=False, minimum=None):
        if v is None and none:
            return None
        if integer:
            if not isinstance(v, (int, np.integer)) or isinstance(v, (bool, np.bool_)):
                self.fail(path, f"not an integer (got {_show(v)})")
            v = int(v)
        else:
            if not _is_number(v):
                self.fail(path, f"not a{' finite' if not none else ''} number"
                          f"{' or null' if none else ''} (got {_show(v)})")
            try:
                v = float(v)
            except OverflowError:
                self.fail(path, f"not a finite number (got {_show(v)})")
            if not math.isfinite(v):
                self.fail(path, f"not a finite number (got {v!r})")
        if positive and not v > 0:
            self.fail(path, f"must be > 0 (got {v!r})")
        if minimum is not None and v < minimum:
            self.fail(path, f"must be >= {minimum} (got {v!r})")
        return v

    def text(self, v, path, *, none=False, choices=None):
        if v is None and none:
            return None
        if not isinstance(v, str):
            self.fail(path, f"not a string{' or null' if none else ''} (got {_show(v)})")
        if choices is not None and v not in choices:
            self.fail(path, f"must be one of {', '.join(map(repr, choices))} (got {v!r})")
        return v

    def flag(self, v, path):
        if not isinstance(v, (bool, np.bool_)):
            self.fail(path, f"not true or false (got {_show(v)})")
        return bool(v)

    def mapping(self, v, path, *, none=False) -> dict | None:
        if v is None and none:
            return None
        if not isinstance(v, dict):
            self.fail(path, f"not an object (dict){' or null' if none else ''} "
                            f"(got {_show(v)})")
        for k in v:
            if not isinstance(k, str):
                self.fail(path, f"has a key that is not a string ({_show(k)})")
        return v

    def array(self, v, path, *, none=False) -> list | None:
        if v is None and none:
            return None
        if not isinstance(v, (list, tuple)):
            self.fail(path, f"not an array{' or null' if none else ''} (got {_show(v)})")
        return v

    # -- arrays of numbers --------------------------------------------------------------
    def numbers(self, v, path, *, none=False, n=None, n_of=None, positive=False,
                names=None, min_size=0) -> np.ndarray | None:
        """A list of finite numbers as a float array (``n``: required length)."""
        if v is None and none:
            return None
        self.array(v, path)
        if not set(map(type, v)) <= {int, float}:
            for i, x in enumerate(v):
                if not _is_number(x):
                    self.fail(self._item(path, i, names), f"not a number (got {_show(x)})")
        try:
            a = np.array(v, dtype=float)
        except OverflowError:
            i = next(i for i, x in enumerate(v) if abs(x) > 1e308)
            self.fail(self._item(path, i, names), f"not a finite number (got {_show(v[i])})")
        bad = np.flatnonzero(~np.isfinite(a))
        if bad.size:
            i = int(bad[0])
            self.fail(self._item(path, i, names), f"not a finite number (got {v[i]!r})")
        if positive and np.any(a <= 0):
            i = int(np.argmax(a <= 0))
            self.fail(self._item(path, i, names), f"must be > 0 (got {v[i]!r})")
        if n is not None and a.size != n:
            self.fail(path, f"has {a.size} values, but {n_of} has {n}" if n_of else
                      f"has {a.size} values; {n} are needed")
        if a.size < min_size:
            self.fail(path, f"has {a.size} values; at least {min_size} are needed")
        return a

    @staticmethod
    def _item(path, i, names=None):
        if names is not None and i < len(names):
            return f"{path}[{i}] ({names[i]})"
        return f"{path}[{i}]"

    def names(self, d, path, known, what):
        for k in d:
            if k not in known:
                self.fail(f"{path}.{k}", f"not a parameter of this model ({what}; the model's "
                                         f"parameters are {', '.join(known)})")

    def json_value(self, v, path, depth=0):
        """Descriptive content: JSON scalars, arrays and objects, at most 4 deep."""
        if v is None or isinstance(v, (str, bool)) or _is_number(v):
            return
        if depth >= 4:
            self.fail(path, "nests deeper than a record's descriptive fields do")
        if isinstance(v, (list, tuple)):
            for i, x in enumerate(v):
                self.json_value(x, f"{path}[{i}]", depth + 1)
        elif isinstance(v, dict):
            self.mapping(v, path)
            for k, x in v.items():
                self.json_value(x, f"{path}.{k}", depth + 1)
        else:
            self.fail(path, f"not a JSON value (got {_show(v)})")

    def rebuilt(self, path, e):
        """Re-raise an error of a constructor (DataError, FitError) with the key path."""
        raise DataError(f"{self._head(False)}: {path}: {e}") from None


# -- the sections -------------------------------------------------------------------------
def _check_diet(c: _Checker, v, path) -> DietHistory | None:
    if v is None:
        return None
    c.mapping(v, path)
    for key in ("initial", "changes"):
        c.require(v, key, path, "diet")
    c.number(v["initial"], f"{path}.initial", none=True)
    changes = c.array(v["changes"], f"{path}.changes")
    for i, ch in enumerate(changes):
        p = f"{path}.changes[{i}]"
        if not isinstance(ch, (list, tuple)) or len(ch) != 2:
            c.fail(p, f"not a [time, value] pair (got {_show(ch)})")
        c.number(ch[0], f"{p}[0] (time)")
        c.number(ch[1], f"{p}[1] (value)", none=True)
    c.number(v.get("start"), f"{path}.start", none=True)
    c.number(v.get("previous"), f"{path}.previous", none=True)
    c.text(v.get("isotope"), f"{path}.isotope", none=True)
    c.text(v.get("label"), f"{path}.label", none=True)
    try:
        return DietHistory.from_dict(v)
    except DataError as e:
        c.rebuilt(path, e)


def _check_growth_record(c: _Checker, g, path):
    """The growth curve stored with a model: ``{"curve": GrowthFit/GrowthCurve record}``."""
    if g is None or isinstance(g, str):
        return g
    c.mapping(g, path)
    rec = c.mapping(c.require(g, "curve", path, "growth"), f"{path}.curve")
    path = f"{path}.curve"
    kind = c.text(c.require(rec, "type", path, "curve"), f"{path}.type",
                  choices=("GrowthFit", "GrowthCurve"))
    if "version" in rec and c.number(rec["version"], f"{path}.version", integer=True) != 1:
        c.fail(f"{path}.version", f"record version {rec['version']} is not read by this "
                                  "isoturnover (it reads version 1)")
    c.text(c.require(rec, "curve", path, "curve"), f"{path}.curve")
    if kind == "GrowthCurve":
        params = c.mapping(c.require(rec, "params", path, "curve"), f"{path}.params")
        for k, x in params.items():
            c.number(x, f"{path}.params.{k}")
    else:
        for key in ("scale", "param_names", "values", "vary", "t", "mass", "converged"):
            c.require(rec, key, path, "curve")
        c.text(rec["scale"], f"{path}.scale")
        names = c.array(rec["param_names"], f"{path}.param_names")
        for i, x in enumerate(names):
            c.text(x, f"{path}.param_names[{i}]")
        n = len(names)
        c.numbers(rec["values"], f"{path}.values", n=n, n_of=f"{path}.param_names",
                  names=names)
        vary = c.array(rec["vary"], f"{path}.vary")
        for i, x in enumerate(vary):
            c.flag(x, f"{path}.vary[{i}]")
        if len(vary) != n:
            c.fail(f"{path}.vary", f"has {len(vary)} values, but {path}.param_names has {n}")
        t = c.numbers(rec["t"], f"{path}.t", min_size=1)
        c.numbers(rec["mass"], f"{path}.mass", n=t.size, n_of=f"{path}.t", positive=True)
        c.numbers(rec.get("sigma"), f"{path}.sigma", none=True, n=t.size, n_of=f"{path}.t",
                  positive=True)
        c.flag(rec["converged"], f"{path}.converged")
        warn = c.array(rec.get("warnings", []), f"{path}.warnings")
        for i, x in enumerate(warn):
            c.text(x, f"{path}.warnings[{i}]")
        c.number(rec.get("nfev", 0), f"{path}.nfev", integer=True, minimum=0)
        c.number(rec.get("rss"), f"{path}.rss", none=True, minimum=0)
        if rec.get("stderr") is not None:
            se = c.array(rec["stderr"], f"{path}.stderr")
            for i, x in enumerate(se):
                c.number(x, f"{path}.stderr[{i}]", none=True, minimum=0)
    try:
        law = curve_law(rec["curve"])
        values = rec["params"] if kind == "GrowthCurve" else dict(
            zip(rec["param_names"], rec["values"], strict=True))
        where = f"{path}.{'params' if kind == 'GrowthCurve' else 'values'}"
        check_curve_values(law, values, where)
        return {"curve": load_growth(rec)}
    except DataError as e:
        c.rebuilt(path, e)
    except (ValueError, ArithmeticError) as e:  # values a curve cannot take
        c.rebuilt(path, f"the curve cannot be rebuilt from these values ({e})")


def _check_model(c: _Checker, m: dict, path: str) -> TurnoverModel:
    for k in m:
        if k not in _MODEL_KEYS:
            c.fail(f"{path}.{k}", f"not an option of TurnoverModel (known: "
                                  f"{', '.join(_MODEL_KEYS)})")
    for k in _MODEL_KEYS:
        if k not in _MODEL_OPTIONAL:
            c.require(m, k, path, "model")
    cfg = dict(m)
    if "pools" in m:
        c.number(m["pools"], f"{path}.pools", integer=True)
    for key in ("structure", "separation", "scale", "initial"):
        if key in m:
            c.text(m[key], f"{path}.{key}")
    if "isotope" in m:
        c.text(m["isotope"], f"{path}.isotope", none=True)
    for key in ("lag", "per_diet_separation", "propagate_growth"):
        if key in m:
            c.flag(m[key], f"{path}.{key}")
    if "growth" in m:
        g = _check_growth_record(c, m["growth"], f"{path}.growth")
        cfg["growth"] = g["curve"] if isinstance(g, dict) else g
    if "diet" in m:
        cfg["diet"] = _check_diet(c, m["diet"], f"{path}.diet")
    if "record" in m:
        _check_segment_options(c, m, path)
    try:
        model = TurnoverModel(**cfg)
        model.kinetics  # noqa: B018 -- builds the kinetics, which checks the options
    except (DataError, FitError) as e:
        c.rebuilt(path, e)
    return model


def _check_segment_options(c: _Checker, m: dict, path: str) -> None:
    """The options of a segment fit: record, growth rate (a number or (time, rate) rows),
    formation lag (≥ 0), origin, tissue length (numbers or null), length unit (a short
    label; "mm" in records written before it was stored)."""
    if c.text(m["record"], f"{path}.record", choices=RECORDS) != "segments":
        return
    for key in ("growth_rate", "formation_lag", "origin"):
        c.require(m, key, path, "model")
    gr = m["growth_rate"]
    if isinstance(gr, (list, tuple)):
        for i, row in enumerate(c.array(gr, f"{path}.growth_rate")):
            c.numbers(row, f"{path}.growth_rate[{i}]", n=2)
    else:
        c.number(gr, f"{path}.growth_rate", positive=True)
    try:
        growth_schedule(gr, f"{path}.growth_rate")
    except DataError as e:
        c.rebuilt(f"{path}.growth_rate", e)
    c.number(m["formation_lag"], f"{path}.formation_lag", minimum=0.0)
    c.text(m["origin"], f"{path}.origin", choices=ORIGINS)
    tl = m.get("tissue_length")
    if isinstance(tl, (list, tuple)):
        c.numbers(tl, f"{path}.tissue_length", positive=True)
    else:
        c.number(tl, f"{path}.tissue_length", none=True, positive=True)
    if "length_unit" in m:
        try:
            check_length_unit(c.text(m["length_unit"], f"{path}.length_unit"))
        except DataError as e:
            c.rebuilt(f"{path}.length_unit", e)


def _segment_kinetics(c: _Checker, model, dd: dict, data_t, path: str):
    """The :class:`~isoturnover.segments.SegmentKinetics` of a segment fit, rebuilt from
    ``data.segments`` (formation intervals; segment ends and sampling times when stored,
    which must give the same intervals with the model's growth rate, lag and origin)."""
    seg = c.mapping(c.require(dd, "segments", path, "data"), f"{path}.segments")
    p = f"{path}.segments"
    for key in ("formation_start", "formation_end"):
        c.require(seg, key, p, "data.segments")
    t1 = c.numbers(seg["formation_start"], f"{p}.formation_start", min_size=1)
    t2 = c.numbers(seg["formation_end"], f"{p}.formation_end", n=t1.size,
                   n_of=f"{p}.formation_start")
    try:
        kin = SegmentKinetics(model.kinetics, t1, t2)
    except DataError as e:
        c.rebuilt(p, e)
    off = np.flatnonzero(~np.isin(data_t, kin.midpoints))
    if off.size:
        i = int(off[0])
        c.fail(f"{path}.t[{i}]", f"{data_t[i]!r} is not the formation midpoint of a segment "
                                 f"in {p}")
    if all(seg.get(k) is not None for k in ("sample_time", "segment_start", "segment_end")):
        a = c.numbers(seg["segment_start"], f"{p}.segment_start", min_size=1)
        b = c.numbers(seg["segment_end"], f"{p}.segment_end", n=a.size,
                      n_of=f"{p}.segment_start")
        ts = c.numbers(seg["sample_time"], f"{p}.sample_time", n=a.size,
                       n_of=f"{p}.segment_start")
        try:
            u1, u2 = formation_intervals(a, b, ts, model.growth_rate,
                                         formation_lag=model.formation_lag,
                                         origin=model.origin,
                                         tissue_length=model.tissue_length)
        except DataError as e:
            c.rebuilt(p, e)
        mid = (u1 + u2) / 2.0
        # the stored points are the segments' formation midpoints, time-ordered
        if mid.size != data_t.size or not np.allclose(np.sort(mid), np.sort(data_t),
                                                      rtol=1e-12, atol=1e-9):
            c.fail(p, "the segment ends, sampling times, growth rate, lag and origin do not "
                      f"give the fitted formation midpoints {path}.t: edited after saving?")
    return kin


def _check_options(c: _Checker, o: dict, path: str, names: tuple) -> dict:
    for key in ("absolute_sigma", "loss", "f_scale", "fixed", "init", "label"):
        c.require(o, key, path, "options")
    c.flag(o["absolute_sigma"], f"{path}.absolute_sigma")
    c.text(o["loss"], f"{path}.loss", choices=LOSSES)
    c.number(o["f_scale"], f"{path}.f_scale", positive=True)
    c.text(o["label"], f"{path}.label", none=True)
    for key in ("fixed", "init"):
        d = c.mapping(o[key], f"{path}.{key}")
        c.names(d, f"{path}.{key}", names, f"{key} values")
        for k, x in d.items():
            c.number(x, f"{path}.{key}.{k}")
    tied = c.mapping(o.get("tied"), f"{path}.tied", none=True) or {}
    c.names(tied, f"{path}.tied", names, "tied by an expression")
    for k, x in tied.items():
        c.text(x, f"{path}.tied.{k}")
    bounds = c.mapping(o.get("bounds"), f"{path}.bounds", none=True) or {}
    c.names(bounds, f"{path}.bounds", names, "bounds")
    out = {}
    for k, ab in bounds.items():
        p = f"{path}.bounds.{k}"
        if not isinstance(ab, (list, tuple)) or len(ab) != 2:
            c.fail(p, f"not a [lower, upper] pair (got {_show(ab)})")
        lo = c.number(ab[0], f"{p}[0] (lower)", none=True)
        hi = c.number(ab[1], f"{p}[1] (upper)", none=True)
        lo = -math.inf if lo is None else lo
        hi = math.inf if hi is None else hi
        if not lo < hi:
            c.fail(p, f"the lower bound must be below the upper (got [{lo!r}, {hi!r}])")
        out[k] = (lo, hi)
    return {"tied": tied, "bounds": out}


def _check_data(c: _Checker, dd: dict, path: str) -> dict:
    for key in ("t", "y", "sigma", "time_unit"):
        c.require(dd, key, path, "data")
    t = c.numbers(dd["t"], f"{path}.t", min_size=1)
    y = c.numbers(dd["y"], f"{path}.y", n=t.size, n_of=f"{path}.t")
    sigma = c.numbers(dd["sigma"], f"{path}.sigma", none=True, n=t.size, n_of=f"{path}.t",
                      positive=True)
    c.text(dd["time_unit"], f"{path}.time_unit")
    info = c.mapping(dd.get("info"), f"{path}.info", none=True) or {}
    c.json_value(info, f"{path}.info")
    for key in ("source", "design", "tissue", "isotope"):
        if info.get(key) is not None:
            c.text(info[key], f"{path}.info.{key}")
    masses = dd.get("masses")
    if masses is not None:
        p = f"{path}.masses"
        if not isinstance(masses, (list, tuple)) or len(masses) != 2:
            c.fail(p, f"not a [times, masses] pair (got {_show(masses)})")
        tm = c.numbers(masses[0], f"{p}[0]")
        wm = c.numbers(masses[1], f"{p}[1]", n=tm.size, n_of=f"{p}[0]", positive=True)
        masses = (tm, wm)
    bs = dd.get("block_scale")
    if bs is not None:
        bs = c.numbers(bs, f"{path}.block_scale", n=2, positive=True)
    try:
        data = prepare_data(t, y, sigma, dd["time_unit"], warn_repeats=False)
    except DataError as e:
        c.rebuilt(path, e)
    data["info"].update(info)
    return {"data": data, "masses": masses, "block_scale": bs}


def _check_solution(c: _Checker, s: dict, path: str, names: tuple):
    for key in ("z", "theta", "status", "nfev", "message", "success", "jac_z",
                "starts_tried"):
        c.require(s, key, path, "solution")
    z = c.numbers(s["z"], f"{path}.z")
    theta = c.numbers(s["theta"], f"{path}.theta", names=names)
    if theta.size != len(names):
        c.fail(f"{path}.theta", f"has {theta.size} values, but the model has {len(names)} "
                                f"parameters ({', '.join(names)})")
    c.number(s["status"], f"{path}.status", integer=True)
    c.number(s["nfev"], f"{path}.nfev", integer=True, minimum=0)
    c.text(s["message"], f"{path}.message")
    c.flag(s["success"], f"{path}.success")
    c.number(s["starts_tried"], f"{path}.starts_tried", integer=True, minimum=0)
    coords = c.mapping(s.get("coords"), f"{path}.coords", none=True) or {}
    for key in ("rate_anchor", "fraction_anchor"):
        a = c.number(coords.get(key), f"{path}.coords.{key}", none=True, integer=True,
                     minimum=0)
        if a is not None and a >= len(names):
            c.fail(f"{path}.coords.{key}", f"must be below {len(names)} (got {a})")
    if "param_names" in s:  # written by later releases: the names θ is stored in
        pn = c.array(s["param_names"], f"{path}.param_names")
        for i, x in enumerate(pn):
            c.text(x, f"{path}.param_names[{i}]")
        if list(pn) != list(names):
            c.fail(f"{path}.param_names", f"{list(pn)!r:.200} are not the parameters of the "
                                          f"model described in the record ({', '.join(names)})")
    jac = s["jac_z"]
    if jac is not None:
        rows = c.array(jac, f"{path}.jac_z")
        if not rows:
            c.fail(f"{path}.jac_z", "has no rows")
        jac = None
        if set(map(type, rows)) == {list} and set(map(len, rows)) == {z.size} and \
                set(map(type, itertools.chain.from_iterable(rows))) <= {int, float}:
            try:
                jac = np.array(rows, dtype=float).reshape(len(rows), z.size)
            except OverflowError:  # an integer beyond the floats: named below
                jac = None
        if jac is None or not np.all(np.isfinite(jac)):  # find the item to name
            for i, row in enumerate(rows):
                c.numbers(row, f"{path}.jac_z[{i}]", n=z.size, n_of=f"{path}.z")
            jac = np.array(rows, dtype=float).reshape(len(rows), z.size)
    return z, theta, jac


def _check_derived(c: _Checker, v, path):
    d = c.mapping(v, path, none=True) or {}
    for k, x in d.items():
        c.number(x, f"{path}.{k}", none=True)


def _check_record(d, *, name: str = "d", source=None) -> dict:
    """The record as a dict (parsed from JSON text if need be) with its format checked."""
    c = _Checker(name, source)
    if isinstance(d, (str, bytes, bytearray)):
        d = parse_json(d, name=name, source=source)
    if not isinstance(d, dict) or d.get("format") != "isoturnover-fit":
        got = f"a dict with format={d.get('format')!r}" if isinstance(d, dict) else \
            type(d).__name__
        where = f"{c.source}: {name}" if c.source is not None else repr(name)
        raise DataError("load_fit needs a dict made by TurnoverFit.to_dict() "
                        f"(key 'format' = 'isoturnover-fit'); {where} is {got}")
    for section in ("model", "data", "options", "solution"):
        c.section(d, section, name)
    v = c.number(c.require(d, "version", name, "record"), f"{name}.version", integer=True)
    if v != FORMAT_VERSION:
        c.fail(f"{name}.version", f"format version {v} is not read by this isoturnover "
                                  f"(it reads version {FORMAT_VERSION})")
    return d


def load_fit(d, *, name: str = "d", source=None) -> TurnoverFit:
    """Rebuild a fit from :meth:`TurnoverFit.to_dict` (or its JSON text).

    The record is checked first against what ``to_dict`` writes (every key, type, finite
    value, array length, the parameters against the coordinates; see the module's notes),
    then the model is rebuilt from its configuration, the data and options from the record,
    and the optimizer's solution is taken as stored (no refit), so the rebuilt fit predicts,
    tabulates and summarises exactly as the original.

    Parameters
    ----------
    d : dict or str
        The dict made by :meth:`TurnoverFit.to_dict <isoturnover.TurnoverFit.to_dict>`
        (``format = "isoturnover-fit"``), or its JSON text (:meth:`TurnoverFit.to_json`).
        Not modified.
    name : str, default "d"
        The record's name in messages, the start of every key path (a larger file gives
        its position, e.g. ``"fits[3].fit"``).
    source : str or path-like, optional
        The file the record was read from, named in messages.

    Returns
    -------
    TurnoverFit
        The rebuilt fit.

    Raises
    ------
    DataError
        When ``d`` is not valid JSON (line and column of the error), nests deeper than
        :data:`MAX_DEPTH`, is not such a record, lacks a section or key, or holds a value
        of the wrong type, a non-finite number where the writer writes finite ones, arrays
        of inconsistent lengths, parameters that disagree with the stored coordinates, or
        (when the record carries them) parameter names other than the model's
        (``solution.param_names``) or data other than those fingerprinted
        (``data.fingerprint``, :attr:`~isoturnover.TurnoverFit.data_fingerprint`); the
        message names the key path, e.g. ``d.solution.theta[1] (k1)``.
    """
    d = _check_record(d, name=name, source=source)
    c = _Checker(name, source)
    model = _check_model(c, d["model"], f"{name}.model")
    kin = model.kinetics
    names = tuple(kin.param_names)
    opt = d["options"]
    extra = _check_options(c, opt, f"{name}.options", names)
    dd = _check_data(c, d["data"], f"{name}.data")
    if getattr(model, "record", "points") == "segments":
        kin = _segment_kinetics(c, model, d["data"], dd["data"]["t"], f"{name}.data")
    z, theta, jac = _check_solution(c, d["solution"], f"{name}.solution", names)
    _check_derived(c, d.get("derived"), f"{name}.derived")
    tied = extra["tied"]
    try:
        engine = Engine(kin, dd["data"], absolute_sigma=opt["absolute_sigma"],
                        loss=opt["loss"], ties=Ties(kin, tied) if tied else None,
                        bounds=extra["bounds"], masses=dd["masses"])
    except (DataError, FitError) as e:
        c.rebuilt(f"{name}.options" if tied else f"{name}.data", e)
    if dd["block_scale"] is not None:
        if engine.mass_block is None:
            c.fail(f"{name}.data.block_scale", "given, but the fit has no body-mass or "
                                              "growth-curve block to scale")
        engine.set_block_scale(*dd["block_scale"])
    elif engine.mass_block is not None:
        c.fail(f"{name}.data.block_scale", "missing: a joint fit of the δ values with body "
                                          "masses or a growth curve needs the two blocks' "
                                          "scales [s_delta, s_mass]")
    engine.f_scale = float(opt["f_scale"])
    try:
        coords = engine.coords(dict(opt["fixed"]), rate_anchor=None, fraction_anchor=None)
    except (DataError, FitError) as e:
        c.rebuilt(f"{name}.options.fixed", e)
    sp = f"{name}.solution"
    if z.size != coords.size:
        c.fail(f"{sp}.z", f"has {z.size} values, but this model with its fixed and tied "
                          f"values ({name}.options.fixed, {name}.options.tied) has "
                          f"{coords.size} free coordinates")
    with np.errstate(all="ignore"):
        th_z = np.asarray(coords.theta(z), dtype=float)
    off = np.flatnonzero(~(np.abs(th_z - theta) <= 1e-9 * (1.0 + np.abs(theta))))
    if off.size:
        i = int(off[0])
        c.fail(f"{sp}.theta[{i}] ({names[i]})", f"{theta[i]!r} disagrees with the value "
                                               f"{th_z[i]!r} of the stored coordinates {sp}.z")
    n_res = dd["data"]["t"].size + (0 if engine.mass_block is None else
                                    int(engine.mass_block.size))
    if jac is not None and jac.shape[0] != n_res:
        c.fail(f"{sp}.jac_z", f"has {jac.shape[0]} rows, but the fit has {n_res} residuals "
                              f"(one a row)")
    s = d["solution"]
    sol = Solution(z, theta, math.nan, int(s["status"]), int(s["nfev"]), s["message"],
                   bool(s["success"]), jac)
    sol.extra["coords"] = coords
    state = FitState(engine, sol, fixed=dict(opt["fixed"]))
    fit = TurnoverFit(model, state, init=dict(opt["init"]), starts_tried=int(s["starts_tried"]),
                      label=opt["label"])
    stored = d["data"].get("fingerprint")
    if stored is not None and stored != fit.data_fingerprint:
        c.text(stored, f"{name}.data.fingerprint")
        c.fail(f"{name}.data", f"the data do not match {name}.data.fingerprint (the SHA-1 of "
                               "times, values, weights and masses written with the fit): "
                               "edited after saving?")
    return fit
