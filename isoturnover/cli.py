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
import os
import sys
import warnings

from .cliargs import (
    parse_baseline,
    parse_column_map,
    parse_count,
    parse_date_format,
    parse_delta,
    parse_fix,
    parse_fraction,
    parse_fractions,
    parse_growth_curve,
    parse_growth_rate,
    parse_jobs,
    parse_kinetics_list,
    parse_length_unit,
    parse_level,
    parse_n_sim,
    parse_names,
    parse_non_negative,
    parse_pool_count,
    parse_pools,
    parse_positive,
    parse_positive_int,
    parse_time_unit,
    parse_times,
    parse_tissue_values,
)

EXIT_ERROR = 2


class _Parser(argparse.ArgumentParser):
    """argparse with the command line's error convention: one line ``error: ...`` on stderr
    and exit status 2 (argparse's own would print the usage block first)."""

    def error(self, message):
        self.exit(EXIT_ERROR, f"error: {message} (see {self.prog} --help)\n")


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
    """The parser of the ``isoturnover`` command and its sub-commands ``demo``, ``fit``,
    ``plan`` and ``clock``.

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
                       description="Fit the invented demo experiment (goats, breath, hair, fish) "
                       "and write results, figures and a report.")
    d.add_argument("--jobs", metavar="N", type=parse_jobs, default=None,
                   help="parallel worker processes (-1: all cores; default 2, or 1 on one core)")
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
    a("--columns", metavar="MAP", type=parse_column_map(SAMPLE_COLUMNS, "subject=animal,time=day"),
      help="samples column names, e.g. subject=animal,time=day")
    a("--diet-columns", metavar="MAP", type=parse_column_map(DIET_COLUMNS, "group=pen,start=day"),
      help="diets column names, e.g. group=pen,start=day")
    a("--mass-columns", metavar="MAP", type=parse_column_map(MASS_COLUMNS, "mass=weight_kg"),
      help="masses column names, e.g. subject=animal,mass=weight_kg")
    a("--scale", metavar="SCALE", choices=("delta", "atom_fraction"), default="delta",
      help="mixing scale of the pools: delta (default) or atom_fraction")
    a("--growth-rate", metavar="RATE", type=parse_growth_rate, default=None,
      help="segment growth rate, length per time unit: 0.4 or hair=0.4,...")
    a("--segment-origin", metavar="END", choices=("base", "tip"), default="base",
      help="segment distances measured from the base (default) or the tip")
    a("--formation-lag", metavar="D", type=parse_non_negative, default=0.0,
      help="time from formation to emergence at the base (default 0)")
    a("--length-unit", metavar="U", type=parse_length_unit, default="mm",
      help="length unit of segments and growth rates (default mm)")
    a("--drop-bad-rows", action="store_true",
      help="drop bad rows with a warning listing each (default: stop)")
    a("--mass-unit", metavar="UNIT", default=None,
      help="unit of the body masses for the figures and report, e.g. kg")
    a("--time-unit", metavar="UNIT", type=parse_time_unit, default="d",
      help="time unit of the tables: d, h or w (default d)")
    a("--date-format", metavar="FMT", type=parse_date_format, default=None,
      help="how non-ISO dates are written, e.g. %%d/%%m/%%Y")
    a("--switch-date", metavar="DATE", default=None,
      help="diet-switch date of every row when the tables hold dates")
    a("--switch-dates", metavar="SOURCE", default=None,
      help="switch date per group: a table F, a samples column, or diets")
    a("--unit", metavar="UNIT", choices=VALUE_UNITS, default="delta",
      help="unit of value: delta (default), atom_percent, atom_percent_excess")
    a("--baseline", metavar="DELTA", type=parse_baseline, default=None,
      help="δ (‰) before enrichment, for atom_percent_excess (or d13C=X,...)")
    a("--by", metavar="COLS", default=None,
      help="series keys (default subject,tissue,isotope)")
    a("--pools", metavar="LIST", type=parse_pools, default=(1, 2),
      help="numbers of parallel pools to try (default 1,2)")
    a("--chain", action="store_true", help="also try a two-step precursor-product chain")
    a("--lag", action="store_true", help="fit a delay after each switch")
    a("--separation", metavar="FORM", choices=("difference", "epsilon"), default="difference",
      help="diet-tissue separation: difference (default) or epsilon")
    a("--per-diet-separation", metavar="WHEN", nargs="?", const="yes", default="auto",
      choices=("auto", "yes", "no"), help="one separation per diet: auto (default), yes, no")
    a("--initial-state", metavar="STATE", choices=("equilibrium", "free"),
      default="equilibrium", help="at equilibrium with the first diet (default), or free")
    a("--fix", metavar="VALUES", type=parse_fix, default=None,
      help="hold parameters at values, e.g. delta0=-25,lag=0")
    a("--known-sd", action="store_true", help="take the sd column as known analytic error")
    a("--loss", metavar="LOSS", choices=LOSSES, default="linear",
      help="linear (default), or soft_l1 or huber (robust to outliers)")
    a("--criterion", metavar="NAME", choices=CRITERIA, default="aicc",
      help="model choice: aicc (default), aic or bic")
    a("--growth-curve", metavar="NAME", type=parse_growth_curve, default="logistic",
      help="growth curve fitted to --masses (default logistic)")
    a("--ci", metavar="METHOD", default="profile", choices=("profile", "asymptotic",
                                                             "bootstrap"),
      help="intervals: profile (default), asymptotic or bootstrap")
    a("--n-boot", metavar="N", type=parse_positive_int, default=499,
      help="bootstrap replicates with --ci bootstrap (default 499)")
    a("--level", metavar="P", type=parse_level, default=0.95,
      help="confidence level (default 0.95)")
    a("--jobs", metavar="N", type=parse_jobs, default=1,
      help="parallel worker processes (-1: all cores; default 1)")
    _add_common(f)
    p.commands = {"demo": d, "fit": f, "plan": _plan_parser(sub, common),
                  "clock": _clock_parser(sub, common)}
    return p


def _plan_parser(sub, common):
    """The parser of ``plan``: a sampling schedule for a guess of the kinetics."""
    from .design import CRITERIA, SD_GUIDANCE

    g = sub.add_parser(
        "plan", parents=[common], help="plan the sampling times of a diet-switch experiment",
        formatter_class=_formatter,
        description="Choose when to sample a diet-switch experiment (and on how many "
        "animals) for a guess of the kinetics: the D-optimal or c-optimal schedule, its "
        "expected precision, and optionally a check by simulated experiments. Prints the plan; "
        "--out also writes plan.csv, plan.md and plan.png. " + SD_GUIDANCE + " A plan is a "
        "proposal to put before the local animal-care authority (human hair or blood: a "
        "human-research ethics board); it supports that approval and does not replace it.")
    a = g.add_argument
    a("--pools", metavar="N", type=parse_pool_count, default=None,
      help="parallel pools (default: one per --half-lives value)")
    a("--chain", action="store_true", help="a two-step precursor-product chain instead")
    a("--lag", metavar="T", type=parse_positive, default=None,
      help="guessed delay after the switch (time unit); estimated by the fit")
    a("--half-lives", metavar="LIST", type=parse_kinetics_list, default=None,
      help="guessed half-lives, one per pool or chain step, e.g. 3,30")
    a("--rates", metavar="LIST", type=parse_kinetics_list, default=None,
      help="guessed rates per time unit instead of --half-lives, e.g. 0.23,0.023")
    a("--fractions", metavar="LIST", type=parse_fractions, default=None,
      help="pool fractions in the order of the half-lives, e.g. 0.4,0.6")
    a("--from", dest="delta_from", metavar="DELTA", type=parse_delta, required=True,
      help="δ (‰) of the tissue before the switch, e.g. -22 (required)")
    a("--to", dest="delta_to", metavar="DELTA", type=parse_delta, required=True,
      help="δ (‰) the tissue tends to on the new diet, e.g. -14 (required)")
    a("--samples", metavar="N", type=parse_positive_int, required=True,
      help="total samples, baseline and fixed times included (required)")
    a("--duration", metavar="T", type=parse_positive, required=True,
      help="sampling span after the switch, in the time unit (required)")
    a("--time-unit", metavar="UNIT", type=parse_time_unit, default="d",
      help="time unit of half-lives, lag and times: d, h or w (default d)")
    a("--sd", metavar="SD", type=parse_positive, required=True,
      help="total residual sd of one sample, ‰ (required; see above)")
    a("--criterion", metavar="NAME", choices=CRITERIA, default="D",
      help="D (default), half_life (of --pool) or time_to (--fraction)")
    a("--pool", metavar="K", type=parse_positive_int, default=None,
      help="pool whose half-life is the target, 1 = fastest (default slowest)")
    a("--fraction", metavar="P", type=parse_fraction, default=None,
      help="fraction of the change for --criterion time_to (default 0.95)")
    a("--prior-cv", metavar="CV", type=parse_positive, default=None,
      help="average over a log-normal prior on the rates with this cv, e.g. 0.5")
    a("--baseline", metavar="N", type=parse_count, default=1,
      help="samples before the switch (default 1)")
    a("--fixed-times", metavar="LIST", type=parse_times, default=(),
      help="times that must be in the plan, e.g. 7,14")
    a("--min-spacing", metavar="T", type=parse_non_negative, default=0.0,
      help="smallest gap between sampling times, time unit (default 0)")
    a("--max-per-animal", metavar="N", type=parse_positive_int, default=None,
      help="most samples one animal can give (blood-volume limit)")
    a("--destructive", action="store_true", help="one animal per sample (destructive sampling)")
    a("--level", metavar="P", type=parse_level, default=0.95,
      help="level of the reported half-width (default 0.95)")
    a("--simulate", metavar="N", type=parse_n_sim, default=None,
      help="check the plan by N simulated experiments (e.g. 200)")
    a("--seed", metavar="S", type=parse_count, default=None,
      help="seed of --simulate (default 0)")
    a("--jobs", metavar="N", type=parse_jobs, default=None,
      help="parallel worker processes of --simulate (-1: all cores; default 1)")
    a("--out", metavar="DIR", default=None,
      help="also write plan.csv, plan.md and plan.png into this folder")
    a("--force", action="store_true", help="replace the files of a non-empty output folder")
    return g


def _clock_parser(sub, common):
    """The parser of ``clock``: time since a diet change from field samples."""
    from .clockrun import FIELD_COLUMNS

    c = sub.add_parser(
        "clock", parents=[common], help="date diet changes of field animals (isotopic clock)",
        formatter_class=_formatter,
        description="Estimate how long ago each field animal changed diet from its tissues, "
        "sampled once, and the captive fits of a previous fit or demo run (fits.json). The "
        "field table has one row per animal and tissue: subject, tissue, value (δ ‰), and "
        "optionally isotope, sd, new and old (equilibrium δ on the new and old diet). By "
        "default each tissue's kinetics are the population estimate over the captive animals, "
        "with their between-animal spread. Writes clock.csv, clock_tissues.csv, "
        "clock_kinetics.csv and a likelihood figure per animal. Field sampling needs the "
        "approval of the local animal-care authority; the estimates support that process "
        "and do not replace it.")
    a = c.add_argument
    a("field", metavar="FIELD", help="field samples table (CSV or .xlsx)")
    a("--fits", metavar="F", required=True,
      help="fits.json of a previous isoturnover fit or demo run (required)")
    a("--new", metavar="LIST", type=parse_tissue_values, default=None,
      help="new-diet equilibrium δ per tissue, e.g. plasma=-10.5,red_cells=-11")
    a("--old", metavar="LIST", type=parse_tissue_values, default=None,
      help="old-diet equilibrium δ per tissue (default: unknown, 2+ tissues)")
    a("--sd", metavar="SD", type=parse_positive, default=None,
      help="sd (‰) of the rows without one: analytic and animal scatter")
    a("--subjects", metavar="LIST", type=parse_names, default=None,
      help="captive animals whose fits are used (one: its fit alone)")
    a("--part", metavar="NAME", default=None,
      help="only the captive fits of this part of the run, e.g. 'goats d13C'")
    a("--rate-cv", metavar="CV", type=parse_positive, default=None,
      help="between-animal cv of the rates, with one captive series")
    a("--isotope", metavar="CODE", default=None, help="only the field rows of this isotope")
    a("--max-offset", metavar="D", type=parse_positive, default=None,
      help="largest plausible |old - new| (‰) when the old diet is unknown")
    a("--columns", metavar="MAP", type=parse_column_map(FIELD_COLUMNS, "subject=animal"),
      help="field column names, e.g. subject=animal,value=d13C")
    a("--drop-bad-rows", action="store_true",
      help="drop bad field rows with a warning listing each (default: stop)")
    a("--ci", metavar="METHOD", choices=("profile", "asymptotic"), default="profile",
      help="intervals of the captive half-lives: profile (default) or asymptotic")
    a("--level", metavar="P", type=parse_level, default=0.95,
      help="confidence level (default 0.95)")
    a("--out", metavar="DIR", default=None, help="output folder (default isoturnover_out_clock)")
    a("--force", action="store_true", help="replace the files of a non-empty output folder")
    a("--no-figures", action="store_true", help="skip the figures")
    return c


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


def _check_plan(args, parser):
    """Checks of ``plan`` that involve several options: an ``error:`` line, exit status 2."""
    import math

    if (args.half_lives is None) == (args.rates is None):
        parser.error("argument --half-lives: give the guessed kinetics as --half-lives or as "
                     "--rates (one of them)")
    opt = "--half-lives" if args.rates is None else "--rates"
    values = args.half_lives if args.rates is None else args.rates
    n = len(values)
    if args.chain:
        if args.pools is not None:
            parser.error("argument --pools: not allowed with --chain (the chain has two "
                         "steps)")
        if n != 2:
            parser.error(f"argument {opt}: --chain needs two values (precursor step, then "
                         f"product step); got {n}")
        if args.fractions is not None:
            parser.error("argument --fractions: not allowed with --chain (the chain has no "
                         "pool fractions)")
    else:
        if args.pools is not None and args.pools != n:
            parser.error(f"argument {opt}: --pools {args.pools} needs {args.pools} value"
                         f"{'s' * (args.pools != 1)}; got {n}")
        if n > 1 and args.fractions is None:
            parser.error(f"argument --fractions: {n} pools need their fractions, e.g. "
                         f"--fractions {','.join(['0.5'] * 2) if n == 2 else '0.2,0.3,0.5'}")
        if n == 1 and args.fractions is not None:
            parser.error("argument --fractions: applies only with two or more pools")
        if args.fractions is not None:
            if len(args.fractions) != n:
                parser.error(f"argument --fractions: needs one value per pool ({n}); got "
                             f"{len(args.fractions)}")
            if abs(sum(args.fractions) - 1.0) > 1e-3:
                parser.error(f"argument --fractions: must sum to 1; they sum to "
                             f"{sum(args.fractions):g}")
    if args.pool is not None and args.pool > n:
        parser.error(f"argument --pool: must be a pool number from 1 to {n} (1 = fastest); "
                     f"got {args.pool}")
    if args.pool is not None and args.criterion == "time_to":
        parser.error("argument --pool: applies to the half-life (--criterion D or "
                     "half_life), not to time_to")
    if args.fraction is not None and args.criterion != "time_to":
        parser.error(f"argument --fraction: applies only with --criterion time_to; "
                     f"--criterion is {args.criterion}")
    if math.isclose(args.delta_from, args.delta_to, rel_tol=0.0, abs_tol=1e-9):
        parser.error(f"argument --to: must differ from --from (no isotopic change to "
                     f"follow); both are {args.delta_to:g}")
    if args.destructive and args.max_per_animal is not None:
        parser.error("argument --max-per-animal: not allowed with --destructive (one sample "
                     "per animal)")
    if args.simulate is None:
        for name, value in (("--seed", args.seed), ("--jobs", args.jobs)):
            if value is not None:
                parser.error(f"argument {name}: applies only with --simulate")
    if args.force and args.out is None:
        parser.error("argument --force: applies only with --out")


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

    if args.jobs is None:  # the demo's default: two workers where there are two cores
        try:
            cores = len(os.sched_getaffinity(0))
        except AttributeError:  # pragma: no cover - not on Linux
            cores = os.cpu_count() or 1
        args.jobs = min(2, cores)
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
                on_bad_rows="drop" if args.drop_bad_rows else "raise", scale=args.scale,
                switch_date=args.switch_date, switch_dates=args.switch_dates,
                unit=args.unit, baseline=args.baseline, growth_rate=args.growth_rate,
                segment_origin=args.segment_origin, formation_lag=args.formation_lag,
                length_unit=args.length_unit)
    if a.n_fitted() == 0:
        reasons = "; ".join(f"{' / '.join(map(str, k[1:]))}: {why}"
                            for k, why in list(a.failures().items())[:10])
        raise DataError(f"no series could be fitted ({reasons})")
    a.write(out, force=args.force, figures=not args.no_figures)
    _report(a, out)
    return 0


#: Library argument names of ``design_schedule`` and the ``plan`` options that set them.
_PLAN_OPTIONS = {"n_samples": "--samples", "duration": "--duration", "sd": "--sd",
                 "min_spacing": "--min-spacing", "max_per_animal": "--max-per-animal",
                 "baseline": "--baseline", "fixed_times": "--fixed-times",
                 "prior_cv": "--prior-cv", "pool": "--pool", "fraction": "--fraction",
                 "truth['lag']": "--lag", "n_sim": "--simulate"}


def _plan_model(args):
    """The model and guessed parameters of ``plan`` (pools ordered fastest first)."""
    import math

    from .model import TurnoverModel

    ln2 = math.log(2.0)
    rates = list(args.rates) if args.rates is not None else \
        [ln2 / h for h in args.half_lives]
    truth = {"delta0": args.delta_from, "delta_eq": args.delta_to}
    if args.chain:
        model = TurnoverModel(structure="chain", lag=args.lag is not None)
        truth.update(k1=rates[0], k2=rates[1])
    else:
        n = len(rates)
        fr = [1.0] if n == 1 else [f / sum(args.fractions) for f in args.fractions]
        order = sorted(range(n), key=lambda i: -rates[i])  # the model's pools: fastest first
        model = TurnoverModel(n, lag=args.lag is not None)
        for j, i in enumerate(order, start=1):
            truth[f"k{j}"], truth[f"f{j}"] = rates[i], fr[i]
    if args.lag is not None:
        truth["lag"] = args.lag
    return model, truth


def _guess_line(args, truth):
    """One line naming the guessed kinetics."""
    import math

    from .conventions import unit_word

    unit = unit_word(args.time_unit)
    ks = [v for k, v in truth.items() if k.startswith("k")]
    parts = [f"δ from {args.delta_from:g} ‰ to {args.delta_to:g} ‰",
             ("step half-lives" if args.chain else "half-lives") + " "
             + ", ".join(f"{math.log(2.0) / k:.4g}" for k in ks) + f" {unit} (rates "
             + ", ".join(f"{k:.4g}" for k in ks) + f" per {unit.rstrip('s')})"]
    frs = [v for k, v in truth.items() if k.startswith("f")]
    if len(frs) > 1:
        parts.append("fractions " + ", ".join(f"{f:.3g}" for f in frs) + " (fastest first)")
    if "lag" in truth:
        parts.append(f"lag {truth['lag']:g} {unit}")
    return "Guess: " + "; ".join(parts)


def _plan(args, out):
    """Run ``plan``: design (and simulate) and print; write the files when ``out``."""
    import re

    from .design import design_schedule
    from .errors import DataError
    from .outputdir import write_output
    from .simulate import simulate_design

    model, truth = _plan_model(args)
    try:
        design = design_schedule(
            model, truth, n_samples=args.samples, duration=args.duration, sd=args.sd,
            criterion=args.criterion, prior_cv=args.prior_cv, baseline=args.baseline,
            min_spacing=args.min_spacing, fixed_times=args.fixed_times,
            max_per_animal=args.max_per_animal, destructive=args.destructive,
            fraction=0.95 if args.fraction is None else args.fraction,
            pool=None if args.pool is None else args.pool, level=args.level,
            time_unit=args.time_unit)
        sim = None
        if args.simulate is not None:
            sim = simulate_design(
                model, truth, design, sd=args.sd, n_sim=args.simulate,
                rng=0 if args.seed is None else args.seed, level=args.level,
                n_jobs=1 if args.jobs is None else args.jobs,
                quantity="time_to" if args.criterion == "time_to" else "half_life",
                pool=args.pool, fraction=design.fraction)
    except DataError as e:  # name the options, not the library's arguments
        msg = str(e)
        for name, option in _PLAN_OPTIONS.items():
            msg = re.sub(rf"'{re.escape(name)}'", option, msg)
        raise DataError(msg) from e
    from .planreport import plan_files, plan_text

    text = plan_text(design, sim, _guess_line(args, truth))
    if out is not None:
        write_output(out, plan_files(design, sim, _guess_line(args, truth), text),
                     force=args.force)
    print(text)
    if out is not None:
        print(f"plan written to {out}/ (plan.csv, plan.md, plan.png)")
    return 0


def _cmd_plan(args):
    if args.out is None:
        return _plan(args, None)
    return _held(_plan)(args)


#: Library argument names of ``run_clock`` and the ``clock`` options that set them.
_CLOCK_OPTIONS = {"subjects": "--subjects", "rate_cv": "--rate-cv", "max_offset": "--max-offset",
                  "new": "--new", "old": "--old", "sd": "--sd"}


@_held
def _cmd_clock(args, out):
    import re

    from .clockrun import run_clock
    from .errors import DataError

    try:
        run = run_clock(args.field, args.fits, new=args.new, old=args.old, sd=args.sd,
                        subjects=args.subjects, part=args.part, isotope=args.isotope,
                        rate_cv=args.rate_cv, level=args.level, max_offset=args.max_offset,
                        columns=args.columns, ci=args.ci,
                        on_bad_rows="drop" if args.drop_bad_rows else "raise")
    except DataError as e:  # name the options, not the library's arguments
        msg = str(e)
        for name, option in _CLOCK_OPTIONS.items():
            msg = re.sub(rf"'{re.escape(name)}'", option, msg)
        raise DataError(msg) from e
    run.write(out, force=args.force, figures=not args.no_figures)
    print(run.summary())
    print(f"results written to {out}/ (clock.csv, clock_tissues.csv, clock_kinetics.csv"
          + (")" if args.no_figures else ", clock_figures/)"))
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
    if args.command == "plan":
        _check_plan(args, parser.commands["plan"])
    handler = {"demo": _cmd_demo, "fit": _cmd_fit, "plan": _cmd_plan,
               "clock": _cmd_clock}[args.command]
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
