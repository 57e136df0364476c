r"""TurnoverModel: the user's model of one tissue's isotope series, its parameters and fit.

The model stores its configuration; :meth:`TurnoverModel.fit` validates the data, builds
the kinetic model (:mod:`isoturnover.kinetics`), runs the engine
(:mod:`isoturnover.engine`: internal coordinates that keep pools ordered, deterministic
multi-start, analytic Jacobians) and returns a new :class:`~isoturnover.TurnoverFit`.
Nothing the caller passes is modified.
"""

from __future__ import annotations

import difflib
import math
import warnings
from typing import TYPE_CHECKING

import numpy as np

from .conventions import check_choice
from .diet import DietHistory
from .engine import (
    LOSSES,
    Engine,
    FitState,
    Ties,
    as_1d,
    check_growth_coverage,
    check_names,
    prepare_data,
)
from .errors import DataError, DataWarning
from .kinetics import MAX_POOLS, TurnoverKinetics
from .results import TurnoverFit
from .segments import (
    SegmentKinetics,
    check_length_unit,
    formation_intervals,
    growth_schedule,
    segment_arrays,
)

if TYPE_CHECKING:  # annotations only; lmfit is imported where it is used
    import lmfit

__all__ = ["TurnoverModel", "LOSSES", "RECORDS", "fit_power_dilution"]

#: What a sample records: the tissue at its sampling time, or a segment of a growing tissue.
RECORDS = ("points", "segments")

