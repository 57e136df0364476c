"""The report's figures: each drawn once, in worker processes when there are many.

:class:`FigureJobs` collects the figures of a report (per-series overviews, growth curves,
model weights, the study at a glance). With one worker they are drawn in this process when
collected; with more, each is pickled at once and submitted to joblib's loky executor, so
the workers draw while the caller builds the text. A worker draws a figure with the same
code as this process and the caller's changed ``rcParams``, so the PNG bytes do not depend
on the number of workers. :func:`render_figures` collects the PNG bytes in order.
"""

from __future__ import annotations

import io
import os

__all__ = ["DPI", "FigureJobs", "figure_workers", "render_figures", "figure_png",
           "render_figure"]

#: Resolution of the report's PNG files (dots per inch).
DPI = 200


def render_figure(fig):
    """Render a matplotlib figure to PNG bytes at :data:`DPI` and close it.

    A figure with the package's layout engine (:func:`isoturnover.plotkit.placing_layout`)
    is laid out first and then rendered without the engine, so it is walked once for the
    layout and once for the pixels.

    Parameters
    ----------
    fig : matplotlib Figure
        The figure (closed afterwards, also on failure).

    Returns
    -------
    bytes
        The PNG file.
    """
    import matplotlib.pyplot as plt

    try:
        engine = fig.get_layout_engine()
        if hasattr(engine, "pending"):
            # the package's own layout (plotkit.placing_layout): axes placed and legends
            # kept off the data now, once, at the resolution of the file (so the text
            # measured here is measured once); without an engine savefig then walks the
            # figure once, to render it (with one, it walks it first to lay it out again)
            fig.set_dpi(DPI)
            engine.execute(fig)
            fig.set_layout_engine(None)
        buf = io.BytesIO()
        # zlib level 3 instead of 6: the same pixels, about 7 % larger files, a third of
        # the compression time
        fig.savefig(buf, format="png", dpi=DPI, pil_kwargs={"compress_level": 3})
        return buf.getvalue()
    finally:
        plt.close(fig)


def figure_png(kind, payload, level):
    """Draw one report figure and render it to PNG bytes (in this process).

    Parameters
    ----------
    kind : {"overview", "segments", "growth", "weights", "study"}
        The figure: :func:`~isoturnover.plotting.plot_overview` of a fit,
        :func:`~isoturnover.plotsegments.plot_segments` of a segment fit,
        :func:`~isoturnover.plotting.plot_growth` of ``(growth fit, time unit, turnover fit
        or None)``, :func:`~isoturnover.plotting.plot_weights` of a FitSet, or
        :func:`~isoturnover.plotstudy.plot_study` of a half-life table.
    payload : object
        What the figure is drawn from (see ``kind``).
    level : float
        Confidence level of bands and intervals, in (0, 1).

    Returns
    -------
    bytes
        The PNG file at :data:`DPI`.
    """
    from . import plotting as _plotting

    if kind == "overview":
        fig = _plotting.plot_overview(payload, level=level)
    elif kind == "segments":
        from .plotsegments import plot_segments

        fig = plot_segments(payload).figure
    elif kind == "growth":
        growth, unit, turnover_fit = payload
        kw = {} if turnover_fit is None else {"turnover_fit": turnover_fit}
        fig = _plotting.plot_growth(growth, time_unit=unit, **kw).figure
    elif kind == "weights":
        fig = _plotting.plot_weights(payload).figure
    else:
        from .plotstudy import plot_study

        fig = plot_study(payload, level=level)
    return render_figure(fig)


def _worker_png(data, level, rc):
    """A worker's job: unpickle (kind, payload), draw with the caller's changed rcParams."""
    import pickle

    import matplotlib

    matplotlib.use("Agg")
    kind, payload = pickle.loads(data)
    with matplotlib.rc_context(rc):
        return figure_png(kind, payload, level)


def _lower_priority():
    """A figure worker yields to the caller: the fitting and intervals the caller computes
    meanwhile are the longer path, the figures fill the time a core would be idle."""
    try:
        os.nice(5)
    except (AttributeError, OSError):  # pragma: no cover - no nice on this system
        pass


def _rc_changes():
    """The caller's rcParams that differ from those read at import (so workers match)."""
    import matplotlib as mpl

    out = {}
    for k, v in mpl.rcParams.items():
        if k in ("backend", "backend_fallback", "interactive"):
            continue
        try:
            same = bool(v == mpl.rcParamsOrig[k])
        except (KeyError, TypeError, ValueError):
            same = False
        if not same:
            out[k] = v
    return out


def figure_workers(n_jobs, n_figures):
    """How many worker processes draw the report's figures.

    Parameters
    ----------
    n_jobs : int or None
        ``None``: up to two workers when joblib is installed, there are at least eight
        figures and the machine has two cores or more; 1: in this process; a positive
        integer or -1 (all cores): that many (joblib's convention).
    n_figures : int
        Number of figures to draw.

    Returns
    -------
    int
        Workers to start (1: draw in this process); never more than ``n_figures``.

    Raises
    ------
    DataError
        When ``n_jobs`` is not None, a positive integer or -1.
    """
    from .conventions import check_n_jobs
    from .groups import parallel_workers

    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        cores = os.cpu_count() or 1
    if n_jobs is None:
        if n_figures < 8 or cores < 2:
            return 1
        try:
            import joblib  # noqa: F401
        except ImportError:  # pragma: no cover - joblib is optional
            return 1
        return min(2, n_figures)
    n = check_n_jobs(n_jobs)
    n = parallel_workers(n)  # 1 (after a warning) without joblib
    if n == -1:
        n = cores
    return max(1, min(n, n_figures))


