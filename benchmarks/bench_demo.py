"""Wall time of the demo (``isoturnover demo --out DIR``) and where it goes.

Runs the demo command in this process (``isoturnover.cli.main``), with every figure and
with ``--no-figures``, and splits the wall time into phases by wrapping the library's
functions with timers:

* fitting   — :func:`isoturnover.fit_each` (the candidates of every series);
* intervals — every profile bound (``find_bound`` of profiles, derived quantities and
  growth curves) and the bootstrap, wherever it is called from (during fitting, tables or
  the report);
* tables    — ``Analysis.results_table`` and ``Analysis.fits_json`` (results.csv and
  fits.json);
* figures   — drawing and rendering the report's figures (the plotting functions, PNG
  rendering, and the parallel figure workers seen from the main process);
* report    — the rest of :func:`isoturnover.report.write_report` (text, files);
* other     — everything else (reading the tables, imports, moving files).

Time is charged to the innermost phase running (a profile bound computed while the report
is written counts as intervals, not report). Work done in worker processes is seen as the
wall time the main process waits for it, under the phase that started it.

On a shared machine other work only adds time, so each configuration is run ``--repeats``
times and the fastest run is printed (with its breakdown), with the CPU time of this process
and the load average: a wall time measured on a loaded machine says little by itself (the
figure workers then get no spare core).

The demo starts drawing each part's figures in worker processes while the next part is
fitted, so with figures the wall time is less than the sum of the phases' work: the CPU time
of the figure workers is printed beside it. ``--figure-costs`` also draws every kind of
figure here, one at a time, and prints what each costs.

Run::

    python benchmarks/bench_demo.py [--repeats 2] [--skip-no-figures] [--jobs 2]
                                    [--figure-costs]
"""

from __future__ import annotations

import argparse
import contextlib
import functools
import io
import os
import tempfile
import time
import warnings
from collections import defaultdict
from pathlib import Path

import isoturnover as iso
from isoturnover.cli import main as cli_main

PHASES = ("fitting", "intervals", "tables", "figures", "report", "other")


class Phases:
    """Exclusive wall time per phase: each interval goes to the innermost phase running."""

    def __init__(self):
        self.totals = defaultdict(float)
        self.stack = ["other"]
        self.last = time.perf_counter()

    def _tick(self):
        now = time.perf_counter()
        self.totals[self.stack[-1]] += now - self.last
        self.last = now

    def wrap(self, phase, fn):
        @functools.wraps(fn)
        def timed(*args, **kwargs):
            self._tick()
            self.stack.append(phase)
            try:
                return fn(*args, **kwargs)
            finally:
                self._tick()
                self.stack.pop()

        return timed

    def reset(self):
        self.totals.clear()
        self.stack = ["other"]
        self.last = time.perf_counter()


def _targets():
    """(owner, attribute name, phase) of every function timed; missing ones are skipped."""
    from isoturnover import (
        analysis,
        derived,
        groups,
        growthfit,
        plotting,
        profiles,
        report,
        resampling,
    )

    out = [(groups, "fit_each", "fitting"), (analysis, "fit_each", "fitting"),
           (profiles, "find_bound", "intervals"), (derived, "find_bound", "intervals"),
           (growthfit, "find_bound", "intervals"), (resampling, "bootstrap", "intervals"),
           (analysis.Analysis, "results_table", "tables"),
           (analysis.Analysis, "fits_json", "tables"),
           (report, "write_report", "report")]
    out += [(plotting, name, "figures") for name in ("plot_overview", "plot_growth",
                                                       "plot_weights")]
    # the report's own figure steps (PNG rendering; waiting for the parallel workers), and
    # the demo's figures started while the next parts are fitted (pickling them)
    out += [(report, name, "figures") for name in ("_render_figure", "render_figures")]
    out.append((analysis, "_draw_ahead", "figures"))
    try:
        from isoturnover import reportfigures
    except ImportError:  # pragma: no cover - before the figures had a module of their own
        reportfigures = None
    if reportfigures is not None:
        out += [(reportfigures, name, "figures") for name in ("render_figure", "figure_png")]
    try:
        from isoturnover import plotstudy
    except ImportError:  # pragma: no cover - before the study figure existed
        plotstudy = None
    if plotstudy is not None:
        out.append((plotstudy, "plot_study", "figures"))
    return [(o, a, p) for o, a, p in out if hasattr(o, a)]


@contextlib.contextmanager
def timed(phases):
    """Wrap every target with the phase timer for the duration of the block."""
    saved = []
    try:
        for owner, name, phase in _targets():
            fn = getattr(owner, name)
            saved.append((owner, name, fn))
            setattr(owner, name, phases.wrap(phase, fn))
        yield phases
    finally:
        for owner, name, fn in reversed(saved):
            setattr(owner, name, fn)


