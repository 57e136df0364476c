"""The ``isoturnover`` command line: parses arguments and calls the library.

Errors reach the terminal as one line ``error: ...`` on stderr with exit status 2 (never a
traceback; ``--debug`` shows it). Nothing is written when a command fails.

Warnings of the library (:class:`~isoturnover.IsoturnoverWarning` and its subclasses: a
request for parallel workers without joblib, rows dropped or duplicated in a table, a
growth curve that did not converge...) are printed on stderr as they happen, one line
``warning: ...`` each, every distinct message once. The trust notes of the turnover fits
are not printed: they are in results.csv (column ``warnings``) and in the report. Other
warnings keep Python's own handling.
"""

from __future__ import annotations

import argparse
import sys
import warnings

EXIT_ERROR = 2


class _Parser(argparse.ArgumentParser):
    """argparse with the command line's error convention: one line ``error: ...`` on stderr
    and exit status 2 (argparse's own would print the usage block first)."""

    def error(self, message):
        self.exit(EXIT_ERROR, f"error: {message} (see {self.prog} --help)\n")


def _jobs(text):
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


def _fail(text, what):
    raise argparse.ArgumentTypeError(f"{what}; got {text!r}")


def _pools(text):
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
        _fail(text, what)
    if not pools or len(set(pools)) < len(pools) or not all(1 <= n <= MAX_POOLS
                                                            for n in pools):
        _fail(text, what)
    return pools


def _positive_int(text):
    """Parse a whole number >= 1 (``--n-boot``).

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
        When ``text`` is not a whole number >= 1.
    """
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        _fail(text, "must be a whole number >= 1")
    return n


def _level(text):
    """Parse ``--level``: a confidence level strictly between 0 and 1.

    Parameters
    ----------
    text : str
        The argument as typed (``0.95``).

    Returns
    -------
    float

    Raises
    ------
    argparse.ArgumentTypeError
        When ``text`` is not a number in (0, 1).
    """
    try:
        v = float(text)
    except ValueError:
        v = float("nan")
    if not 0 < v < 1:
        _fail(text, "must be a number between 0 and 1, such as 0.95")
    return v


def _time_unit(text):
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
        _fail(text, "must be d, h or w (days, hours, weeks)")
    return code


def _date_format(text):
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
        _fail(text, "must be a format such as %d/%m/%Y (day first) or %m/%d/%Y "
                    "(month first), with % directives")
    return text


def _growth_curve(text):
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
        _fail(text, f"must be one of {', '.join(CURVES)}")
    return text


def _pairs(text, example):
    """``a=b,c=d`` as a list of (a, b) text pairs; an ArgumentTypeError naming ``example``."""
    out = []
    for item in text.split(","):
        name, eq, value = item.partition("=")
        if not eq or not name.strip() or not value.strip():
            _fail(text, f"must be NAME=VALUE pairs separated by commas, such as {example}")
        out.append((name.strip(), value.strip()))
    if len({n for n, _ in out}) < len(out):
        _fail(text, f"names one thing twice (pairs such as {example})")
    return out


def _column_map(allowed, example):
    """A parser of ``--columns``-style options: ``canonical=yours,...`` to the readers'
    mapping ``{yours: canonical}``, canonical names among ``allowed``."""

    def parse(text):
        mapping = {}
        for canonical, yours in _pairs(text, example):
            if canonical not in allowed:
                _fail(text, f"{canonical!r} is not a column name of the table; names: "
                            f"{', '.join(allowed)} (pairs such as {example})")
            if yours in mapping:
                _fail(text, f"maps your column {yours!r} twice")
            mapping[yours] = canonical
        return mapping

    parse.__doc__ = f"Parse a column mapping such as {example}."
    return parse


def _fix(text):
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
    for name, value in _pairs(text, "delta0=-25,lag=0"):
        try:
            out[name] = float(value)
        except ValueError:
            _fail(text, f"the value of {name} is not a number")
        if not math.isfinite(out[name]):
            _fail(text, f"the value of {name} is not a finite number")
    return out


