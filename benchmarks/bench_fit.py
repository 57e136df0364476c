"""Cost of one turnover fit, relative to plain scipy and lmfit fits of the same curve.

Two invented series (seeded Gaussian noise):

* one pool on 30 points, 0–90 d, δ0 = −25 ‰, δ_eq = −12 ‰, half-life 10 d, σ = 0.2 ‰;
* three pools on 60 points, log-spaced 0.1–200 d plus t = 0, fractions 0.2/0.3/0.5,
  half-lives 0.7, 7 and 70 d, σ = 0.05 ‰.

``TurnoverModel.fit`` is timed as users call it: automatic deterministic starting values,
multi-start, analytic Jacobian, covariance and trust notes (intervals are computed lazily
and are not part of a fit). The references fit the same function in the natural
parametrisation, ``δ_eq + (δ0 − δ_eq) Σ f_i e^(−k_i t)`` with the last fraction
``1 − Σ others``, starting from the TRUE values, so they do no search for a start:

* ``scipy.optimize.curve_fit`` (Levenberg–Marquardt, finite-difference Jacobian);
* ``lmfit.minimize`` (leastsq) with a Parameters object built once outside the loop;
* ``lmfit.Model.fit`` of the same bare curve (the script a user would otherwise write).

A last column times one warm-started refit of the kind bootstraps and profiles run (the
engine's problem solved from the fit's solution on a perturbed copy of the data), against
one ``curve_fit`` from the truth.

Each time is the fastest over repeats of a batch of calls (``time.perf_counter``), all in
this process; the batches of the five candidates of a series take turns (round by round),
so a change in the machine's load between them does not favour one, and the fastest batch
of each is kept (other load only ever adds time). The table gives the ratios, so numbers
travel across machines. ``fit`` is timed with ``warn=False``: the trust notes are computed
all the same (they are on ``fit.warnings``); only issuing them is skipped.

Run::

    python benchmarks/bench_fit.py [--repeats 7] [--min-time 0.2]
"""

from __future__ import annotations

import argparse
import math
import platform
import warnings

import lmfit
import numpy as np
import scipy
from _timing import interleaved
from scipy.optimize import curve_fit

import isoturnover as iso

LN2 = math.log(2.0)


def curve(t, d0, deq, *kf):
    """δ_eq + (δ0 − δ_eq) Σ f_i exp(−k_i t); kf = k_1..k_n, f_1..f_(n−1)."""
    n = (len(kf) + 1) // 2
    k, f = np.asarray(kf[:n]), list(kf[n:])
    f.append(1.0 - sum(f))
    return deq + (d0 - deq) * (np.asarray(f) @ np.exp(-k[:, None] * t[None, :]))


def curve_for(pools):
    """The bare curve with named arguments, as lmfit.Model needs them."""
    ks = [f"k{i + 1}" for i in range(pools)]
    fs = [f"f{i + 1}" for i in range(pools - 1)]
    args = ", ".join(["t", "d0", "deq", *ks, *fs])
    body = f"curve(t, d0, deq, {', '.join(ks + fs)})"
    namespace = {"curve": curve}
    exec(f"def bare({args}):\n    return {body}\n", namespace)
    return namespace["bare"]


def make_series():
    rng = np.random.default_rng(2024)
    t1 = np.linspace(0.0, 90.0, 30)
    p1 = [-25.0, -12.0, LN2 / 10.0]
    y1 = curve(t1, *p1) + 0.2 * rng.normal(size=t1.size)
    t3 = np.r_[0.0, np.geomspace(0.1, 200.0, 59)]
    p3 = [-25.0, -12.0, LN2 / 0.7, LN2 / 7.0, LN2 / 70.0, 0.2, 0.3]
    y3 = curve(t3, *p3) + 0.05 * rng.normal(size=t3.size)
    return {"1 pool, 30 points": (1, t1, y1, p1), "3 pools, 60 points": (3, t3, y3, p3)}


def lmfit_setup(pools, t, y, p_true):
    params = lmfit.Parameters()
    params.add("d0", value=p_true[0])
    params.add("deq", value=p_true[1])
    for i in range(pools):
        params.add(f"k{i + 1}", value=p_true[2 + i], min=0)
    for i in range(pools - 1):
        params.add(f"f{i + 1}", value=p_true[2 + pools + i], min=0, max=1)
    names = list(params)

    def residual(p):
        v = p.valuesdict()
        return y - curve(t, *[v[n] for n in names])

    return params, residual


def check_agreement(pools, t, y, p_true):
    """The three fits must reach the same RSS (else the timing compares different work)."""
    fit = iso.TurnoverModel(pools).fit(t, y, warn=False)
    popt, _ = curve_fit(curve, t, y, p0=p_true)
    r_cf = float(np.sum((y - curve(t, *popt)) ** 2))
    params, residual = lmfit_setup(pools, t, y, p_true)
    r_lm = float(np.sum(lmfit.minimize(residual, params).residual ** 2))
    return fit.rss, r_cf, r_lm


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--min-time", type=float, default=0.2)
    args = ap.parse_args(argv)
    print(f"python {platform.python_version()}, numpy {np.__version__}, scipy "
          f"{scipy.__version__}, lmfit {lmfit.__version__}, isoturnover {iso.__version__}")
    print(f"{platform.machine()} {platform.processor() or ''}".strip())
    rows = []
    for label, (pools, t, y, p_true) in make_series().items():
        rss = check_agreement(pools, t, y, p_true)
        model = iso.TurnoverModel(pools)
        params, residual = lmfit_setup(pools, t, y, p_true)
        lm_model = lmfit.Model(curve_for(pools))
        lm_params = lm_model.make_params(**dict(zip(lm_model.param_names, p_true)))
        fit = model.fit(t, y, warn=False)
        y_star = y + 0.5 * np.std(fit.residuals) * np.random.default_rng(1).normal(size=t.size)
        eng = fit.state.engine.with_y(y_star)
        coords = fit.state.coords
        fns = {
            "fit": lambda m=model, t=t, y=y: m.fit(t, y, warn=False),
            "Model.fit": lambda m=lm_model, p=lm_params, t=t, y=y: m.fit(y, p, t=t),
            "refit": lambda e=eng, c=coords, z=fit.state.z: e.problem.solve(c, z, tol=1e-10),
            "curve_fit": lambda t=t, y=y, p=p_true: curve_fit(curve, t, y, p0=p),
            "lmfit.minimize": lambda r=residual, p=params: lmfit.minimize(r, p),
        }
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            best = interleaved(fns, args.repeats, args.min_time)
        rows.append((label, best["fit"], best["curve_fit"], best["lmfit.minimize"],
                     best["Model.fit"], best["refit"], rss))
    print()
    print(f"{'series':<20}{'fit (ms)':>10}{'curve_fit':>11}{'lmfit.min':>11}"
          f"{'Model.fit':>11}{'fit/cf':>9}{'fit/lmfit':>11}{'fit/Model':>11}"
          f"{'refit/cf':>10}")
    for label, a, b, c, d, e, _ in rows:
        print(f"{label:<20}{a * 1e3:>10.3f}{b * 1e3:>11.3f}{c * 1e3:>11.3f}{d * 1e3:>11.3f}"
              f"{a / b:>9.2f}{a / c:>11.2f}{a / d:>11.2f}{e / b:>10.2f}")
    print()
    print("RSS reached (isoturnover, curve_fit from truth, lmfit from truth):")
    for label, *_, rss in rows:
        print(f"  {label:<20}" + "  ".join(f"{r:.10g}" for r in rss))


if __name__ == "__main__":
    main()
