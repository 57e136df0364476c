"""Argument types of the ``isoturnover`` command line: each parses one option as typed.

Every function takes the text of one option and returns its value, or raises
:class:`argparse.ArgumentTypeError` with a message naming what is expected (argparse turns it
into the command line's one line ``error: …``, exit status 2). Used by :mod:`isoturnover.cli`.
"""

from __future__ import annotations

import argparse

__all__ = ["whole_number", "real_number", "fail", "parse_baseline", "parse_column_map",
           "parse_count", "parse_date_format",
           "parse_delta", "parse_fix", "parse_fraction", "parse_fractions", "parse_growth_curve",
           "parse_growth_rate", "parse_length_unit",
           "parse_jobs", "parse_kinetics_list", "parse_level", "parse_n_sim",
           "parse_non_negative", "parse_number", "parse_number_list", "parse_pairs",
           "parse_pool_count", "parse_pools", "parse_positive", "parse_positive_int",
           "parse_time_unit", "parse_times", "parse_tissue_values", "parse_names"]


def parse_jobs(text):
    """Parse ``--jobs N``: a positive integer, or -1 for all cores.

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    int
        The number of parallel workers (-1: all cores).

    Raises
    ------
    argparse.ArgumentTypeError
        When ``text`` is not such a number (argparse turns it into one ``error:`` line).
    """
    from .conventions import check_n_jobs

    try:
        return check_n_jobs(int(text), "--jobs")
    except ValueError:  # not a number, or refused by check_n_jobs (a DataError)
        raise argparse.ArgumentTypeError(
            f"must be a positive integer (number of parallel workers) or -1 (all cores); "
            f"got {text!r}") from None


def fail(text, what):
    raise argparse.ArgumentTypeError(f"{what}; got {text!r}")


def parse_pools(text):
    """Parse ``--pools 1,2,3``: distinct numbers of parallel pools, each from 1 to 4.

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    tuple of int
        The numbers of pools to try.

    Raises
    ------
    argparse.ArgumentTypeError
        When ``text`` is not such a list.
    """
    from .kinetics import MAX_POOLS

    what = f"must be distinct numbers of pools from 1 to {MAX_POOLS}, such as 1,2"
    try:
        pools = tuple(int(x) for x in text.split(","))
    except ValueError:
        fail(text, what)
    if not pools or len(set(pools)) < len(pools) or not all(1 <= n <= MAX_POOLS
                                                            for n in pools):
        fail(text, what)
    return pools


def parse_time_unit(text):
    """Parse ``--time-unit``: d, h or w (day(s), hour(s), week(s) also read).

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    str
        The unit's code, ``"d"``, ``"h"`` or ``"w"``.

    Raises
    ------
    argparse.ArgumentTypeError
        For another unit.
    """
    code = {"d": "d", "day": "d", "days": "d", "h": "h", "hour": "h", "hours": "h",
            "w": "w", "week": "w", "weeks": "w"}.get(text.strip().lower())
    if code is None:
        fail(text, "must be d, h or w (days, hours, weeks)")
    return code


def parse_date_format(text):
    """Parse ``--date-format``: a strptime format with % directives (``%d/%m/%Y``).

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    str
        ``text`` unchanged.

    Raises
    ------
    argparse.ArgumentTypeError
        When ``text`` has no % directive.
    """
    if "%" not in text:
        fail(text, "must be a format such as %d/%m/%Y (day first) or %m/%d/%Y "
                    "(month first), with % directives")
    return text


def parse_growth_curve(text):
    """Parse ``--growth-curve``: the name of a growth curve of the library.

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    str

    Raises
    ------
    argparse.ArgumentTypeError
        For a name that is not among :data:`~isoturnover.growthlaws.CURVES`.
    """
    from .growthlaws import CURVES

    if text not in CURVES:
        fail(text, f"must be one of {', '.join(CURVES)}")
    return text