def _baseline(text):
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
            _fail(text, "must be a δ value in per mil, such as -25.5, or one per isotope, "
                        "such as d13C=-25.5,d15N=6")
        return v
    out = {}
    for code, value in _pairs(text, "d13C=-25.5,d15N=6"):
        try:
            out[code] = float(value)
        except ValueError:
            _fail(text, f"the value for {code} is not a number")
        if not math.isfinite(out[code]):
            _fail(text, f"the value for {code} is not a finite number")
    return out


def _add_common(p):
    p.add_argument("--out", metavar="DIR", default=None,
                   help="output folder (default isoturnover_out_<command>)")
    p.add_argument("--force", action="store_true",
                   help="replace the files of a non-empty output folder")
    p.add_argument("--no-figures", action="store_true", help="skip the figures")
    p.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="show a progress bar (default: on a terminal)")
    p.add_argument("--no-progress", dest="progress", action="store_false",
                   help="never show a progress bar")


def _formatter(prog):
    """argparse's help layout with room for one line per option."""
    return argparse.HelpFormatter(prog, max_help_position=32, width=100)


def build_parser() -> argparse.ArgumentParser:
    """The parser of the ``isoturnover`` command and its sub-commands ``demo`` and ``fit``.

    Returns
    -------
    argparse.ArgumentParser
        Its ``error`` prints one line ``error: ...`` and exits with status 2; its
        sub-command parsers are in its attribute ``commands`` (name -> parser).
    """
    from . import __version__
    from .data import DIET_COLUMNS, MASS_COLUMNS, SAMPLE_COLUMNS, VALUE_UNITS
    from .engine import LOSSES
    from .selection import CRITERIA

    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    p = _Parser(
        prog="isoturnover", parents=[common], formatter_class=_formatter,
        description="Turnover rates, half-lives and pool fractions from stable-isotope "
        "diet-switch experiments. Animal experiments and field sampling need the approval of "
        "the local animal-care authority; these results support that process, they do not "
        "replace it.",
    )
    p.add_argument("--version", action="version", version=f"isoturnover {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    d = sub.add_parser("demo", parents=[common], help="analyse the invented demo experiment",
                       formatter_class=_formatter,
                       description="Fit the invented demo experiment (goats, breath, fish) "
                       "and write results, figures and a report.")
    d.add_argument("--jobs", metavar="N", type=_jobs, default=1,
                   help="parallel worker processes (-1: all cores; default 1)")
    _add_common(d)

    f = sub.add_parser("fit", parents=[common], help="fit every series of a samples file",
                       formatter_class=_formatter,
                       description="Fit every series of a samples table (CSV or Excel), "
                       "choose each series' model by an information criterion (AICc by "
                       "default), and write results.csv, fits.json, figures and a report. "
                       "The results do not depend on --jobs.")
    a = f.add_argument
    a("samples", metavar="SAMPLES", help="samples table (CSV or .xlsx)")
    a("--diets", metavar="F", help="diets table: group or subject, isotope, start, value")
    a("--masses", metavar="F", help="body masses: subject, time (or date), mass")
    a("--columns", metavar="MAP", type=_column_map(SAMPLE_COLUMNS, "subject=animal,time=day"),
      help="samples column names, e.g. subject=animal,time=day")
    a("--diet-columns", metavar="MAP", type=_column_map(DIET_COLUMNS, "group=pen,start=day"),
      help="diets column names, e.g. group=pen,start=day")
    a("--mass-columns", metavar="MAP", type=_column_map(MASS_COLUMNS, "mass=weight_kg"),
      help="masses column names, e.g. subject=animal,mass=weight_kg")
    a("--mass-unit", metavar="UNIT", default=None,
      help="unit of the body masses for the figures and report, e.g. kg")
    a("--time-unit", metavar="UNIT", type=_time_unit, default="d",
      help="time unit of the tables: d, h or w (default d)")
    a("--date-format", metavar="FMT", type=_date_format, default=None,
      help="how non-ISO dates are written, e.g. %%d/%%m/%%Y")
    a("--switch-date", metavar="DATE", default=None,
      help="diet-switch date of every row when the tables hold dates")
    a("--switch-dates", metavar="SOURCE", default=None,
      help="switch date per group: a table F, a samples column, or diets")
    a("--unit", metavar="UNIT", choices=VALUE_UNITS, default="delta",
      help="unit of value: delta (default), atom_percent, atom_percent_excess")
    a("--baseline", metavar="DELTA", type=_baseline, default=None,
      help="δ (‰) before enrichment, for atom_percent_excess (or d13C=X,...)")
    a("--by", metavar="COLS", default=None,
      help="series keys (default subject,tissue,isotope)")
    a("--pools", metavar="LIST", type=_pools, default=(1, 2),
      help="numbers of parallel pools to try (default 1,2)")
    a("--chain", action="store_true", help="also try a two-step precursor-product chain")
    a("--lag", action="store_true", help="fit a delay after each switch")
    a("--separation", metavar="FORM", choices=("difference", "epsilon"), default="difference",
      help="diet-tissue separation: difference (default) or epsilon")
    a("--per-diet-separation", metavar="WHEN", nargs="?", const="yes", default="auto",
      choices=("auto", "yes", "no"), help="one separation per diet: auto (default), yes, no")
    a("--initial-state", metavar="STATE", choices=("equilibrium", "free"),
      default="equilibrium", help="at equilibrium with the first diet (default), or free")
    a("--fix", metavar="VALUES", type=_fix, default=None,
      help="hold parameters at values, e.g. delta0=-25,lag=0")
    a("--known-sd", action="store_true", help="take the sd column as known analytic error")
    a("--loss", metavar="LOSS", choices=LOSSES, default="linear",
      help="linear (default), or soft_l1 or huber (robust to outliers)")
    a("--criterion", metavar="NAME", choices=CRITERIA, default="aicc",
      help="model choice: aicc (default), aic or bic")
    a("--growth-curve", metavar="NAME", type=_growth_curve, default="logistic",
      help="growth curve fitted to --masses (default logistic)")
    a("--ci", metavar="METHOD", default="profile", choices=("profile", "asymptotic",
                                                             "bootstrap"),
      help="intervals: profile (default), asymptotic or bootstrap")
    a("--n-boot", metavar="N", type=_positive_int, default=499,
      help="bootstrap replicates with --ci bootstrap (default 499)")
    a("--level", metavar="P", type=_level, default=0.95,
      help="confidence level (default 0.95)")
    a("--jobs", metavar="N", type=_jobs, default=1,
      help="parallel worker processes (-1: all cores; default 1)")
    _add_common(f)
    p.commands = {"demo": d, "fit": f}
    return p