# ----------------------------------------------------------------------------------------
# The user-facing model
# ----------------------------------------------------------------------------------------
class TurnoverModel:
    r"""A turnover model for one tissue's isotope series.

    The constructor only stores the configuration; :meth:`fit` does the work and returns a
    new :class:`~isoturnover.results.TurnoverFit`.

    Parameters
    ----------
    pools : int, default=1
        Number of parallel pools (1–4). Pool fractions describe the shape of the curve;
        they need not be physical compartments.
    structure : {"parallel", "chain"}, default="parallel"
        ``"chain"``: a precursor–product chain of two first-order steps (S-shaped response),
        rates ``k1 >= k2``.
    growth : None, "exponential" or a growth curve, default=None
        Growth dilution. With a curve (a fitted :func:`~isoturnover.fit_growth` result or
        any object with ``predict(t)``), rates ``k1…kn`` are catabolic rates and the growth
        term comes from the curve. ``"exponential"`` adds ``k_growth``, which needs masses
        in :meth:`fit` (``masses=(t, mass)``) or a fixed value.
    lag : bool, default=False
        Fit a pure delay ``lag >= 0`` between each diet switch and the response.
    diet : DietHistory, optional
        The diet history. Without one the model is one step switch at t = 0 from
        ``delta0`` to ``delta_eq``.
    separation : {"difference", "epsilon"}, default="difference"
        Tissue equilibrium value ``diet + discrimination`` or
        ``(1000 + diet)(1 + epsilon/1000) − 1000``.
    scale : {"delta", "atom_fraction"}, default="delta"
        Pools mix in δ (natural abundance) or in atom fraction (enriched tracers).
    isotope : str, optional
        Isotope code (``"d13C"``…); needed for ``scale="atom_fraction"``.
    initial : {"equilibrium", "free"}, default="equilibrium"
        Tissue at equilibrium with the first diet, or ``delta0`` fitted at the first switch.
    per_diet_separation : bool, default=False
        One separation per distinct diet value.
    propagate_growth : bool, default=True
        With a fitted growth curve that carries a covariance, fit its parameters jointly
        (``growth_<p>``, held near their growth-fit values by a Gaussian penalty) so that
        the curve's uncertainty reaches the turnover rates; ``False`` uses the curve as
        fixed.
    record : {"points", "segments"}, default="points"
        ``"segments"``: each sample is a segment of a growing inert tissue (hair, whisker,
        feather, claw) and records the exact time average of the model over the segment's
        formation interval (:mod:`isoturnover.segments`); :meth:`fit` then needs segment ends.
    growth_rate : float or table of (time, rate), optional
        With ``record="segments"``: the tissue's growth rate (length per time unit), constant
        or piecewise constant (:func:`~isoturnover.segments.growth_schedule`).
    formation_lag : float, default=0.0
        With ``record="segments"``: time from formation to emergence at the base (≥ 0).
    origin : {"base", "tip"}, default="base"
        With ``record="segments"``: segment distances measured from the base or the tip.
    tissue_length : float or array-like, optional
        With ``origin="tip"``: the tissue's length at sampling.
    length_unit : str, default="mm"
        With ``record="segments"``: the unit of segment distances, tissue length and growth
        rate (length per time unit), for labels, summaries and figures. Millimetres are
        common practice for hair, feathers and whiskers.

    Raises
    ------
    DataError
        From :attr:`kinetics`, :meth:`make_params` or :meth:`fit` when an option is not
        valid (the constructor itself only stores them).

    Examples
    --------
    >>> import numpy as np, isoturnover as iso
    >>> t = np.array([0, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70.0])
    >>> y = -12.0 + (-25.0 + 12.0) * np.exp(-np.log(2) / 9.0 * t)
    >>> fit = iso.TurnoverModel(pools=1).fit(t, y + 0.001 * np.sin(t))
    >>> round(float(fit.half_lives(method="asymptotic")["half_life"].iloc[0]), 2)
    9.0
    """

    def __init__(self, pools=1, *, structure="parallel", growth=None, lag=False, diet=None,
                 separation="difference", scale="delta", isotope=None, initial="equilibrium",
                 per_diet_separation=False, propagate_growth=True, record="points",
                 growth_rate=None, formation_lag=0.0, origin="base", tissue_length=None,
                 length_unit="mm"):
        self.pools = pools
        self.structure = structure
        self.growth = growth
        self.lag = lag
        self.diet = diet
        self.separation = separation
        self.scale = scale
        self.isotope = isotope
        self.initial = initial
        self.per_diet_separation = per_diet_separation
        self.propagate_growth = propagate_growth
        self.record = record
        self.growth_rate = growth_rate
        self.formation_lag = formation_lag
        self.origin = origin
        self.tissue_length = tissue_length
        self.length_unit = length_unit
        self._kin = None
        self._kin_key = None

    # -- configuration ------------------------------------------------------------------
    def config(self) -> dict:
        """The model's configuration as a JSON-safe dict, to store beside a fit.

        Returns
        -------
        dict
            The constructor's arguments by name (``pools``, ``structure``, ``growth``,
            ``lag``, ``diet``, ``separation``, ``scale``, ``isotope``, ``initial``,
            ``per_diet_separation``, ``propagate_growth``; with ``record="segments"`` also
            ``record``, ``growth_rate``, ``formation_lag``, ``origin``, ``tissue_length``,
            ``length_unit``); a
            diet history as its ``to_dict()``, a growth curve object as
            ``{"curve": curve.to_dict()}``.
        """
        g = self.growth
        if g is not None and not isinstance(g, str):
            g = {"curve": g.to_dict()} if hasattr(g, "to_dict") else {"curve": repr(g)}
        seg = {}
        if self.record == "segments":
            gr = np.asarray(self.growth_rate, dtype=float) if not hasattr(
                self.growth_rate, "columns") else self.growth_rate[["time", "rate"]].to_numpy()
            seg = {"record": "segments", "growth_rate": gr.tolist(),
                   "formation_lag": float(self.formation_lag), "origin": self.origin,
                   "tissue_length": None if self.tissue_length is None
                   else np.asarray(self.tissue_length, dtype=float).tolist(),
                   "length_unit": str(self.length_unit)}
        return {
            "pools": int(self.pools) if not isinstance(self.pools, bool) else self.pools,
            "structure": self.structure,
            "growth": g,
            "lag": bool(self.lag),
            "diet": None if self.diet is None else self.diet.to_dict(),
            "separation": self.separation,
            "scale": self.scale,
            "isotope": self.isotope,
            "initial": self.initial,
            "per_diet_separation": bool(self.per_diet_separation),
            "propagate_growth": bool(self.propagate_growth),
            **seg,
        }

    def _config_key(self):
        return (self.pools, self.structure, id(self.growth), self.growth
                if isinstance(self.growth, str) else None, self.lag, id(self.diet),
                self.separation, self.scale, self.isotope, self.initial,
                self.per_diet_separation, self.propagate_growth)

    @property
    def kinetics(self) -> TurnoverKinetics:
        """The kinetic model (forward model and exact Jacobian) of this configuration.

        Built on first access and rebuilt when an attribute of the model changes.

        Returns
        -------
        TurnoverKinetics

        Raises
        ------
        DataError
            When ``pools`` is not an integer from 1 to 4 (parallel structure), ``diet`` is
            not a :class:`~isoturnover.DietHistory`, or another option is not valid.
        """
        key = self._config_key()
        if self._kin is None or self._kin_key != key:
            self._kin = None
            pools = self.pools
            if self.structure == "parallel" and (
                isinstance(pools, bool) or not isinstance(pools, (int, np.integer))
                or not 1 <= pools <= MAX_POOLS
            ):
                raise DataError(
                    f"'pools' must be an integer from 1 to {MAX_POOLS}; got {pools!r}"
                )
            if self.diet is not None and not isinstance(self.diet, DietHistory):
                raise DataError(
                    f"'diet' must be a DietHistory or None; got {type(self.diet).__name__}"
                )
            self._kin = TurnoverKinetics(
                pools if self.structure == "parallel" else 2,
                structure=self.structure, diet=self.diet, separation=self.separation,
                per_diet_separation=self.per_diet_separation, lag=self.lag,
                initial=self.initial, scale=self.scale, isotope=self.isotope,
                growth=self.growth, growth_params=self._propagates_growth(),
            )
            self._kin_key = key
        return self._kin

    def _propagates_growth(self) -> bool:
        """A fitted growth curve (with a covariance) whose uncertainty is carried along."""
        g = self.growth
        return bool(self.propagate_growth) and g is not None and not isinstance(g, str) \
            and hasattr(g, "covariance") and hasattr(g, "law")

    @property
    def param_names(self) -> tuple[str, ...]:
        """Names of the model's natural parameters, in the kinetics' order.

        Returns
        -------
        tuple of str
            For example ``("delta0", "delta_eq", "k1", "k2", "f1", "f2")`` for two pools
            after a step switch (rates in 1/time unit, levels in ‰, fractions unitless).
        """
        return self.kinetics.param_names

    def make_params(self, **values) -> lmfit.Parameters:
        r"""The model's parameters as :class:`lmfit.Parameters`, to edit and pass to
        :meth:`fit` (``params=``).

        Names are the natural ones (``delta0``, ``delta_eq``, ``plateau_j``,
        ``discrimination``/``epsilon``, ``k1``…, ``f1``…, ``lag``, ``k_growth``,
        ``growth_<p>``). Bounds: rates ``min=0``; fractions in [0, 1], the last one tied
        to the others by the expression ``1 - f1 - …`` (the fractions sum to 1); ``lag``
        ``min=0``. Values are only starting points: the fit always adds its own automatic
        starts and keeps the best. Set ``vary=False`` to fix a parameter, ``min``/``max`` to
        bound a plain parameter (levels, separations, lag, ``k_growth``), ``expr`` to tie a
        parameter to others (for example ``params["k2"].expr = "k1/5"``). Bounds on rates and
        fractions are set by the model (pools stay ordered, fastest first); fix or tie those
        instead.

        Parameters
        ----------
        **values : float
            Starting values by name, e.g. ``make_params(delta_eq=-12.0, k1=0.1)``.

        Returns
        -------
        lmfit.Parameters
            One parameter per name of :attr:`param_names`, with the bounds and expressions
            above; rates in 1/time unit, levels and separations in ‰.

        Raises
        ------
        DataError
            When a name in ``values`` is not a parameter of this model, or a value is not
            finite.

        Examples
        --------
        >>> import isoturnover as iso
        >>> p = iso.TurnoverModel(pools=2).make_params(delta0=-25.0, delta_eq=-12.0)
        >>> p["f2"].expr
        '1 - f1'
        """
        kin = self.kinetics
        names = kin.param_names
        unknown = [k for k in values if k not in names]
        if unknown:
            near = difflib.get_close_matches(str(unknown[0]), names, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise DataError(f"make_params got unknown parameter {unknown[0]!r}{hint}; this "
                            f"model's parameters are {', '.join(names)}")
        vals = check_names(values, kin, "make_params") if values else {}
        fr = kin.fraction_names
        growth_fixed = {}
        if kin.growth_kind == "curve_params":
            g = self.growth
            varying = set(g.covariance.index)
            for nm, v in zip(g.param_names, g.values):
                growth_fixed[f"growth_{nm}"] = (float(v), nm in varying)
        import lmfit  # on first use: lmfit imports scipy.stats and matplotlib

        ps = lmfit.Parameters()
        for nm in names:
            if nm in kin.rate_names:
                i = kin.rate_names.index(nm)
                ps.add(nm, value=vals.get(nm, 0.1 * 5.0 ** (-i)), min=0.0)
            elif nm in fr:
                ps.add(nm, value=vals.get(nm, 1.0 / len(fr)), min=0.0, max=1.0)
            elif nm == "lag":
                ps.add(nm, value=vals.get(nm, 0.0), min=0.0)
            elif nm in growth_fixed:
                v, vary = growth_fixed[nm]
                ps.add(nm, value=vals.get(nm, v), vary=vary)
            else:
                ps.add(nm, value=vals.get(nm, 0.0))
        if len(fr) > 1:
            ps[fr[-1]].set(expr=" - ".join(["1"] + list(fr[:-1])))
        return ps

    def _read_params(self, params):
        """(fixed, init, ties, bounds) from an lmfit.Parameters; see :meth:`make_params`."""
        import lmfit

        kin = self.kinetics
        names = kin.param_names
        if not isinstance(params, lmfit.Parameters):
            raise DataError(f"'params' must be an lmfit.Parameters (from "
                            f"TurnoverModel.make_params()); got {type(params).__name__}")
        unknown = [k for k in params if k not in names]
        if unknown:
            raise DataError(
                f"'params' has parameter(s) {', '.join(map(repr, unknown))} that this model "
                f"does not have; its parameters are {', '.join(names)} (expressions may use "
                "only these)")
        default = self.make_params()
        fr = list(kin.fraction_names)
        fixed, init, ties, bounds = {}, {}, {}, {}
        for nm in names:
            p = params[nm] if nm in params else default[nm]
            expr = p.expr.strip() if isinstance(p.expr, str) and p.expr.strip() else None
            if nm in fr:
                if expr is not None:
                    terms = [x.strip() for x in expr.replace(" ", "").split("-")]
                    is_sum = (nm == fr[-1] and terms[0] == "1"
                              and sorted(terms[1:]) == sorted(fr[:-1]))
                    if not is_sum:
                        raise DataError(
                            f"'params[{nm!r}].expr' = {p.expr!r}: pool fractions sum to 1 by "
                            f"construction ({fr[-1]} = 1 - the others); other expressions "
                            "for fractions are not supported: fix them (vary=False) instead")
                    continue
                if (p.min not in (0.0, -np.inf) and np.isfinite(p.min)) or \
                        (p.max not in (1.0, np.inf) and np.isfinite(p.max)):
                    raise DataError(
                        f"'params[{nm!r}]' has bounds [{p.min}, {p.max}]: bounds of pool "
                        "fractions are set by the model ([0, 1], summing to 1); fix the "
                        "fraction (vary=False) instead")
            elif nm in kin.rate_names:
                if (np.isfinite(p.min) and p.min > 0) or np.isfinite(p.max):
                    raise DataError(
                        f"'params[{nm!r}]' has bounds [{p.min}, {p.max}]: rates are fitted on "
                        "the log scale with the pools ordered, so their bounds are set by the "
                        "model (0, inf); fix the rate (vary=False) or tie it to another "
                        f"(params[{nm!r}].expr = ...) instead")
            if expr is not None:
                ties[nm] = expr
                continue
            v = p.value
            if not (v is not None and math.isfinite(float(v))):
                raise DataError(f"'params[{nm!r}]' has no finite value; got {v!r}")
            if not p.vary:
                fixed[nm] = float(v)
                continue
            init[nm] = float(v)
            if nm not in kin.rate_names and nm not in fr and (
                    np.isfinite(p.min) or np.isfinite(p.max)):
                if not p.min < p.max:
                    raise DataError(f"'params[{nm!r}]' has min >= max ({p.min} >= {p.max})")
                bounds[nm] = (float(p.min), float(p.max))
        fixed = check_names(fixed, kin, "params (fixed)")
        init = check_names(init, kin, "params (values)")
        # starting values of fractions from lmfit's defaults need not sum to 1 once the last
        # is an expression: keep the free ones and let the engine complete the last
        if fr and fr[-1] not in init and all(f in init for f in fr[:-1]):
            rest = 1.0 - sum(init[f] for f in fr[:-1])
            if rest >= 0:
                init[fr[-1]] = rest
            else:
                for f in fr[:-1]:
                    init.pop(f)
        return fixed, init, ties, bounds

    def describe(self) -> str:
        """One line naming the model structure, for summaries and reports.

        Returns
        -------
        str
            For example ``"2 pools; step switch at t = 0"``.
        """
        kin = self.kinetics
        if kin.structure == "chain":
            s = "precursor–product chain (2 steps)"
        else:
            s = f"{kin.pools} pool{'s' if kin.pools > 1 else ''}"
        extra = []
        if self.diet is None:
            extra.append("step switch at t = 0")
        else:
            n_sw = len(self.diet.switch_times)
            extra.append(f"diet history with {n_sw} switch{'es' if n_sw > 1 else ''}")
            extra.append(f"{self.separation} form")
        if self.lag:
            extra.append("lag")
        if self.initial == "free":
            extra.append("free initial state")
        if self.scale == "atom_fraction":
            extra.append("mixing in atom fraction")
        if self.record == "segments":
            extra.append("segments of a growing tissue (formation-interval means)")
        if kin.growth_kind == "exponential":
            extra.append("exponential growth dilution")
        elif kin.growth_kind == "curve":
            extra.append("growth dilution from a growth curve")
        elif kin.growth_kind == "curve_params":
            extra.append(f"growth dilution from a fitted {self.growth.curve} curve "
                         "(its uncertainty propagated)")
        return f"{s}; " + ", ".join(extra)

    def __repr__(self):
        args = [f"pools={self.pools!r}"]
        for k in ("structure", "growth", "lag", "diet", "separation", "scale", "isotope",
                  "initial", "record"):
            v = getattr(self, k)
            default = {"structure": "parallel", "growth": None, "lag": False, "diet": None,
                       "separation": "difference", "scale": "delta", "isotope": None,
                       "initial": "equilibrium", "record": "points"}[k]
            if v != default:
                args.append(f"{k}={v!r}")
        return f"TurnoverModel({', '.join(args)})"

    # -- fitting ----------------------------------------------------------------------------
    def fit(self, t_or_frame, y=None, sigma=None, *, params=None, absolute_sigma=False,
            fixed=None, init=None, loss="linear", masses=None, time_unit=None, label=None,
            warn=True, segment_start=None, segment_end=None):
        """Fit the model to one series.

        Parameters
        ----------
        t_or_frame : array-like of shape (n,) or DataFrame
            Sampling times (in the experiment's time unit, from the first switch), or a
            samples table (see :func:`~isoturnover.read_samples`) holding one subject,
            tissue and isotope — or several subjects with one sample each (destructive
            sampling; the residual variance then holds the between-animal scatter).
            Analytic replicates (same subject and time) are averaged first.
        y : array-like of shape (n,), optional
            Tissue δ values (‰). Not used with a frame.
        sigma : array-like of shape (n,) or float, optional
            Analytic 1σ of each value. Relative weights unless ``absolute_sigma``.
        params : lmfit.Parameters, optional
            Parameters from :meth:`make_params`, edited: ``value`` (a starting point added to
            the automatic ones), ``vary=False`` (fixed), ``min``/``max`` (plain parameters),
            ``expr`` (tied to others, evaluated as lmfit evaluates it). With ``params`` the
            final fit runs through :class:`lmfit.Minimizer` (``least_squares`` with the
            analytic Jacobian) in the internal coordinates; the fit's ``params`` keep the
            expressions.
        absolute_sigma : bool, default=False
            Treat ``sigma`` as known: no rescaling of the covariance by the residual
            variance, and a χ² goodness-of-fit p-value.
        fixed : dict, optional
            Natural parameters held at given values, e.g. ``{"delta0": 0.0}``.
        init : dict, optional
            Starting values for natural parameters (otherwise automatic, multi-start).
        loss : {"linear", "soft_l1", "huber"}, default="linear"
            Robust losses down-weight outliers (scale from the median absolute deviation
            of a first, linear fit).
        masses : tuple (t_mass, mass), optional
            Body masses for ``growth="exponential"``: masses and δ are fitted jointly,
            each block weighted by its own residual variance.
        time_unit : str, optional
            Label of the time unit (``"d"`` by default, or the frame's ``attrs``).
        label : str, optional
            Name of the series used in summaries and tables.
        warn : bool, default=True
            Issue trust warnings through :mod:`warnings` (they are always on the result).
        segment_start, segment_end : array-like of shape (n,), optional
            With ``record="segments"`` and arrays: distances of each segment's ends from the
            model's ``origin`` (``t_or_frame`` then holds the sampling time(s)); a frame
            gives them as columns. The fit's ``t`` are the segments' formation midpoints;
            its ``data_info`` records each point's ``sample_time``, ``segment_start`` and
            ``segment_end`` (what :func:`~isoturnover.plot_segments` draws).

        Returns
        -------
        TurnoverFit
            The finished fit: estimates, covariance, intervals on request, trust notes.

        Raises
        ------
        DataError
            For data or options that cannot be used (names the argument): an unknown
            ``loss``, ``absolute_sigma`` without ``sigma``, exponential growth without
            masses or a fixed ``k_growth``, ``masses`` without exponential growth, more
            free parameters than time points, unknown names in ``fixed``/``init``/``params``.
        FitError
            When no start leads to a finite fit.
        """
        if check_choice("record", self.record, RECORDS) == "segments":
            kin, data = self._segment_inputs(t_or_frame, y, sigma, time_unit, segment_start,
                                             segment_end)
        else:
            for nm, v in (("segment_start", segment_start), ("segment_end", segment_end),
                          ("growth_rate", self.growth_rate)):
                if v is not None:
                    raise DataError(f"'{nm}' is used with record='segments'; this model has "
                                    "record='points'")
            data = prepare_data(t_or_frame, y, sigma, time_unit)
            kin = self.kinetics
        check_choice("loss", loss, LOSSES)
        if absolute_sigma and data["sigma"] is None:
            raise DataError("absolute_sigma=True needs 'sigma' (the known analytic sd)")
        kin.check_values(data["y"], "y")  # δ ≤ −1000 ‰ has no atom fraction
        fixed = check_names(fixed, kin, "fixed")
        init = check_names(init, kin, "init")
        ties, bounds = {}, {}
        if params is not None:
            p_fixed, p_init, ties, bounds = self._read_params(params)
            both = sorted(set(ties) & (set(fixed) | set(init)))
            if both:
                raise DataError(f"{', '.join(both)} is set by an expression in 'params' and "
                                "also given in 'fixed'/'init'; give it in one place")
            fixed = {**p_fixed, **fixed}
            for nm in fixed:
                bounds.pop(nm, None)
            init = {**{k: v for k, v in p_init.items() if k not in fixed}, **init}
        tie_map = Ties(kin, ties) if ties else None
        if kin.growth_kind == "exponential" and masses is None and "k_growth" not in fixed:
            raise DataError(
                "growth='exponential' needs body masses (masses=(t_mass, mass)) or a fixed "
                "'k_growth' (fixed={'k_growth': ...}); without them growth and catabolic "
                "turnover cannot be told apart"
            )
        if masses is not None and kin.growth_kind != "exponential":
            raise DataError(
                "'masses' is used with growth='exponential' (joint fit); for other growth "
                "curves fit them first with iso.fit_growth and pass the result as growth="
            )
        if kin.growth_kind == "curve_params":
            g = kin.growth
            varying = set(g.covariance.index)
            for nm, v in zip(g.param_names, g.values):
                if nm not in varying:
                    fixed.setdefault(f"growth_{nm}", float(v))
            check_growth_coverage(kin, data["t"])
        elif kin.growth_kind == "curve":
            check_growth_coverage(kin, data["t"])
        engine = Engine(kin, data, absolute_sigma=absolute_sigma, loss=loss, masses=masses,
                        ties=tie_map, bounds=bounds)
        n_free = engine.coords(fixed).size  # the map the fit will use (cached)
        if n_free > data["t"].size:
            raise DataError(
                f"the model has {n_free} free parameters but only {data['t'].size} time "
                "points in 't'; fix parameters or use fewer pools"
            )
        sol, starts_tried = engine.fit_best(fixed, init, use_lmfit=params is not None)
        fit = TurnoverFit(self, FitState(engine, sol, fixed), init=init,
                          starts_tried=starts_tried, label=label)
        if warn:
            for wmsg in fit.warnings:
                warnings.warn(wmsg.message, wmsg.category, stacklevel=2)
        return fit

    def _segment_inputs(self, t_or_frame, y, sigma, time_unit, segment_start, segment_end):
        """(SegmentKinetics, data) of a segment series: each segment's formation interval
        from the model's growth rate, lag and origin; the engine fits the midpoints."""
        growth_schedule(self.growth_rate)  # names a missing or bad growth rate first
        check_length_unit(self.length_unit)
        arr = segment_arrays(t_or_frame, y, sigma, segment_start, segment_end)
        t1, t2 = formation_intervals(arr["segment_start"], arr["segment_end"],
                                     arr["sample_time"], self.growth_rate,
                                     formation_lag=self.formation_lag, origin=self.origin,
                                     tissue_length=self.tissue_length)
        kin = SegmentKinetics(self.kinetics, t1, t2)
        data = prepare_data((t1 + t2) / 2.0, arr["y"], arr["sigma"],
                            time_unit or arr["time_unit"], warn_repeats=False)
        # the segments themselves, each point's, for figures and the saved record
        data["info"] = {**data["info"], "record": "segments", **{
            k: np.broadcast_to(arr[k], arr["y"].shape).astype(float).tolist()
            for k in ("sample_time", "segment_start", "segment_end")}}
        return kin, data


def fit_power_dilution(mass, y, sigma=None, *, mass0=None, absolute_sigma=False, label=None):
    r"""Fit the power form of growth dilution (Fry & Arnold 1982) to δ against body mass.

    .. math::

        \delta = \delta_{eq} + (\delta_0 - \delta_{eq}) \left(\frac{W}{W_0}\right)^{c}

    ``c = −1`` is pure growth dilution (no catabolic turnover); more negative values add
    catabolic turnover. Useful where every sample has its own mass (destructively sampled
    juveniles). With :math:`x = \ln(W/W_0)` the form is a one-pool curve in x with rate
    :math:`-c`, so the fit is a :class:`~isoturnover.TurnoverFit` on that axis (its
    ``time_unit`` reads ``ln(W/W0)``) and ``c`` gets the same profile-likelihood interval
    as any rate. With exponential growth :math:`c = -(k_g + k_d)/k_g`.

    Parameters
    ----------
    mass : array-like of shape (n,)
        Body mass of each sample (> 0), in any unit.
    y : array-like of shape (n,)
        Tissue δ (‰).
    sigma : array-like, optional
        Analytic sd (relative weights unless ``absolute_sigma``).
    mass0 : float, optional
        Mass at the diet switch, in the unit of ``mass`` (default: the smallest mass).
    absolute_sigma : bool, default=False
        Treat ``sigma`` as the known analytic sd (no rescaling of the covariance).
    label : str, optional
        Name of the fit in summaries (default ``"power form (Fry & Arnold 1982)"``).

    Returns
    -------
    (TurnoverFit, DataFrame)
        The fit, and a one-row table of the exponent ``c`` with its interval (columns
        quantity, estimate, lower, upper, level, method, lower_status, upper_status).
        The interval of ``c`` is the profile-likelihood interval of ``k1`` with its sign
        changed (bounds and their statuses swapped).

    Raises
    ------
    DataError
        When a mass is not positive, ``mass0`` is not positive, or a mass lies below
        ``mass0``.
    """
    m = as_1d("mass", mass)
    if np.any(m <= 0):
        i = int(np.argmax(m <= 0))
        raise DataError(f"'mass' must be > 0; got {m[i]!r} at position {i}")
    m0 = float(np.min(m)) if mass0 is None else float(mass0)
    if not m0 > 0:
        raise DataError(f"'mass0' must be > 0; got {mass0!r}")
    x = np.log(m / m0)
    if np.any(x < -1e-12):
        raise DataError("the power form needs masses at or above mass0 (a growing animal); "
                        f"the smallest mass is {float(np.min(m)):g} < mass0 = {m0:g}")
    with warnings.catch_warnings():
        # equal masses are separate animals or weighings, not repeated sampling times
        warnings.filterwarnings("ignore", message="'t' repeats", category=DataWarning)
        fit = TurnoverModel(1).fit(x, y, sigma, absolute_sigma=absolute_sigma,
                                   time_unit="ln(W/W0)",
                                   label=label or "power form (Fry & Arnold 1982)", warn=False)
    ci = fit.conf_int(params=["k1"]).iloc[0]
    table = _pd().DataFrame([{
        "quantity": "fry_arnold_c", "estimate": -float(ci["estimate"]),
        "lower": -float(ci["upper"]), "upper": -float(ci["lower"]), "level": ci["level"],
        "method": ci["method"], "lower_status": ci["upper_status"],
        "upper_status": ci["lower_status"]}])
    return fit, table


def _pd():
    import pandas as pd

    return pd
