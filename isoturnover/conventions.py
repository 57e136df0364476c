"""Conventions shared by the whole public API: argument checks, interval columns, units.

One place for the rules written in DEVELOPERS.md ("One convention"): ``level=`` is a
confidence level in (0, 1), ``method=`` one of :data:`METHODS`, every interval table has
the columns :data:`INTERVAL_COLUMNS`, every bound a status from :data:`STATUSES`, and a bad
argument raises :class:`~isoturnover.DataError` (a ``ValueError``) naming the argument, the
allowed values and what was given.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from .errors import DataError

__all__ = [
    "check_name_tuple",
    "check_pool_numbers",
    "check_named_values",
    "METHODS",
    "STATUSES",
    "INTERVAL_COLUMNS",
    "CAUTION",
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
#: The caution every report, results folder, plan and field estimate carries (one text).
CAUTION = (
    "Animal experiments and field sampling need the approval of the local animal-care "
    "authority (human hair or blood: a human-research ethics board). These results and plans "
    "support that process; they do not replace it."
)
#: Columns every interval table starts with (after its own key columns).
INTERVAL_COLUMNS = ("estimate", "lower", "upper", "level", "method", "lower_status",
                    "upper_status")
#: Words for the time units a table can carry.
TIME_UNITS = {"d": "days", "h": "hours", "w": "weeks", "min": "minutes", "y": "years"}


def check_level(level) -> float:
    """Check a confidence level: a number strictly between 0 and 1 (0.95 for 95 %).

    Parameters
    ----------
    level : float
        The confidence level (a fraction, not a percentage).

    Returns
    -------
    float
        ``level`` as a float.

    Raises
    ------
    DataError
        When ``level`` is not a number or not strictly between 0 and 1.
    """
    try:
        lv = float(level)
    except (TypeError, ValueError):
        raise DataError(f"'level' must be a number between 0 and 1; got {level!r}") from None
    if not 0 < lv < 1:
        raise DataError(f"'level' must be between 0 and 1 (0.95 for 95 %); got {level!r}")
    return lv


def check_method(method, allowed=METHODS) -> str:
    """Check an interval method: one of ``allowed``, spelled exactly (no prefix matching).

    Parameters
    ----------
    method : str
        The method asked for.
    allowed : sequence of str, default=METHODS
        The methods the caller offers.

    Returns
    -------
    str
        ``method`` unchanged.

    Raises
    ------
    DataError
        When ``method`` is not a string among ``allowed``.
    """
    if not isinstance(method, str) or method not in allowed:
        raise DataError(
            f"'method' must be one of {', '.join(repr(m) for m in allowed)}; got {method!r}"
        )
    return method


def check_choice(name: str, value, allowed) -> str:
    """Check a string option: one of ``allowed``, spelled exactly.

    Parameters
    ----------
    name : str
        The argument's name, used in the message.
    value : str
        The value given.
    allowed : sequence of str
        The allowed values, in the order the message lists them.

    Returns
    -------
    str
        ``value`` unchanged.

    Raises
    ------
    DataError
        When ``value`` is not a string among ``allowed``; the message names the argument,
        the choices and what was given.
    """
    if not isinstance(value, str) or value not in allowed:
        raise DataError(
            f"'{name}' must be one of {', '.join(repr(a) for a in allowed)}; got {value!r}"
        )
    return value


def check_positive_int(name: str, value, minimum: int = 1) -> int:
    """Check an integer argument (a bool is refused) of at least ``minimum``.

    Parameters
    ----------
    name : str
        The argument's name, used in the message.
    value : int
        The value given (a Python or numpy integer).
    minimum : int, default=1
        The smallest allowed value.

    Returns
    -------
    int
        ``value`` as a Python int.

    Raises
    ------
    DataError
        When ``value`` is not an integer, is a bool, or is below ``minimum``.
    """
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise DataError(f"'{name}' must be an integer >= {minimum}; got {value!r}")
    return int(value)


def check_n_jobs(value, name: str = "n_jobs") -> int:
    """Check a number of parallel workers: a positive integer, or -1 for all cores.

    joblib's convention for ``n_jobs``; a bool, 0 and values below -1 are refused.

    Parameters
    ----------
    value : int
        The number of workers given.
    name : str, default="n_jobs"
        The argument's name, used in the message.

    Returns
    -------
    int
        ``value`` as a Python int.

    Raises
    ------
    DataError
        When ``value`` is not an integer >= 1 or -1.
    """
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) \
            or not (value >= 1 or value == -1):
        raise DataError(f"'{name}' must be a positive integer (number of parallel workers) or "
                        f"-1 (all cores); got {value!r}")
    return int(value)


def unit_word(unit: str) -> str:
    """Give the word for a time-unit code (``"d"`` → ``"days"``).

    Parameters
    ----------
    unit : str
        A code of :data:`TIME_UNITS` or any other label.

    Returns
    -------
    str
        The word for a known code; any other label unchanged.
    """
    return TIME_UNITS.get(unit, unit)


def check_named_values(what: str, values, allowed, *, owner: str = "",
                       rules=None) -> dict[str, float]:
    """A mapping of names to finite numbers, every name among ``allowed``.

    The one check of the ``fixed=``, ``init=`` and parameter-value arguments: names known,
    values numbers, finite, and within any limit a name has.

    Parameters
    ----------
    what : str
        The argument's name, used in every message (``"fixed"``, ``"init"``).
    values : Mapping or None
        Name → number. ``None`` gives an empty dict.
    allowed : sequence of str
        The names that may appear, in the order the message lists them.
    owner : str, optional
        Words naming whose names they are, for the unknown-name message (``"curve
        'logistic'"``, ``"this model"``).
    rules : Mapping of str to (callable, str), optional
        Extra condition of a name: ``rules[name] = (ok, requirement)``, ``ok(x) -> bool`` on
        the float value and ``requirement`` the words of the message (``"must be > 0"``).

    Returns
    -------
    dict of str to float
        A new dict in the input's order (the input is not modified).

    Raises
    ------
    DataError
        When ``values`` is not a mapping, a name is not in ``allowed`` (with the closest
        allowed name as a hint), a value is not a finite number, or a rule fails.
    """
    import difflib
    import math
    from collections.abc import Mapping

    if values is None:
        return {}
    if not isinstance(values, Mapping):
        raise DataError(f"'{what}' must be a mapping of parameter name to value; got "
                        f"{type(values).__name__}")
    allowed = list(allowed)
    rules = rules or {}
    out = {}
    for name, val in values.items():
        if name not in allowed:
            near = difflib.get_close_matches(str(name), allowed, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            whose = f"the parameters of {owner}" if owner else "the allowed parameters"
            raise DataError(f"'{what}' has unknown parameter {name!r}{hint}; {whose} are "
                            f"{', '.join(allowed)}")
        try:
            x = float(val)
        except (TypeError, ValueError):
            raise DataError(f"'{what}[{name!r}]' must be a number; got {val!r:.80}") \
                from None
        if not math.isfinite(x):
            raise DataError(f"'{what}[{name!r}]' must be finite; got {val!r:.80}")
        if name in rules:
            ok, requirement = rules[name]
            if not ok(x):
                raise DataError(f"'{what}[{name!r}]' {requirement}; got {val!r:.80}")
        out[name] = x
    return out


def check_name_tuple(what, value, example):
    """A non-empty tuple of distinct strings from a string or a sequence of strings.

    Parameters
    ----------
    what : str
        The argument's name, for messages.
    value : str or sequence of str
        What was given.
    example : str
        An example of a good value, for messages.

    Returns
    -------
    tuple of str

    Raises
    ------
    DataError
        For another type, an empty sequence, a non-string entry or a repeated name.
    """
    if isinstance(value, str):
        return (value,)
    if isinstance(value, Mapping) or not isinstance(value, (list, tuple, np.ndarray, range)):
        raise DataError(f"'{what}' must be a string or a sequence of strings ({example}); got "
                        f"{value!r} ({type(value).__name__})")
    out = tuple(value)
    if not out:
        raise DataError(f"'{what}' is empty: give at least one ({example})")
    bad = [v for v in out if not isinstance(v, str)]
    if bad:
        raise DataError(f"'{what}' entries must be strings ({example}); got {bad[0]!r} "
                        f"({type(bad[0]).__name__})")
    dup = sorted({v for v in out if out.count(v) > 1})
    if dup:
        raise DataError(f"'{what}' names {', '.join(map(repr, dup))} more than once; got "
                        f"{value!r}")
    return out


def check_pool_numbers(pools, structures, max_pools):
    """``pools`` as a tuple of distinct pool numbers (empty only without parallel models).

    A bare integer is one candidate; a string, a float, None or a mapping is refused with
    a DataError naming what is expected (not the TypeError of iterating it).

    Parameters
    ----------
    pools : int or sequence of int
        Pool numbers of the candidate models.
    structures : sequence of str
        The structures asked for (``"parallel"``, ``"chain"``).
    max_pools : int
        The largest number of pools a model may have.

    Returns
    -------
    tuple of int
    """
    example = f"integers from 1 to {max_pools}, e.g. pools=2 or pools=(1, 2)"
    if isinstance(pools, (int, np.integer)) and not isinstance(pools, bool):
        pools = (pools,)
    elif isinstance(pools, Mapping) or not isinstance(pools, (list, tuple, np.ndarray, range)):
        raise DataError(f"'pools' must be a number of pools or a sequence of them ({example}); "
                        f"got {pools!r} ({type(pools).__name__})")
    pools = tuple(pools)
    for p in pools:
        if isinstance(p, bool) or not isinstance(p, (int, np.integer)) \
                or not 1 <= p <= max_pools:
            raise DataError(f"'pools' entries must be integers from 1 to {max_pools}; got "
                            f"{p!r} ({type(p).__name__}); e.g. pools=2 or pools=(1, 2)")
    dup = sorted({int(p) for p in pools if pools.count(p) > 1})
    if dup:
        raise DataError(f"'pools' names {', '.join(map(str, dup))} more than once; got "
                        f"{pools!r}")
    if not pools and "parallel" in structures:
        raise DataError(f"'pools' is empty, so no parallel model would be fitted: give "
                        f"{example} (or structures=('chain',) alone)")
    return tuple(int(p) for p in pools)
