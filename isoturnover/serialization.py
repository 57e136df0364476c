"""Saving and loading fits: :func:`load_fit` rebuilds a fit from
:meth:`TurnoverFit.to_dict <isoturnover.TurnoverFit.to_dict>` (or its JSON text)."""

from __future__ import annotations

import json
import math

import numpy as np

from .diet import DietHistory
from .engine import Engine, FitState, Solution, Ties, prepare_data
from .errors import DataError
from .growthfit import load_growth
from .model import TurnoverModel
from .results import TurnoverFit

__all__ = ["load_fit"]

# The keys load_fit reads, by section of the record (TurnoverFit.to_dict, format version 1).
_REQUIRED = {
    "model": (),
    "data": ("t", "y", "sigma", "time_unit"),
    "options": ("absolute_sigma", "loss", "f_scale", "fixed", "init", "label"),
    "solution": ("z", "theta", "status", "nfev", "message", "success", "jac_z",
                 "starts_tried"),
}


def _check_record(d) -> dict:
    """The record as a dict with every section and key :func:`load_fit` reads."""
    if isinstance(d, (str, bytes)):
        try:
            d = json.loads(d)
        except ValueError as e:
            raise DataError(f"'d' is not valid JSON text ({e}); load_fit needs the dict made "
                            "by TurnoverFit.to_dict() or its JSON text") from None
    if not isinstance(d, dict) or d.get("format") != "isoturnover-fit":
        got = f"a dict with format={d.get('format')!r}" if isinstance(d, dict) else \
            type(d).__name__
        raise DataError("load_fit needs a dict made by TurnoverFit.to_dict() "
                        f"(key 'format' = 'isoturnover-fit'); 'd' is {got}")
    for section, keys in _REQUIRED.items():
        part = d.get(section)
        if not isinstance(part, dict):
            raise DataError(f"'d' is not a complete fit record: section {section!r} is "
                            f"missing or not a dict (got {type(part).__name__})")
        missing = [k for k in keys if k not in part]
        if missing:
            raise DataError(f"'d' is not a complete fit record: section {section!r} lacks "
                            f"{', '.join(repr(k) for k in missing)}")
    return d


def load_fit(d) -> TurnoverFit:
    """Rebuild a fit from :meth:`TurnoverFit.to_dict` (or its JSON text).

    The model is rebuilt from its configuration, the data and options from the record, and
    the optimizer's solution is taken as stored (no refit), so the rebuilt fit predicts,
    tabulates and summarises exactly as the original.

    Parameters
    ----------
    d : dict or str
        The dict made by :meth:`TurnoverFit.to_dict <isoturnover.TurnoverFit.to_dict>`
        (``format = "isoturnover-fit"``), or its JSON text (:meth:`TurnoverFit.to_json`).
        Not modified.

    Returns
    -------
    TurnoverFit
        The rebuilt fit.

    Raises
    ------
    DataError
        When ``d`` is not valid JSON, not such a record, or lacks a section or key the
        rebuild needs.
    """
    d = _check_record(d)
    cfg = dict(d["model"])
    if cfg.get("diet") is not None:
        cfg["diet"] = DietHistory.from_dict(cfg["diet"])
    g = cfg.get("growth")
    if isinstance(g, dict):
        cfg["growth"] = load_growth(g["curve"])
    model = TurnoverModel(**cfg)
    dd = d["data"]
    data = prepare_data(np.array(dd["t"]), np.array(dd["y"]),
                        None if dd["sigma"] is None else np.array(dd["sigma"]),
                        dd["time_unit"], warn_repeats=False)
    data["info"].update(dd.get("info") or {})
    opt = d["options"]
    masses = dd.get("masses")
    tied = opt.get("tied") or {}
    bounds = {k: (-math.inf if a is None else float(a), math.inf if b is None else float(b))
              for k, (a, b) in (opt.get("bounds") or {}).items()}
    engine = Engine(model.kinetics, data, absolute_sigma=opt["absolute_sigma"],
                    loss=opt["loss"], ties=Ties(model.kinetics, tied) if tied else None,
                    bounds=bounds,
                    masses=None if masses is None else (np.array(masses[0]),
                                                        np.array(masses[1])))
    if dd.get("block_scale") is not None:
        engine.set_block_scale(*dd["block_scale"])
    engine.f_scale = opt["f_scale"]
    s = d["solution"]
    coords = engine.coords(opt["fixed"], rate_anchor=None, fraction_anchor=None)
    sol = Solution(np.array(s["z"], dtype=float), np.array(s["theta"], dtype=float),
                   math.nan, s["status"], s["nfev"], s["message"], s["success"],
                   None if s["jac_z"] is None else np.array(s["jac_z"], dtype=float))
    sol.extra["coords"] = coords
    state = FitState(engine, sol, fixed=opt["fixed"])
    return TurnoverFit(model, state, init=opt["init"], starts_tried=s["starts_tried"],
                       label=opt["label"])
