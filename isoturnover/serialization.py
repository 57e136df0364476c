"""Saving and loading fits: :func:`load_fit` rebuilds a fit from
:meth:`TurnoverFit.to_dict <isoturnover.TurnoverFit.to_dict>` (or its JSON text)."""

from __future__ import annotations

import json
import math

import numpy as np

from .diet import DietHistory
from .engine import Engine, FitState, Solution, Ties, prepare_data
from .growth import load_growth
from .model import TurnoverModel
from .results import TurnoverFit

__all__ = ["load_fit"]


def load_fit(d) -> TurnoverFit:
    """Rebuild a :class:`TurnoverFit` from :meth:`TurnoverFit.to_dict` (or its JSON text).

    The rebuilt fit predicts, tabulates and summarises exactly as the original.
    """
    if isinstance(d, str):
        d = json.loads(d)
    if not isinstance(d, dict) or d.get("format") != "isoturnover-fit":
        raise ValueError("load_fit needs a dict made by TurnoverFit.to_dict() "
                         "(key 'format' = 'isoturnover-fit')")
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
                        dd["time_unit"])
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