def parse_pairs(text, example):
    """``a=b,c=d`` as a list of (a, b) text pairs; an ArgumentTypeError naming ``example``."""
    out = []
    for item in text.split(","):
        name, eq, value = item.partition("=")
        if not eq or not name.strip() or not value.strip():
            fail(text, f"must be NAME=VALUE pairs separated by commas, such as {example}")
        out.append((name.strip(), value.strip()))
    if len({n for n, _ in out}) < len(out):
        fail(text, f"names one thing twice (pairs such as {example})")
    return out


def parse_column_map(allowed, example):
    """A parser of ``--columns``-style options: ``canonical=yours,...`` to the readers'
    mapping ``{yours: canonical}``, canonical names among ``allowed``."""

    def parse(text):
        mapping = {}
        for canonical, yours in parse_pairs(text, example):
            if canonical not in allowed:
                fail(text, f"{canonical!r} is not a column name of the table; names: "
                            f"{', '.join(allowed)} (pairs such as {example})")
            if yours in mapping:
                fail(text, f"maps your column {yours!r} twice")
            mapping[yours] = canonical
        return mapping

    parse.__doc__ = f"Parse a column mapping such as {example}."
    return parse


def parse_fix(text):
    """Parse ``--fix delta0=-25,lag=0``: parameters held at given values.

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    dict of str to float
        Parameter name -> value (in the parameter's unit: ‰ for levels, 1/time for
        rates).

    Raises
    ------
    argparse.ArgumentTypeError
        For a malformed pair or a value that is not a finite number.
    """
    import math

    out = {}
    for name, value in parse_pairs(text, "delta0=-25,lag=0"):
        try:
            out[name] = float(value)
        except ValueError:
            fail(text, f"the value of {name} is not a number")
        if not math.isfinite(out[name]):
            fail(text, f"the value of {name} is not a finite number")
    return out


def parse_baseline(text):
    """Parse ``--baseline``: δ (‰) of the unenriched material, one number or one per isotope.

    Parameters
    ----------
    text : str
        ``-25.5`` or ``d13C=-25.5,d15N=6``.

    Returns
    -------
    float or dict of str to float
        δ in ‰ (one for all isotopes, or isotope code -> δ).

    Raises
    ------
    argparse.ArgumentTypeError
        When a value is not a finite number.
    """
    import math

    if "=" not in text:
        try:
            v = float(text)
        except ValueError:
            v = float("nan")
        if not math.isfinite(v):
            fail(text, "must be a δ value in per mil, such as -25.5, or one per isotope, "
                        "such as d13C=-25.5,d15N=6")
        return v
    out = {}
    for code, value in parse_pairs(text, "d13C=-25.5,d15N=6"):
        try:
            out[code] = float(value)
        except ValueError:
            fail(text, f"the value for {code} is not a number")
        if not math.isfinite(out[code]):
            fail(text, f"the value for {code} is not a finite number")
    return out


# ----------------------------------------------------------------------------------------
# `plan`: values of its options
# ----------------------------------------------------------------------------------------
def parse_number(text, what):
    """A finite float from ``text``, or an ArgumentTypeError saying ``what`` it must be."""
    import math

    try:
        v = float(text)
    except ValueError:
        v = math.nan
    if not math.isfinite(v):
        fail(text, what)
    return v


def parse_delta(text):
    """Parse ``--from`` and ``--to``: a δ value in ‰ (any finite number).

    Parameters
    ----------
    text : str
        The argument as typed (``-22``).

    Returns
    -------
    float
        δ in ‰.

    Raises
    ------
    argparse.ArgumentTypeError
        When ``text`` is not a finite number.
    """
    return parse_number(text, "must be a δ value in per mil, such as -22")