def _children_cpu():
    """CPU seconds of the child processes that have ended (the report's figure workers)."""
    import resource

    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def run_demo_command(figures=True, jobs=1):
    """Seconds of wall time of one ``isoturnover demo`` run, and its phase breakdown."""
    phases = Phases()
    child0 = _children_cpu()
    with tempfile.TemporaryDirectory() as tmp:
        args = ["demo", "--out", str(Path(tmp) / "out"), "--no-progress", "--jobs", str(jobs)]
        if not figures:
            args.append("--no-figures")
        with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings(), \
                timed(phases):
            warnings.simplefilter("ignore")
            phases.reset()
            t0, c0 = time.perf_counter(), time.process_time()
            code = cli_main(args)
            dt, cpu = time.perf_counter() - t0, time.process_time() - c0
            phases._tick()
        if code not in (0, None):
            raise SystemExit(f"isoturnover demo failed ({code})")
        n_png = len(list((Path(tmp) / "out").rglob("*.png")))
    return dt, dict(phases.totals), n_png, cpu, os.getloadavg()[0], _children_cpu() - child0


def figure_costs(repeats=2):
    """Seconds to draw and render each kind of report figure, here, one at a time.

    The demo is fitted once (nothing written); then every per-series figure, the weights
    and the study overview are drawn and rendered to PNG in this process
    (:func:`isoturnover.reportfigures.figure_png`), fastest of ``repeats``, so the figures'
    share of the work is known whatever runs them in parallel.

    Returns
    -------
    dict
        kind -> (number of figures, seconds per figure).
    """
    from isoturnover import report, reportfigures
    from isoturnover.analysis import run_demo

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = run_demo(None)
        merged = a.merged()
        series, _ = report._collect(merged)
        jobs = {"overview": [], "segments": [], "growth": []}
        for s in series:
            if s.fit is None:
                continue
            jobs["overview"].append(s.fit)
            if getattr(s.fit.model, "record", "points") == "segments":
                jobs["segments"].append(s.fit)
            g = getattr(s.fit.model, "growth", None)
            if g is not None:
                jobs["growth"].append((g, s.fit.time_unit, s.fit))
        summaries = {s.name: s.fit.summary(a.level, "profile") for s in series
                     if s.fit is not None}
        half_lives = {k: sm.half_lives for k, sm in summaries.items()}
        jobs["weights"] = [merged]
        jobs["study"] = [report._study_table(series, half_lives)]
        out = {}
        for kind, payloads in jobs.items():
            if not payloads:
                continue
            best = None
            for _ in range(max(1, repeats)):
                t0 = time.perf_counter()
                for payload in payloads:
                    reportfigures.figure_png(kind, payload, a.level)
                dt = (time.perf_counter() - t0) / max(len(payloads), 1)
                best = dt if best is None else min(best, dt)
            out[kind] = (len(payloads), best)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeats", type=int, default=2, help="runs per configuration (2)")
    ap.add_argument("--skip-no-figures", action="store_true",
                    help="only the run with every figure")
    ap.add_argument("--jobs", type=int, default=1, help="the demo's --jobs (1)")
    ap.add_argument("--figure-costs", action="store_true",
                    help="also draw each kind of figure here, one at a time, and print its "
                         "cost")
    args = ap.parse_args(argv)
    print(f"isoturnover {iso.__version__}")
    configs = [("demo, every figure", True)]
    if not args.skip_no_figures:
        configs.append(("demo, --no-figures", False))
    for label, figures in configs:
        best = None
        for _ in range(max(1, args.repeats)):
            res = run_demo_command(figures, args.jobs)
            if best is None or res[0] < best[0]:
                best = res
        dt, totals, n_png, cpu, load, child = best
        print(f"\n{label}, --jobs {args.jobs}: {dt:.1f} s wall time ({n_png} PNG files), "
              f"fastest of {args.repeats}; CPU time of this process {cpu:.1f} s, of the "
              f"figure workers {child:.1f} s (fitting workers not counted); load average "
              f"{load:.1f} on {os.cpu_count()} cores")
        for ph in PHASES:
            s = totals.get(ph, 0.0)
            print(f"  {ph:<10}{s:>8.1f} s {100 * s / dt:>6.1f} %")
    if args.figure_costs:
        costs = figure_costs(args.repeats)
        total = sum(n * c for n, c in costs.values())
        print(f"\nfigures drawn here one at a time: {total:.1f} s of CPU in all")
        for kind, (n, c) in costs.items():
            print(f"  {kind:<10}{n:>4} x {c:.3f} s = {n * c:5.1f} s")


if __name__ == "__main__":
    main()
