"""Conventions shared by the whole public API: argument checks, interval columns, units.

One place for the rules written in DEVELOPERS.md ("One convention"): ``level=`` is a
confidence level in (0, 1), ``method=`` one of :data:`METHODS`, every interval table has
the columns :data:`INTERVAL_COLUMNS`, every bound a status from :data:`STATUSES`, and a bad
argument raises :class:`~isoturnover.DataError` (a ``ValueError``) naming the argument, the
allowed values and what was given.
"""

from __future__ import annotations

import numpy as np

from .errors import DataError

__all__ = [
    "METHODS",
    "STATUSES",
    "INTERVAL_COLUMNS",
    "TIME_UNITS",
    "check_level",
    "check_method",
    "check_choice",
    "check_positive_int",
    "check_n_jobs",
    "unit_word",
]

#: Interval methods, in the order a user meets them.
METHODS = ("profile", "asymptotic", "bootstrap", "mcmc")
#: Status of one interval bound: ``open`` when the data do not close it (±inf, 0 or 1),
#: ``at_bound`` at a hard limit of the parameter (lag 0, a fraction 0 or 1), ``failed``
#: when it could not be computed (NaN), ``fixed`` for a fixed parameter.
STATUSES = ("ok", "open", "at_bound", "failed", "fixed", "not_available")
#: Columns every interval table starts with (after its own key columns).
INTERVAL_COLUMNS = ("estimate", "lower", "upper", "level", "method", "lower_status",
                    "upper_status")
#: Words for the time units a table can carry.
TIME_UNITS = {"d": "days", "h": "hours", "w": "weeks", "min": "minutes", "y": "years"}


def check_level(level) -> float:
    """A confidence level strictly between 0 and 1 (0.95 for 95 %), as a float."""
    try:
        lv = float(level)
    except (TypeError, ValueError):
        raise DataError(f"'level' must be a number between 0 and 1; got {level!r}") from None
    if not 0 < lv < 1:
        raise DataError(f"'level' must be between 0 and 1 (0.95 for 95 %); got {level!r}")
    return lv


def check_method(method, allowed=METHODS) -> str:
    """An interval method among ``allowed`` (exact spelling, no prefix matching)."""
    if not isinstance(method, str) or method not in allowed:
        raise DataError(
            f"'method' must be one of {', '.join(repr(m) for m in allowed)}; got {method!r}"
        )
    return method


def check_choice(name: str, value, allowed) -> str:
    """A string option among ``allowed``; the error names the argument and the choices."""
    if not isinstance(value, str) or value not in allowed:
        raise DataError(
            f"'{name}' must be one of {', '.join(repr(a) for a in allowed)}; got {value!r}"
        )
    return value


def check_positive_int(name: str, value, minimum: int = 1) -> int:
    """An integer (not a bool) at least ``minimum``."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise DataError(f"'{name}' must be an integer >= {minimum}; got {value!r}")
    return int(value)


def check_n_jobs(value, name: str = "n_jobs") -> int:
    """A number of parallel workers, joblib's convention: a positive integer, or -1 for all
    cores (not a bool, not 0, not below -1)."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) \
            or not (value >= 1 or value == -1):
        raise DataError(f"'{name}' must be a positive integer (number of parallel workers) or "
                        f"-1 (all cores); got {value!r}")
    return int(value)


def unit_word(unit: str) -> str:
    """The word for a time-unit code (``"d"`` → ``"days"``); other labels unchanged."""
    return TIME_UNITS.get(unit, unit)
