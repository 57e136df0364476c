"""Piecewise-constant diet histories.

A :class:`DietHistory` is the sequence of diets an animal ate: an initial diet and a list of
changes ``(time, value)``. Between switch times the diet is constant, so the kinetic models
solve it exactly from switch to switch.

When the initial diet began is known (``start``; a diets table's first row gives it) and so is
the diet eaten before it (``previous``), the models start the tissue at equilibrium with that
earlier diet at ``start`` and follow the whole history. Without ``previous`` the tissue is
assumed to be at equilibrium with the initial diet at the first switch (unless the model says
otherwise), and a fit's trust notes say how many half-lives of the slowest pool the initial
diet had been fed by then.

A diet value may be unknown (``None`` or NaN): the model then fits the tissue's plateau for
that diet instead of computing it from the diet value and the separation.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

import numpy as np

from .errors import DataError

__all__ = ["DietHistory", "diet_for_series"]


def _try_float(v):
    """``float(v)``, or None when ``v`` is not a number."""
    try:
        return float(v)
    except (TypeError, ValueError):
        return None


def _as_start(start, times: list) -> float | None:
    """The time the initial diet began: None, or a finite number before the first change."""
    if start is None:
        return None
    x = _try_float(start)
    if x is None or isinstance(start, bool) or not math.isfinite(x):
        raise DataError(f"'start' must be a finite number or None; got {start!r}")
    if times and x >= times[0]:
        raise DataError(f"'start' (when the first diet began) must come before the first "
                        f"change (t = {times[0]:g}); got {x:g}")
    return x


def _as_value(v, what: str) -> float:
    """A diet value: a finite float, or NaN for unknown."""
    if v is None:
        return math.nan
    try:
        x = float(v)
    except (TypeError, ValueError):
        raise DataError(
            f"{what}: diet value must be a number or None (unknown), got {v!r}"
        ) from None
    if math.isinf(x):
        raise DataError(f"{what}: diet value must be finite or None (unknown), got {v!r}")
    return x


class DietHistory:
    """A piecewise-constant diet history.

    Parameters
    ----------
    initial : float or None
        Value of the diet eaten before the first change (δ in ‰ on the isotope's scale).
        ``None`` means unknown (its tissue plateau is then fitted).
    changes : sequence of (time, value)
        Each change: the time the new diet begins (in the samples' time unit, from the
        experiment's time origin) and its value (``None`` for unknown). Times must be finite
        and strictly increasing.
    start : float, optional
        Time the initial diet began (same unit and origin), before the first change. None
        (the default): long before, the tissue at equilibrium with it.
    previous : float or None, optional
        δ (‰) of the diet eaten before ``start`` (needs ``start``). When known, the model
        starts the tissue at equilibrium with it at ``start`` and solves the whole history;
        None (the default): unknown, equilibrium with the initial diet is assumed.
    isotope : str, optional
        Isotope code the values refer to (``"d13C"``, ...), for labels and checks.
    label : str, optional
        Free text (a group name, say) used in summaries.

    Raises
    ------
    DataError
        When a value is not a number or None, ``changes`` is not a sequence of pairs, the
        switch times are not finite and strictly increasing, ``start`` is not a finite number
        before the first change, or ``previous`` is given without ``start``; the message
        names ``initial``, ``changes``, ``changes[i]``, ``start`` or ``previous``.

    Examples
    --------
    >>> d = DietHistory(-26.0, changes=[(0.0, -12.0), (120.0, -26.0)])
    >>> d.value_at([-1.0, 0.0, 130.0]).tolist()
    [-26.0, -12.0, -26.0]
    >>> d.switch_times.tolist()
    [0.0, 120.0]
    """

    def __init__(
        self,
        initial,
        changes: Iterable[Sequence] = (),
        *,
        start: float | None = None,
        previous=None,
        isotope: str | None = None,
        label: str | None = None,
    ):
        init = _as_value(initial, "initial")
        times: list[float] = []
        values: list[float] = [init]
        if isinstance(changes, (str, bytes)) or not isinstance(changes, Iterable):
            raise DataError("'changes' must be a sequence of (time, value) pairs, e.g. "
                            f"[(0.0, -12.0)]; got {type(changes).__name__} {changes!r:.60}")
        for i, ch in enumerate(changes):
            try:
                t, v = ch
            except (TypeError, ValueError):
                raise DataError(
                    f"changes[{i}]: each change must be a pair (time, value), got {ch!r}"
                ) from None
            try:
                tf = float(t)
            except (TypeError, ValueError):
                raise DataError(f"changes[{i}]: time must be a number, got {t!r}") from None
            if not math.isfinite(tf):
                raise DataError(f"changes[{i}]: time must be finite, got {t!r}")
            if times and tf <= times[-1]:
                raise DataError(
                    f"changes[{i}]: switch times must be strictly increasing; "
                    f"{tf!r} follows {times[-1]!r}"
                )
            times.append(tf)
            values.append(_as_value(v, f"changes[{i}]"))
        self._start = _as_start(start, times)
        self._previous = _as_value(previous, "previous")
        if self._start is None and math.isfinite(self._previous):
            raise DataError(f"'previous' (the diet before the first) needs 'start', the time "
                            f"the first diet began; got previous={previous!r} without it")
        self._times = np.asarray(times, dtype=float)
        self._values = np.asarray(values, dtype=float)
        self.isotope = isotope
        self.label = label

    # -- constructors -------------------------------------------------------------------
    @classmethod
    def step(cls, before, after, at: float = 0.0, **kwargs) -> DietHistory:
        """Make a history with one switch from diet ``before`` to diet ``after`` at ``at``.

        Parameters
        ----------
        before : float or None
            δ (‰) of the diet eaten before the switch; ``None`` for unknown.
        after : float or None
            δ (‰) of the diet eaten from ``at`` on; ``None`` for unknown.
        at : float, default=0.0
            Time of the switch, in the samples' time unit (days by default).
        **kwargs
            ``isotope=`` and ``label=``, as for :class:`DietHistory`.

        Returns
        -------
        DietHistory
            The history ``DietHistory(before, changes=[(at, after)], **kwargs)``.

        Examples
        --------
        >>> DietHistory.step(-26.0, -12.0, at=0.0)
        DietHistory(initial=-26, t=0: -12)
        """
        return cls(before, changes=[(at, after)], **kwargs)

    @classmethod
    def from_table(cls, frame, *, time_column: str = "start", value_column: str = "value",
                   previous=None, isotope: str | None = None,
                   label: str | None = None) -> DietHistory:
        """Build a history from the rows of a diets table (one group and one isotope).

        The earliest row is the initial diet, its start time the history's ``start``; every
        later row is a change. A blank value means the diet's value is unknown and its plateau
        is fitted.

        Parameters
        ----------
        frame : pandas.DataFrame
            Rows of one group and isotope, sorted by start time, with the columns
            ``time_column`` and ``value_column`` (and optionally ``isotope``). Not modified.
        time_column : str, default="start"
            Column of the times each diet begins (samples' time unit, days by default).
        value_column : str, default="value"
            Column of the diets' δ (‰); blank (NaN) for unknown.
        previous : float or None, optional
            δ (‰) of the diet eaten before the first row's; when given the whole history is
            solved from equilibrium with it (see :class:`DietHistory`).
        isotope : str, optional
            Isotope code; default: the first value of an ``isotope`` column, if any.
        label : str, optional
            Free text used in summaries.

        Returns
        -------
        DietHistory
            The history of the table's diets.

        Raises
        ------
        DataError
            When ``frame`` is not a table, a column is missing, the table is empty, a start
            time is not a number, or start times repeat or are not sorted.
        """
        if not hasattr(frame, "columns"):
            raise DataError(f"'frame' must be a pandas DataFrame of diet rows; got "
                            f"{type(frame).__name__}")
        if time_column not in frame.columns or value_column not in frame.columns:
            raise DataError(
                f"diet table needs columns {time_column!r} and {value_column!r}; "
                f"got {list(frame.columns)}"
            )
        try:
            starts = np.asarray(frame[time_column], dtype=float)
        except (TypeError, ValueError):
            bad = [(i, v) for i, v in zip(frame.index, frame[time_column])
                   if _try_float(v) is None]
            where = f"; row {bad[0][0]!r} holds {bad[0][1]!r}" if bad else ""
            raise DataError(f"diet table: column {time_column!r} must hold numbers"
                            f"{where}") from None
        if starts.size == 0:
            raise DataError("diet table is empty: at least the initial diet is needed")
        vals = list(frame[value_column])
        order = np.argsort(starts, kind="stable")
        if np.any(np.diff(starts[order]) == 0):
            dup = starts[order][:-1][np.diff(starts[order]) == 0]
            raise DataError(f"diet table: repeated start time(s) {dup.tolist()}")
        if np.any(np.diff(starts) < 0):
            raise DataError(
                f"diet table: start times are not sorted ({starts.tolist()}); "
                "sort the rows by start time"
            )
        if isotope is None and "isotope" in frame.columns and len(frame):
            isotope = str(frame["isotope"].iloc[0])
        return cls(vals[0], changes=list(zip(starts[1:], vals[1:])), start=float(starts[0]),
                   previous=previous, isotope=isotope, label=label)

    # -- properties -----------------------------------------------------------------------
    @property
    def initial(self) -> float:
        """Value of the initial diet (NaN when unknown)."""
        return float(self._values[0])

    @property
    def start(self) -> float | None:
        """Time the initial diet began (None: long before the first change)."""
        return self._start

    @property
    def previous(self) -> float:
        """Value of the diet eaten before :attr:`start` (NaN when unknown or not given)."""
        return float(self._previous)

    @property
    def switch_times(self) -> np.ndarray:
        """Times at which the diet changes, shape (n_changes,)."""
        return self._times.copy()

    @property
    def values(self) -> np.ndarray:
        """Diet values, the initial first, shape (n_changes + 1,); NaN where unknown."""
        return self._values.copy()

    @property
    def known(self) -> np.ndarray:
        """Boolean mask of the diets whose value is known, shape (n_changes + 1,)."""
        return np.isfinite(self._values)

    @property
    def n_diets(self) -> int:
        """Number of diet periods (changes + 1)."""
        return int(self._values.size)

    @property
    def changes(self) -> list[tuple[float, float | None]]:
        """The changes as ``(time, value)`` pairs (``None`` for unknown values)."""
        return [
            (float(t), None if not np.isfinite(v) else float(v))
            for t, v in zip(self._times, self._values[1:])
        ]

    def period_index(self, t) -> np.ndarray:
        """Index of the diet period in force at each time.

        A new diet is in force from its start time on (``t >= start``).

        Parameters
        ----------
        t : float or array-like
            Times, in the samples' time unit.

        Returns
        -------
        ndarray of int
            0 for the initial diet, ``j`` for the diet of the ``j``-th change; shaped like
            ``t``.
        """
        return np.searchsorted(self._times, np.asarray(t, dtype=float), side="right")

    def value_at(self, t) -> np.ndarray:
        """Diet value in force at each time.

        Parameters
        ----------
        t : float or array-like
            Times, in the samples' time unit.

        Returns
        -------
        ndarray
            δ (‰) of the diet in force at each time (NaN where unknown), shaped like ``t``.
        """
        return self._values[self.period_index(t)]

    # -- serialisation ----------------------------------------------------------------------
    def to_dict(self) -> dict:
        """Describe the history as JSON-safe data; :meth:`from_dict` rebuilds it.

        Returns
        -------
        dict
            Keys ``initial``, ``changes`` (list of ``[time, value]``), ``start``,
            ``previous``, ``isotope``, ``label``; unknown values as ``None``.
        """
        init = None if not np.isfinite(self._values[0]) else float(self._values[0])
        prev = float(self._previous) if math.isfinite(self._previous) else None
        return {"initial": init, "changes": [list(c) for c in self.changes],
                "start": self._start, "previous": prev, "isotope": self.isotope,
                "label": self.label}

    @classmethod
    def from_dict(cls, d: dict) -> DietHistory:
        """Rebuild a history from :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A dict with keys ``initial`` and ``changes`` (and optionally ``start``,
            ``previous``, ``isotope``, ``label``), as made by :meth:`to_dict`. Not modified.

        Returns
        -------
        DietHistory
            The history described by ``d``.

        Raises
        ------
        DataError
            When ``d`` is not such a dict, or its values are refused as by the constructor.
        """
        if not isinstance(d, dict) or "initial" not in d or "changes" not in d:
            raise DataError("'d' must be a dict made by DietHistory.to_dict() (keys 'initial' "
                            f"and 'changes'); got {d!r:.80}")
        try:
            changes = [tuple(c) for c in d["changes"]]
        except TypeError:
            raise DataError(f"'d': 'changes' must be a list of [time, value] pairs; got "
                            f"{d['changes']!r:.80}") from None
        return cls(d["initial"], changes=changes, start=d.get("start"),
                   previous=d.get("previous"), isotope=d.get("isotope"), label=d.get("label"))

    def __eq__(self, other) -> bool:
        if not isinstance(other, DietHistory):
            return NotImplemented
        return (np.array_equal(self._times, other._times)
                and np.array_equal(self._values, other._values, equal_nan=True)
                and self._start == other._start
                and np.array_equal(self._previous, other._previous, equal_nan=True))

    def __repr__(self) -> str:
        def fmt(v):
            return "unknown" if not np.isfinite(v) else f"{v:g}"
        parts = [f"initial={fmt(self._values[0])}"]
        if self._start is not None:
            parts[0] += f" from t={self._start:g}"
            if np.isfinite(self._previous):
                parts.insert(0, f"previous={self._previous:g}")
        parts += [f"t={t:g}: {fmt(v)}" for t, v in zip(self._times, self._values[1:])]
        return f"DietHistory({', '.join(parts)})"


def diet_for_series(diets, subject, group, isotope):
    """The diet history of one series from a diets table: by subject, else by group.

    Parameters
    ----------
    diets : DataFrame
        A diets table (:func:`~isoturnover.read_diets`): ``isotope``, ``start``, ``value``
        and ``subject`` and/or ``group`` (or neither: one history for every series).
    subject, group : str or None
        The series' subject and group (None when unknown).
    isotope : str
        The series' isotope.

    Returns
    -------
    tuple
        ``(DietHistory, None)``, or ``(None, reason)`` when the table has no rows for it.
    """
    d = diets[diets["isotope"].astype(str) == str(isotope)]
    if "subject" in d.columns and subject is not None:
        rows = d[d["subject"].astype(str) == str(subject)]
        if len(rows):
            return DietHistory.from_table(rows.sort_values("start"), isotope=isotope), None
    if "group" in d.columns and group is not None:
        rows = d[d["group"].astype(str) == str(group)]
        if len(rows):
            return DietHistory.from_table(rows.sort_values("start"), isotope=isotope), None
    if "group" not in d.columns and "subject" not in d.columns and len(d):
        return DietHistory.from_table(d.sort_values("start"), isotope=isotope), None
    what = f"subject {subject!r}" if subject is not None else ""
    if group is not None:
        what += f"{' / ' if what else ''}group {group!r}"
    return None, f"no diet rows for {what or 'this series'} and isotope {isotope}"