def _dumps(obj):
    """Pickle for a worker: the standard pickler, or cloudpickle for what it cannot handle
    (functions defined in a notebook, a lambda in a model)."""
    import pickle

    try:
        return pickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL)
    except (pickle.PicklingError, AttributeError, TypeError):
        try:
            import cloudpickle
        except ImportError:  # pragma: no cover - joblib's own copy
            from joblib.externals import cloudpickle
        return cloudpickle.dumps(obj)


class FigureJobs:
    """The report's figures, each drawn once: here, or by worker processes.

    With workers (at a lower scheduling priority than the caller, whose work is the longer
    path), each figure is submitted at once to joblib's loky executor, so it is drawn
    while the report's text is built; per-series figures can be submitted even
    earlier (:meth:`draw_ahead`, while the rest of a study is fitted). PNG bytes do not
    depend on the number of workers: each figure is drawn the same way from the same
    pickled fit, with the caller's changed rcParams.

    Parameters
    ----------
    workers : int
        Worker processes (1: draw in this process, when collected); joblib must be
        installed for more than one (see :func:`figure_workers`).
    level : float
        Confidence level of bands and intervals, in (0, 1).
    """

    def __init__(self, workers, level):
        self.level = level
        self.jobs = []  # (file name, ("local", kind, payload) | ("future", future))
        self.ahead = {}  # figure key -> ("future", future): drawn before it was named
        self.executor = None
        if workers > 1:
            # a pool of the report's own, shut down when the figures are in: joblib's
            # reusable executor is left to joblib.Parallel (sharing it breaks Parallel)
            from joblib.externals.loky import ProcessPoolExecutor

            self.rc = _rc_changes()
            self.executor = ProcessPoolExecutor(max_workers=workers,
                                                initializer=_lower_priority)

    def add(self, name, kind, payload):
        """Add a figure (with workers: pickle it now and submit it).

        Parameters
        ----------
        name : str
            File name of the PNG.
        kind : str
            The figure, see :func:`figure_png`.
        payload : object
            What it is drawn from, see :func:`figure_png`; pickled here, so later changes
            to it (caches filled by the caller) do not reach the worker.
        """
        job = self.ahead.pop(_figure_key(kind, payload), None)
        if job is not None:
            self.jobs.append((name, job))
        elif self.executor is None:
            self.jobs.append((name, ("local", kind, payload)))
        else:  # pickled here, before the caller goes on to fill the fits' caches
            self.jobs.append((name, self._submit(kind, payload)))

    def _submit(self, kind, payload):
        data = _dumps((kind, payload))
        return ("future", self.executor.submit(_worker_png, data, self.level, self.rc))

    def draw_ahead(self, kind, payload):
        """Start drawing a figure before the report names it (with workers only).

        The figure is pickled now and drawn by a worker while the caller goes on (fitting
        the next part of a study, say); :meth:`add` of the same ``kind`` and payload (the
        same objects) later takes the drawing instead of starting another. Only the
        per-series figures ("overview", "growth") can be drawn ahead; others are ignored,
        as is everything without workers.

        Parameters
        ----------
        kind : str
            The figure, see :func:`figure_png`.
        payload : object
            What it is drawn from, see :func:`figure_png`.
        """
        key = _figure_key(kind, payload)
        if self.executor is not None and key is not None and key not in self.ahead:
            self.ahead[key] = self._submit(kind, payload)

    def cancel(self):
        """Cancel the figures not yet started by a worker (after a failure)."""
        for _, job in self.jobs:
            if job[0] == "future":
                job[1].cancel()
        self.close()

    def close(self):
        """Shut the worker processes down (waiting for running figures); figures drawn
        ahead that no report took are cancelled."""
        for job in self.ahead.values():
            job[1].cancel()
        self.ahead.clear()
        if self.executor is not None:
            self.executor.shutdown(wait=True)
            self.executor = None


def _figure_key(kind, payload):
    """What identifies a per-series figure drawn ahead: its kind and the objects it is
    drawn from (the same objects, alive in the caller, have the same ids); None for the
    figures of a whole study."""
    if kind in ("overview", "segments"):
        return (kind, id(payload))
    if kind == "growth":
        growth, unit, turnover_fit = payload
        return ("growth", id(growth), str(unit), id(turnover_fit))
    return None


def render_figures(figures):
    """PNG bytes of every figure of a report, in the order they were added.

    Parameters
    ----------
    figures : FigureJobs
        The report's figure jobs (drawn here, or collected from the worker processes).

    Returns
    -------
    list of (str, bytes)
        File name and PNG bytes of each figure.
    """
    out = []
    try:
        for name, job in figures.jobs:
            if job[0] == "local":
                out.append((name, figure_png(job[1], job[2], figures.level)))
            else:
                out.append((name, job[1].result()))
    except BaseException:
        figures.cancel()
        raise
    figures.close()
    return out