def whole_number(minimum, what):
    """A parser of whole numbers >= ``minimum``; ``what`` is the message when the text is not.

    Parameters
    ----------
    minimum : int
        The smallest value accepted.
    what : str
        What the option must be (``"must be a whole number >= 1"``).

    Returns
    -------
    callable
        ``parse(text) -> int``, raising :class:`argparse.ArgumentTypeError`.
    """
    def parse(text):
        try:
            n = int(text)
        except ValueError:
            n = minimum - 1
        if n < minimum:
            fail(text, what)
        return n

    return parse


def real_number(test, what):
    """A parser of finite numbers passing ``test``; ``what`` is the message otherwise.

    Parameters
    ----------
    test : callable
        ``test(value) -> bool``.
    what : str
        What the option must be (``"must be a positive number"``).

    Returns
    -------
    callable
        ``parse(text) -> float``, raising :class:`argparse.ArgumentTypeError`.
    """
    def parse(text):
        v = parse_number(text, what)
        if not test(v):
            fail(text, what)
        return v

    return parse


#: ``--n-boot`` and other counts of at least one.
parse_positive_int = whole_number(1, "must be a whole number >= 1")
#: ``--baseline`` (samples before the switch) and other counts of at least zero.
parse_count = whole_number(0, "must be a whole number >= 0")
#: ``--simulate N``: simulated experiments.
parse_n_sim = whole_number(2, "must be a whole number of simulated experiments >= 2")
#: ``--level``: a confidence level.
parse_level = real_number(lambda v: 0 < v < 1, "must be a number between 0 and 1, such as 0.95")
#: ``--fraction``: a fraction of the change.
parse_fraction = real_number(lambda v: 0 < v < 1,
                             "must be a fraction of the change between 0 and 1, such as 0.95")
#: A number > 0 (``--sd``, ``--duration``, ``--prior-cv``).
parse_positive = real_number(lambda v: v > 0, "must be a positive number")
#: A number >= 0 (``--min-spacing``, ``--lag``), in the time unit.
parse_non_negative = real_number(lambda v: v >= 0, "must be a number >= 0 (time unit)")


def parse_number_list(text, what, test):
    """Numbers separated by commas, each passing ``test``; else an ArgumentTypeError."""
    import math

    values = []
    for item in text.split(","):
        try:
            v = float(item)
        except ValueError:
            v = math.nan
        if not (math.isfinite(v) and test(v)):
            fail(text, what)
        values.append(v)
    return tuple(values)


def parse_kinetics_list(text):
    """Parse ``--half-lives`` or ``--rates``: one positive number per pool (or chain step).

    Parameters
    ----------
    text : str
        ``3,30`` (time unit for half-lives, per time unit for rates).

    Returns
    -------
    tuple of float

    Raises
    ------
    argparse.ArgumentTypeError
        When an entry is not a positive number, or there are more than the pools allowed.
    """
    from .kinetics import MAX_POOLS

    what = f"must be 1 to {MAX_POOLS} positive numbers separated by commas, such as 3,30"
    values = parse_number_list(text, what, lambda v: v > 0)
    if len(values) > MAX_POOLS:
        fail(text, what)
    return values


def parse_fractions(text):
    """Parse ``--fractions 0.4,0.6``: pool fractions, each in (0, 1).

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    tuple of float
        The fractions in the order of ``--half-lives`` (their sum is checked later).

    Raises
    ------
    argparse.ArgumentTypeError
        When an entry is not a number in (0, 1).
    """
    return parse_number_list(text, "must be fractions between 0 and 1 separated by commas, one "
                              "per pool, summing to 1, such as 0.4,0.6", lambda v: 0 < v < 1)


def parse_times(text):
    """Parse ``--fixed-times 7,14``: sampling times that must be in the plan.

    Parameters
    ----------
    text : str
        The argument as typed (time unit).

    Returns
    -------
    tuple of float

    Raises
    ------
    argparse.ArgumentTypeError
        When an entry is not a finite number.
    """
    return parse_number_list(text, "must be times separated by commas, such as 7,14",
                        lambda v: True)