def _check_fit(args, parser):
    """Checks of ``fit`` that involve two options: an ``error:`` line, exit status 2."""
    from .errors import DataError
    from .sampletimes import parse_date

    if args.switch_date is not None and args.switch_dates is not None:
        parser.error("argument --switch-dates: not allowed with --switch-date (one date for "
                     "all, or one per group)")
    if args.switch_date is not None:
        try:
            parse_date(args.switch_date, "argument --switch-date", args.date_format)
        except DataError as e:
            parser.error(str(e))
    if args.unit == "atom_percent_excess" and args.baseline is None:
        parser.error("argument --unit: atom_percent_excess needs --baseline (δ in ‰ of the "
                     "unenriched material)")
    if args.baseline is not None and args.unit != "atom_percent_excess":
        parser.error(f"argument --baseline: applies only with --unit atom_percent_excess; "
                     f"--unit is {args.unit}")


def _progress_default(args):
    if args.progress is not None:
        return args.progress
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):  # pragma: no cover
        return False


def _held(command):
    """Run ``command(args, out)`` holding the output folder's lock from the first check to
    the end (a second run into the same folder is refused at once); the hold is released
    however the command ends, so a failed run leaves no lock behind."""
    import functools
    from pathlib import Path

    @functools.wraps(command)
    def run(args):
        from .analysis import check_out_dir
        from .outputdir import release_out_dir

        out = Path(args.out or f"isoturnover_out_{args.command}")
        check_out_dir(out, args.force, hold=True)
        try:
            return command(args, out)
        finally:
            release_out_dir(out)

    return run


