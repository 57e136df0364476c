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


def _add_common(p):
    p.add_argument("--out", metavar="DIR", default=None,
                   help="output folder (default: isoturnover_out_<command>)")
    p.add_argument("--force", action="store_true",
                   help="write into a non-empty output folder, replacing its files")
    p.add_argument("--no-figures", action="store_true", help="skip the figures")
    p.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="show a progress bar (default: when the terminal is interactive)")
    p.add_argument("--no-progress", dest="progress", action="store_false")


def build_parser() -> argparse.ArgumentParser:
    """The parser of the ``isoturnover`` command and its sub-commands ``demo`` and ``fit``.

    Returns
    -------
    argparse.ArgumentParser
        Its ``error`` prints one line ``error: ...`` and exits with status 2.
    """
    from . import __version__

    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    p = _Parser(
        prog="isoturnover", parents=[common],
        description="Turnover rates, half-lives and pool fractions from stable-isotope "
        "diet-switch experiments. Animal experiments and field sampling need the approval of "
        "the local animal-care authority; these results support that process, they do not "
        "replace it.",
    )
    p.add_argument("--version", action="version", version=f"isoturnover {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    d = sub.add_parser("demo", parents=[common], help="analyse the invented demo experiment",
                       description="Fit the invented demo experiment (goats, breath, fish) "
                       "and write results, figures and a report.")
    d.add_argument("--jobs", metavar="N", type=_jobs, default=1,
                   help="run the series' fits in N parallel processes (-1: all cores; "
                   "default 1); the results are the same as with 1")
    _add_common(d)

    f = sub.add_parser("fit", parents=[common], help="fit every series of a samples file",
                       description="Fit every series of a samples table (CSV or Excel), "
                       "choose the number of pools by AICc, and write results.csv, fits.json, "
                       "figures and a report.")
    f.add_argument("samples", metavar="SAMPLES", help="samples table (CSV or .xlsx)")
    f.add_argument("--diets", metavar="F", help="diets table (group|subject, isotope, start, "
                   "value)")
    f.add_argument("--masses", metavar="F", help="body masses (subject, time, mass)")
    f.add_argument("--pools", default="1,2", help="pool numbers to try, e.g. 1,2,3 "
                   "(default 1,2)")
    f.add_argument("--chain", action="store_true",
                   help="also try a precursor-product chain")
    f.add_argument("--by", default=None, help="series keys, e.g. subject,tissue,isotope "
                   "(default; tissue,isotope for destructive sampling)")
    f.add_argument("--ci", default="profile", choices=("profile", "asymptotic", "bootstrap"),
                   help="interval method (default profile likelihood)")
    f.add_argument("--n-boot", type=int, default=499, help="bootstrap replicates (--ci "
                   "bootstrap)")
    f.add_argument("--level", type=float, default=0.95, help="confidence level (0.95)")
    f.add_argument("--time-unit", default="d", help="time unit of the tables: d, h or w")
    f.add_argument("--date-format", metavar="FMT", default=None,
                   help="how dates that are not ISO 8601 (YYYY-MM-DD) are written in the "
                   "tables, e.g. %%d/%%m/%%Y (day first) or %%m/%%d/%%Y (month first); "
                   "without it such dates are refused, as day and month cannot be told apart")
    f.add_argument("--growth-curve", default="logistic",
                   help="growth curve fitted to --masses (logistic, gompertz, exponential, ...)")
    f.add_argument("--per-diet-separation", nargs="?", const="yes", default="auto",
                   choices=("auto", "yes", "no"),
                   help="one diet-tissue separation per diet value: 'auto' (default) also "
                        "fits each model with a separation per diet and lets the criterion "
                        "choose; 'yes' always, 'no' never")
    f.add_argument("--lag", action="store_true", help="fit a pure delay after each switch")
    f.add_argument("--jobs", metavar="N", type=_jobs, default=1,
                   help="run the series' fits and bootstrap refits in N parallel processes "
                   "(-1: all cores; default 1); the results are the same as with 1")
    _add_common(f)
    return p


def _progress_default(args):
    if args.progress is not None:
        return args.progress
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):  # pragma: no cover
        return False


def _cmd_demo(args):
    from pathlib import Path

    from .analysis import check_out_dir, run_demo
    from .groups import parallel_workers

    out = Path(args.out or "isoturnover_out_demo")
    check_out_dir(out, args.force)
    jobs = parallel_workers(args.jobs, "--jobs")  # 1 (after one warning) without joblib
    a = run_demo(out, force=args.force, progress=_progress_default(args),
                 figures=not args.no_figures, n_jobs=jobs)
    _report(a, out)
    return 0


def _cmd_fit(args):
    from pathlib import Path

    from .analysis import analyse, check_out_dir
    from .errors import DataError
    from .groups import parallel_workers

    out = Path(args.out or "isoturnover_out_fit")
    check_out_dir(out, args.force)
    jobs = parallel_workers(args.jobs, "--jobs")  # 1 (after one warning) without joblib
    by = None if args.by is None else tuple(x.strip() for x in args.by.split(",") if x.strip())
    structures = ("parallel", "chain") if args.chain else ("parallel",)
    a = analyse(args.samples, diets=args.diets, masses=args.masses, pools=args.pools,
                structures=structures, by=by, ci=args.ci, level=args.level,
                time_unit=args.time_unit, growth_curve=args.growth_curve,
                per_diet_separation={"auto": "auto", "yes": True,
                                     "no": False}[args.per_diet_separation], lag=args.lag,
                progress=_progress_default(args), n_boot=args.n_boot, n_jobs=jobs,
                date_format=args.date_format)
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
