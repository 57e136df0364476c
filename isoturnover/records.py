"""What a fit records of itself: its numbers, the fingerprint of its data, its saved form.

:class:`FitRecord` is a mixin that :class:`~isoturnover.TurnoverFit` inherits: the natural
parameter values and standard errors, fitted values and residuals, the rates run to zero,
:attr:`~FitRecord.data_fingerprint` (equal for fits of the same data, which
:func:`isoturnover.compare` requires), and :meth:`~FitRecord.to_dict` /
:meth:`~FitRecord.to_json`, from which :func:`isoturnover.load_fit` rebuilds the fit.

The mixin reads only public attributes and methods of the fit that inherits it: ``model``,
``state``, ``kinetics``, ``covar``, the data and options (``t``, ``y``, ``sigma``,
``time_unit``, ``data_info``, ``block_scale``, ``absolute_sigma``, ``loss``, ``f_scale``,
``fixed``, ``init``, ``label``, ``tied``, ``bounds``), the optimizer's record (``nfev``,
``message``, ``starts_tried``) and ``mean_residence_times()``.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

__all__ = ["FitRecord", "json_safe"]


def json_safe(d) -> dict:
    """A copy of a flat dict with numpy scalars and arrays turned into Python numbers/lists.

    Parameters
    ----------
    d : dict

    Returns
    -------
    dict
    """
    out = {}
    for k, v in d.items():
        if isinstance(v, np.integer):
            v = int(v)
        elif isinstance(v, np.floating):
            v = float(v)
        elif isinstance(v, np.ndarray):
            v = v.tolist()
        elif isinstance(v, (list, tuple)):
            v = [x.item() if hasattr(x, "item") else x for x in v]
        out[k] = v
    return out


class FitRecord:
    """The record of a fit: its numbers, its data's fingerprint, its saved form (a mixin)."""

    @property
    def values(self) -> dict:
        """Natural parameter values, name → float."""
        return dict(zip(self.kinetics.param_names, self.state.theta.tolist()))

    @property
    def stderr(self) -> dict:
        """Standard errors of the natural parameters, name → float (NaN when not available;
        the square roots of the diagonal of :attr:`covar`)."""
        d = np.sqrt(np.clip(np.diag(self.covar), 0, None))
        return dict(zip(self.kinetics.param_names, d.tolist()))

    @property
    def residuals(self) -> np.ndarray:
        """y − fitted (‰), in time order."""
        return self.y - self.best_fit

    @property
    def best_fit(self) -> np.ndarray:
        """Fitted tissue δ (‰) at the sampling times."""
        return self.kinetics.evaluate(self.t, self.state.theta)

    @property
    def rates_at_zero(self) -> tuple:
        """Rates run to their lower edge: no change within the sampling span
        (k·max(span, 1) ≤ 1e-12); their half-life is reported as infinite."""
        span = max(float(np.ptp(self.t)), 1.0)
        return tuple(nm for nm in self.kinetics.rate_names if self.values[nm] * span <= 1e-12)

    @property
    def data_fingerprint(self) -> str:
        """SHA-1 of the fitted data (times, values, weights): equal for fits of the same data."""
        h = hashlib.sha1()
        for a in (self.t, self.y, np.ones_like(self.t) if self.sigma is None else self.sigma):
            h.update(np.ascontiguousarray(a, dtype=float).tobytes())
        mb = self.state.engine.mass_block
        if mb is not None and mb.kind == "prior":
            h.update(b"growth-prior")
            h.update(str(getattr(self.kinetics.growth, "data_fingerprint", "")).encode())
        elif mb is not None:
            h.update(b"masses")
            h.update(np.ascontiguousarray(mb.t, dtype=float).tobytes())
            h.update(np.ascontiguousarray(mb.mass, dtype=float).tobytes())
        return h.hexdigest()

    def to_dict(self) -> dict:
        """A JSON-safe description from which :func:`~isoturnover.load_fit` rebuilds this fit.

        Returns
        -------
        dict
            ``format``, ``version``, ``model`` (configuration), ``data``, ``options``,
            ``solution`` (coordinates, natural parameters, Jacobian, optimizer status) and
            ``derived``: the mean residence times named as in :meth:`table`
            (``mean_residence_time``, or with a growth model ``…_incorporation`` and
            ``…_catabolic``), in :attr:`time_unit`, ``None`` when infinite — for readers;
            :func:`~isoturnover.load_fit` recomputes them. A segment fit (``record``
            ``"segments"`` in ``model``, with its growth rate, lag and origin) also writes
            ``data.segments``: the segments' formation intervals (``formation_start``,
            ``formation_end``) and, when the fit knows them, each point's ``sample_time``,
            ``segment_start`` and ``segment_end``.
        """
        def fl(a):
            return None if a is None else [float(x) for x in np.asarray(a).ravel()]

        def finite(x):
            return float(x) if np.isfinite(x) else None

        st = self.state
        sol, mb = st.solution, st.engine.mass_block
        segments = None
        if getattr(self.model, "record", "points") == "segments":
            segments = {"formation_start": fl(self.kinetics.formation_start),
                        "formation_end": fl(self.kinetics.formation_end)}
            for key in ("sample_time", "segment_start", "segment_end"):
                if self.data_info.get(key) is not None:
                    segments[key] = fl(self.data_info[key])
        return {
            "format": "isoturnover-fit", "version": 1,
            "model": self.model.config(),
            "data": {"t": fl(self.t), "y": fl(self.y), "sigma": fl(self.sigma),
                     "time_unit": self.time_unit, "info": json_safe(self.data_info),
                     "masses": [fl(mb.t), fl(mb.mass)] if getattr(mb, "kind", None)
                     == "masses" else None,
                     "block_scale": None if self.block_scale is None else
                     list(self.block_scale),
                     "fingerprint": self.data_fingerprint,
                     **({} if segments is None else {"segments": segments})},
            "options": {"absolute_sigma": self.absolute_sigma, "loss": self.loss,
                        "f_scale": self.f_scale, "fixed": self.fixed, "init": self.init,
                        "label": self.label, "tied": self.tied,
                        "bounds": {k: [float(a) if np.isfinite(a) else None,
                                       float(b) if np.isfinite(b) else None]
                                   for k, (a, b) in self.bounds.items()}},
            "solution": {"z": fl(sol.z), "theta": fl(self.state.theta),
                         "param_names": list(self.model.kinetics.param_names),
                         "jac_z": None if sol.jac_z is None else
                         np.asarray(sol.jac_z).tolist(),
                         "status": sol.status, "nfev": self.nfev,
                         "message": self.message, "success": st.optimizer_ok,
                         "starts_tried": self.starts_tried,
                         "coords": {"rate_anchor": st.coords.rate_anchor,
                                    "fraction_anchor": st.coords.fraction_anchor}},
            "derived": {q: finite(v) for q, v in self.mean_residence_times().items()},
        }

    def to_json(self, **kwargs) -> str:
        """:meth:`to_dict` as a JSON string.

        Parameters
        ----------
        **kwargs
            Passed to :func:`json.dumps` (``indent=2``, …).

        Returns
        -------
        str
        """
        return json.dumps(self.to_dict(), **kwargs)