def parse_pool_count(text):
    """Parse ``--pools N`` of ``plan``: one number of parallel pools, 1 to the maximum.

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    int

    Raises
    ------
    argparse.ArgumentTypeError
        When ``text`` is not such a number.
    """
    from .kinetics import MAX_POOLS

    try:
        n = int(text)
    except ValueError:
        n = 0
    if not 1 <= n <= MAX_POOLS:
        fail(text, f"must be one number of parallel pools from 1 to {MAX_POOLS}")
    return n


# ----------------------------------------------------------------------------------------
# `clock`: values of its options
# ----------------------------------------------------------------------------------------
def parse_tissue_values(text):
    """Parse ``--new`` and ``--old``: δ (‰) per tissue, ``plasma=-10.5,red_cells=-11``.

    Parameters
    ----------
    text : str
        ``TISSUE=δ`` pairs separated by commas; ``TISSUE:ISOTOPE=δ`` (``plasma:d15N=8``) when
        a tissue is measured for several isotopes.

    Returns
    -------
    dict
        Tissue (or (tissue, isotope)) -> δ in ‰.

    Raises
    ------
    argparse.ArgumentTypeError
        For a malformed pair or a value that is not a finite number.
    """
    import math

    example = "plasma=-10.5,red_cells=-11 (or plasma:d13C=-10.5)"
    out = {}
    for name, value in parse_pairs(text, example):
        try:
            v = float(value)
        except ValueError:
            v = math.nan
        if not math.isfinite(v):
            fail(text, f"the value for {name} is not a finite δ in per mil")
        tissue, colon, isotope = name.partition(":")
        if colon and not (tissue.strip() and isotope.strip()):
            fail(text, f"{name!r} must be TISSUE or TISSUE:ISOTOPE (pairs such as {example})")
        out[(tissue.strip(), isotope.strip()) if colon else name] = v
    return out


def parse_growth_rate(text):
    """Parse ``--growth-rate``: one rate for every tissue, or rates by tissue.

    Parameters
    ----------
    text : str
        A number (``0.4``) or ``TISSUE=RATE`` pairs separated by commas
        (``hair=0.4,whisker=0.8``); rates in length per time unit of the tables, > 0.

    Returns
    -------
    float or dict
        The rate, or tissue → rate.

    Raises
    ------
    argparse.ArgumentTypeError
        For a malformed pair or a rate that is not a positive finite number.
    """
    import math

    def rate(value, where):
        try:
            v = float(value)
        except ValueError:
            v = math.nan
        if not (math.isfinite(v) and v > 0):
            fail(text, f"{where} must be a positive growth rate (length per time unit), "
                       "such as 0.4")
        return v

    if "=" not in text:
        return rate(text, "the value")
    return {name: rate(value, f"the rate for {name}")
            for name, value in parse_pairs(text, "hair=0.4,whisker=0.8")}


def parse_names(text):
    """Parse a list of names such as ``--subjects G01,G02``.

    Parameters
    ----------
    text : str
        Names separated by commas.

    Returns
    -------
    tuple of str
        The distinct names, in the order given.

    Raises
    ------
    argparse.ArgumentTypeError
        For an empty name or a name given twice.
    """
    names = tuple(n.strip() for n in text.split(","))
    if not all(names) or len(set(names)) < len(names):
        fail(text, "must be distinct names separated by commas, such as G01,G02")
    return names


def parse_length_unit(text):
    """Parse ``--length-unit U``: the unit of segment distances, a short label (``mm``).

    Parameters
    ----------
    text : str
        The argument as typed.

    Returns
    -------
    str
        The unit (:func:`~isoturnover.segments.check_length_unit`).

    Raises
    ------
    argparse.ArgumentTypeError
        When ``text`` is empty or longer than 20 characters.
    """
    from .errors import DataError
    from .segments import check_length_unit

    try:
        return check_length_unit(text, "--length-unit")
    except DataError:
        fail(text, "--length-unit must be a short unit label such as mm or cm")