@_held
def _cmd_demo(args, out):
    from .analysis import run_demo
    from .groups import parallel_workers

    jobs = parallel_workers(args.jobs, "--jobs")  # 1 (after one warning) without joblib
    a = run_demo(out, force=args.force, progress=_progress_default(args),
                 figures=not args.no_figures, n_jobs=jobs)
    _report(a, out)
    return 0


@_held
def _cmd_fit(args, out):
    from .analysis import analyse
    from .errors import DataError
    from .groups import parallel_workers

    jobs = parallel_workers(args.jobs, "--jobs")  # 1 (after one warning) without joblib
    structures = ("parallel", "chain") if args.chain else ("parallel",)
    a = analyse(args.samples, diets=args.diets, masses=args.masses, pools=args.pools,
                structures=structures, by=args.by, ci=args.ci, level=args.level,
                time_unit=args.time_unit, growth_curve=args.growth_curve,
                per_diet_separation={"auto": "auto", "yes": True,
                                     "no": False}[args.per_diet_separation], lag=args.lag,
                progress=_progress_default(args), n_boot=args.n_boot, n_jobs=jobs,
                date_format=args.date_format, criterion=args.criterion,
                separation=args.separation, initial=args.initial_state, fixed=args.fix,
                absolute_sigma=args.known_sd, loss=args.loss, columns=args.columns,
                diet_columns=args.diet_columns, mass_columns=args.mass_columns,
                mass_unit=args.mass_unit,
                switch_date=args.switch_date, switch_dates=args.switch_dates,
                unit=args.unit, baseline=args.baseline)
    if a.n_fitted() == 0:
        reasons = "; ".join(f"{' / '.join(map(str, k[1:]))}: {why}"
                            for k, why in list(a.failures().items())[:10])
        raise DataError(f"no series could be fitted ({reasons})")
    a.write(out, force=args.force, figures=not args.no_figures)
    _report(a, out)
    return 0


def _report(a, out):
    n = a.n_fitted()
    fails = a.failures()
    print(f"fitted {n} series; {len(fails)} could not be fitted")
    for k, why in list(fails.items())[:20]:
        print(f"  not fitted: {' / '.join(map(str, k))}: {why}")
    print(f"results written to {out}/ (results.csv, fits.json, report.md, report.html)")
    from .analysis import CAUTION

    print(CAUTION)


def _print_library_warnings():
    """Within a ``warnings.catch_warnings()`` block: print every distinct library warning
    once, as one line ``warning: ...`` on stderr; other warnings go to the handler that was
    in place."""
    from .errors import IsoturnoverWarning

    shown = set()
    previous = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if not issubclass(category, IsoturnoverWarning):
            return previous(message, category, filename, lineno, file, line)
        text = " ".join(str(message).split())
        if text not in shown:
            shown.add(text)
            print(f"warning: {text}", file=sys.stderr, flush=True)
        return None

    warnings.simplefilter("always", IsoturnoverWarning)  # repeated ones are dropped above
    warnings.showwarning = show


def main(argv: list[str] | None = None) -> int:
    """Run the ``isoturnover`` command line.

    Parameters
    ----------
    argv : list of str, optional
        The arguments after the program name (default ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit status: 0 on success (also for the help text without a command), 2 when the
        command failed (one line ``error: ...`` on stderr, nothing written). Library
        warnings are printed as ``warning: ...`` lines on stderr.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    if args.command == "fit":
        _check_fit(args, parser.commands["fit"])
    handler = {"demo": _cmd_demo, "fit": _cmd_fit}[args.command]
    try:
        with warnings.catch_warnings():
            _print_library_warnings()
            return handler(args)
    except KeyboardInterrupt:  # pragma: no cover
        print("error: interrupted", file=sys.stderr)
        return EXIT_ERROR
    except Exception as e:  # noqa: BLE001 - every error becomes one line
        if args.debug:
            raise
        msg = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        print(f"error: {msg}", file=sys.stderr)
        return EXIT_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
