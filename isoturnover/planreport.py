"""A sampling plan's text and files: plan.csv, plan.md (with the caution) and plan.png.

The ``isoturnover plan`` command prints :func:`plan_text` and, with ``--out``, writes the
files of :func:`plan_files` through the project's output-folder writer (one move, a lock, a
manifest). Every plan carries the animal-care caution
(:data:`isoturnover.design.PLAN_CAUTION`).
"""

from __future__ import annotations

__all__ = ["plan_text", "plan_markdown", "plan_files"]


def plan_text(design, sim=None, guess=""):
    """The printed plan: the design's summary, the guess, the schedule, the simulation,
    and the caution once at the end.

    Parameters
    ----------
    design : Design
        From :func:`~isoturnover.design_schedule` or :func:`~isoturnover.evaluate_design`.
    sim : SimulationResult, optional
        From :func:`~isoturnover.simulate_design`.
    guess : str, default=""
        A line naming the guessed kinetics (shown second).

    Returns
    -------
    str
    """
    from .design import PLAN_CAUTION

    caution = "Caution. " + PLAN_CAUTION
    lines = [ln for ln in design.summary().splitlines() if ln != caution]
    if guess:
        lines.insert(1, guess)
    table = design.table().to_string(index=False, float_format=lambda x: f"{x:.4g}")
    lines += ["", "Schedule:", table]
    if sim is not None:
        lines += [""] + [ln for ln in sim.summary().splitlines() if ln != caution]
    lines += ["", caution]
    return "\n".join(lines)


def plan_markdown(design, sim, guess, text):
    """plan.md: the summary, the schedule, the expected precision, the simulation check,
    the figure and the caution.

    Parameters
    ----------
    design : Design
        The schedule.
    sim : SimulationResult or None
        The simulation check.
    guess : str
        A line naming the guessed kinetics.
    text : str
        :func:`plan_text` of the same plan.

    Returns
    -------
    str
        Markdown.
    """
    from .design import PLAN_CAUTION, SD_GUIDANCE
    from .reportdoc import Doc, fmt_number, render_markdown

    doc = Doc()
    doc.h(1, "Sampling plan")
    doc.p(("strong", "Caution."), " " + PLAN_CAUTION)
    body = text.split("\nSchedule:")[0].splitlines()
    doc.ul([ln for ln in body if ln and ln != SD_GUIDANCE])
    doc.h(2, "Schedule")
    tab = design.table()
    doc.table(["sample", f"time ({design.time_unit})", "animal", "role", "expected δ (‰)"],
              [[r.sample, fmt_number(r.time), r.animal, r.role, fmt_number(r.expected)]
               for r in tab.itertuples()])
    doc.h(2, "Expected precision (delta method at the guess)")
    prec = design.precision_table()
    doc.table(["quantity", "value", "se", "relative se"],
              [[r.quantity, fmt_number(r.value), fmt_number(r.se, 3), fmt_number(r.rel_se, 3)]
               for r in prec.itertuples()])
    if sim is not None:
        doc.h(2, "Simulation check")
        row = sim.table().iloc[0]
        doc.table(["statistic", "value"], [[k, fmt_number(v) if isinstance(v, float) else v]
                                           for k, v in row.items()])
    doc.h(2, "Figure")
    doc.img("plan.png", "the expected curve with the sampling times",
            "Expected curve at the guessed parameters with the range of one sample and the "
            "confidence band of the fitted curve this schedule would give; sampling times "
            "marked by role.")
    doc.h(2, "Residual sd")
    doc.p(SD_GUIDANCE)
    return render_markdown(doc)


def plan_files(design, sim, guess, text):
    """``build(tmp)`` for :func:`~isoturnover.outputdir.write_output`: plan.csv, plan.md
    and plan.png.

    Parameters
    ----------
    design, sim, guess, text
        As for :func:`plan_markdown`.

    Returns
    -------
    callable
        ``build(tmp)`` writing the three files into the folder ``tmp``.
    """
    def build(tmp):
        from matplotlib.figure import Figure  # no pyplot: no backend or global state touched

        from .outputdir import neutralise_formulas
        from .plotkit import placing_layout
        from .plotplan import PLAN_SIZE, plot_design

        neutralise_formulas(design.table()).to_csv(tmp / "plan.csv", index=False)
        (tmp / "plan.md").write_text(plan_markdown(design, sim, guess, text),
                                     encoding="utf-8")
        fig = Figure(figsize=PLAN_SIZE, layout=placing_layout())
        plot_design(design, fig.add_subplot())
        fig.savefig(tmp / "plan.png", dpi=200)

    return build
