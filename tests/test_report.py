"""Tests of isoturnover.report (Markdown and HTML reports of fits).

Every series here is invented: simulated from the model with fixed seeds.
"""

from __future__ import annotations

import math
import re
from html.parser import HTMLParser

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

import isoturnover as iso  # noqa: E402
from isoturnover import plotting, reportdoc  # noqa: E402
from isoturnover import report as R  # noqa: E402

LN2 = math.log(2.0)
D0, DEQ = -24.0, -12.0
T = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56.0])

CITATIONS = (
    "Venzon & Moolgavkar 1988, Appl. Stat. 37:87–94",
    "Hurvich & Tsai 1989, Biometrika 76:297–307",
    "Burnham & Anderson 2002",
    "Cerling et al. 2007, Oecologia 151:175–189",
    "Hesslein et al. 1993, Can. J. Fish. Aquat. Sci. 50:2071–2076",
    "Fry & Arnold 1982, Oecologia 54:200–204",
    "Coplen 2011",
)


@pytest.fixture(scope="module")
def fitset():
    rng = np.random.default_rng(11)
    rows = []
    for subj, k in (("A", 0.1), ("B", 0.05)):
        y = DEQ + (D0 - DEQ) * np.exp(-k * T) + rng.normal(0, 0.2, T.size)
        rows += [{"subject": subj, "tissue": "plasma", "isotope": "d13C", "time": a,
                  "value": b} for a, b in zip(T, y)]
    rows += [{"subject": "C", "tissue": "plasma", "isotope": "d13C", "time": a, "value": b}
             for a, b in zip([0.0, 5.0], [-24.0, -20.0])]
    return iso.fit_each(pd.DataFrame(rows), pools=(1, 2))


@pytest.fixture(scope="module")
def open_fit():
    """Two pools, half-lives 2 d and 400 d, sampled to 30 d: the slow pool is never
    approached, so its half-life has no upper bound. The new plateau is known (invented:
    from animals kept on the new diet) and fixed, so the fast pool stays well determined."""
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 22, 26, 30.0])
    u = 0.5 * np.exp(-LN2 / 2 * t) + 0.5 * np.exp(-LN2 / 400 * t)
    y = DEQ + (D0 - DEQ) * u + np.random.default_rng(0).normal(0, 0.1, t.size)
    return iso.TurnoverModel(2, isotope="d15N").fit(t, y, warn=False, label="slow pool",
                                                    fixed={"delta_eq": DEQ})


@pytest.fixture(scope="module")
def fit1():
    y = DEQ + (D0 - DEQ) * np.exp(-0.1 * T) + np.random.default_rng(1).normal(0, 0.2, T.size)
    return iso.TurnoverModel(1).fit(T, y, warn=False)


def _listing(folder):
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*"))


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.imgs = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "img":
            self.imgs.append(dict(attrs)["src"])


# ----------------------------------------------------------------------------------------
# a full report from a FitSet
# ----------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def written(fitset, tmp_path_factory):
    folder = tmp_path_factory.mktemp("rep")
    paths = R.write_report(fitset, folder / "goats.md", title="Goat plasma turnover")
    return folder, paths


def test_writes_markdown_html_and_figures(written, fitset):
    folder, paths = written
    md, html_path = paths[:2]
    assert md == folder / "goats.md" and html_path == folder / "goats.html"
    figs = paths[2:]
    # the study at a glance, the weights figure, then one overview per fitted series (2 of
    # 3 were fitted)
    assert [p.name for p in figs] == ["00_study.png", "00_weights.png", "01_A_plasma_d13C.png",
                                      "02_B_plasma_d13C.png"]
    for p in figs:
        assert p.parent == folder / "goats_figures"
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert _listing(folder) == sorted(["goats.md", "goats.html", "goats_figures"]
                                      + [f"goats_figures/{p.name}" for p in figs])
    text = md.read_text(encoding="utf-8")
    page = html_path.read_text(encoding="utf-8")
    for p in figs:
        assert f"](goats_figures/{p.name})" in text
    parser = _Tags()
    parser.feed(page)
    assert parser.imgs == [f"goats_figures/{p.name}" for p in figs]  # referenced, same files
    assert "script" not in parser.tags


def test_report_content(written):
    folder, paths = written
    text = paths[0].read_text(encoding="utf-8")
    page = paths[1].read_text(encoding="utf-8")
    assert text.startswith("# Goat plasma turnover\n")
    assert re.search(r"Date: \d{4}-\d{2}-\d{2}", text)
    for doc in (text, page):
        assert R.CAUTION in doc.replace("&#x27;", "'")
        assert "need the approval of the local animal-care authority" in doc
        assert "human-research ethics board" in doc
        assert "Pool fractions describe the shape of the curve" in doc
    for c in CITATIONS:
        assert c in text
        assert c.replace("&", "&amp;") in page
    # experiment
    assert "Series: 3 (2 fitted, 1 not fitted)" in text
    assert "Tissues: plasma" in text and "Time unit: days" in text
    assert "Subjects: A, B, C (3)" in text
    assert "Isotopes: δ¹³C (VPDB)" in text
    # summary table, one section per fitted series, and the series not fitted with reason
    assert "| A / plasma / d13C | 1 pool; step switch at t = 0 | 12 |" in text
    assert "## Series 1: A / plasma / d13C" in text and "## Series 2: B / plasma / d13C" in text
    assert "## Series not fitted" in text
    assert "| C / plasma / d13C | too\\_few\\_points | only 2 time point(s)" in text
    # derived quantities and candidate comparison
    assert "time to 95 % of a step change" in text and "mean residence time" in text
    assert "| 1 pool | 4 |" in text and "| 2 pools | 6 |" in text


def test_summary_numbers_match_the_fits(written, fitset):
    text = written[1][0].read_text(encoding="utf-8")
    f = fitset[("B", "plasma", "d13C")].best
    hl = f.half_lives().iloc[0]
    w = fitset[("B", "plasma", "d13C")].comparison.set_index("label")["weight"]["1 pool"]
    row = f"| {hl['half_life']:.4g} \\[{hl['lower']:.4g}, {hl['upper']:.4g}\\] | {w:.3f} |"
    assert row in text
    # parameter table rows with their intervals
    ci = f.conf_int().set_index("parameter")
    k = ci.loc["k1"]
    assert (f"| k1 | {k['estimate']:.4g} | {k['stderr']:.4g} | {k['lower']:.4g} | "
            f"{k['upper']:.4g} | profile | per day |") in text
    # the fit's numbered notes: those word for word the same for both fitted series once,
    # at the top; the series' own ones under it
    a_notes = fitset[("A", "plasma", "d13C")].best.notes()
    common = [n for n in f.notes() if n in a_notes]
    own = [n for n in f.notes() if n not in a_notes]
    assert common  # here: both rates are incorporation rates (no growth model)
    top = text.split("## Notes on every series")[1].split("\n## ")[0]
    for i, n in enumerate(common, start=1):
        assert f"{i}. {reportdoc.md_escape(n)}" in top
        assert text.count(reportdoc.md_escape(n)) == 1  # shown once, not under each series
    section = text.split("## Series 2: B / plasma / d13C")[1].split("\n## ")[0]
    notes = section.split("### Notes")[1]
    for i, n in enumerate(own, start=1):
        assert f"{i}. {reportdoc.md_escape(n)}" in notes
    if not own:
        assert "No notes of this series' own" in notes


# ----------------------------------------------------------------------------------------
# open bounds
# ----------------------------------------------------------------------------------------
def test_open_bound_shown_as_open(open_fit, tmp_path):
    hl = open_fit.half_lives()
    assert hl.loc[1, "upper_status"] == "open"  # the crafted case: slow pool never approached
    assert math.isinf(hl.loc[1, "upper"])
    assert (hl["lower_status"] == "ok").all() and hl.loc[0, "upper_status"] == "ok"
    md, page = R.write_report([open_fit], tmp_path / "slow", figures=False)
    text = md.read_text(encoding="utf-8")
    (row,) = [ln for ln in text.splitlines() if ln.startswith("| slow pool |")]
    assert f"pool 2 (f = {hl.loc[1, 'fraction']:.3g}): {hl.loc[1, 'half_life']:.4g} \\[" in row
    assert row.count("open") >= 1 and re.search(r", open\\\]", row)
    for doc in (text, page.read_text(encoding="utf-8")):
        assert "∞" not in doc
        assert not re.search(r"\binf\b", doc, re.IGNORECASE)
    # list input: no candidate comparison, hence no weight
    assert "| — |" in row


def test_bound_formatting():
    assert reportdoc.fmt_bound(math.inf, "open") == "open"
    assert reportdoc.fmt_bound(0.0, "open") == "open"
    assert reportdoc.fmt_bound(math.nan, "failed") == "failed"
    assert reportdoc.fmt_bound(1.0, "at_bound") == "1 (at bound)"
    assert reportdoc.fmt_bound(2.34567, "ok") == "2.346"
    assert reportdoc.fmt_bound(math.inf, "ok") == "—"  # never a number that is not one


# ----------------------------------------------------------------------------------------
# escaping
# ----------------------------------------------------------------------------------------
def test_html_and_markdown_escape_labels(fit1, tmp_path):
    label = "<script>alert('x')</script> | *bold*"
    md, page = R.write_report({label: fit1}, tmp_path / "esc.html", figures=False,
                              title="A & B <i>")
    h = page.read_text(encoding="utf-8")
    assert "<script>" not in h and "<i>" not in h
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt; | *bold*" in h
    assert "<title>A &amp; B &lt;i&gt;</title>" in h
    parser = _Tags()
    parser.feed(h)
    assert "script" not in parser.tags and "i" not in parser.tags
    m = md.read_text(encoding="utf-8")
    assert "\\<script\\>alert('x')\\</script\\> \\| \\*bold\\*" in m
    assert "<script>" not in m


# ----------------------------------------------------------------------------------------
# files: overwrite, atomicity, failures
# ----------------------------------------------------------------------------------------
def test_refuses_to_overwrite(fit1, tmp_path):
    paths = R.write_report([fit1], tmp_path / "r.md")
    before = {p: p.read_bytes() for p in paths}
    with pytest.raises(FileExistsError, match=r"already exist.*overwrite=True"):
        R.write_report([fit1], tmp_path / "r.md")
    assert {p: p.read_bytes() for p in paths} == before
    # one existing file is enough
    (tmp_path / "s.html").write_text("mine")
    with pytest.raises(FileExistsError, match="s.html"):
        R.write_report([fit1], tmp_path / "s")
    assert (tmp_path / "s.html").read_text() == "mine"
    assert not (tmp_path / "s.md").exists()


def test_overwrite_replaces_whole_report(fit1, fitset, tmp_path):
    R.write_report(fitset, tmp_path / "r.md")
    assert (tmp_path / "r_figures" / "02_B_plasma_d13C.png").exists()
    paths = R.write_report([fit1], tmp_path / "r.md", overwrite=True, title="Second")
    assert paths[0].read_text(encoding="utf-8").startswith("# Second")
    # the old figures went with the old report
    assert sorted(p.name for p in (tmp_path / "r_figures").iterdir()) == ["01_series_1.png"]
    assert _listing(tmp_path) == ["r.html", "r.md", "r_figures", "r_figures/01_series_1.png"]
    R.write_report([fit1], tmp_path / "r.md", overwrite=True, figures=False)
    assert _listing(tmp_path) == ["r.html", "r.md"]


def test_overwrite_keeps_foreign_files(fit1, tmp_path):
    R.write_report([fit1], tmp_path / "r.md", figures=False)
    (tmp_path / "r_figures").mkdir()
    (tmp_path / "r_figures" / "notes.txt").write_text("keep me")
    with pytest.raises(FileExistsError, match="not report figures"):
        R.write_report([fit1], tmp_path / "r.md", overwrite=True)
    assert (tmp_path / "r_figures" / "notes.txt").read_text() == "keep me"


def test_failing_figure_leaves_nothing(fit1, tmp_path, monkeypatch):
    def boom(*a, **k):
        raise RuntimeError("invented figure failure")

    monkeypatch.setattr(plotting, "plot_overview", boom)
    with pytest.raises(RuntimeError, match="invented figure failure"):
        R.write_report([fit1], tmp_path / "r.md")
    assert _listing(tmp_path) == []


@pytest.mark.parametrize("step", ["backup of the old html", "placing the new html"])
def test_failing_move_rolls_back(fit1, tmp_path, monkeypatch, step):
    old = R.write_report([fit1], tmp_path / "r.md", title="Old")
    before = {p: p.read_bytes() for p in old}
    real = reportdoc.move_path
    calls = {"n": 0}

    def flaky(src, dst):
        calls["n"] += 1
        is_backup = str(dst).endswith("r.html") and ".bak" in str(dst)
        is_final = str(dst) == str(tmp_path / "r.html") and ".bak" not in str(src)
        if (is_backup if step.startswith("backup") else is_final):
            raise OSError("invented disk failure")
        return real(src, dst)

    monkeypatch.setattr(reportdoc, "move_path", flaky)
    with pytest.raises(OSError, match="invented disk failure"):
        R.write_report([fit1], tmp_path / "r.md", title="New", overwrite=True)
    assert calls["n"] > 2
    # the old report is back, byte for byte, and no temporary file is left
    assert {p: p.read_bytes() for p in old} == before
    assert _listing(tmp_path) == sorted(["r.md", "r.html", "r_figures",
                                         "r_figures/01_series_1.png"])


def test_figures_false_writes_two_files(fit1, tmp_path):
    paths = R.write_report({"goat 7": fit1}, tmp_path / "x", figures=False)
    assert paths == [tmp_path / "x.md", tmp_path / "x.html"]
    assert _listing(tmp_path) == ["x.html", "x.md"]
    text = paths[0].read_text(encoding="utf-8")
    assert "## Series 1: goat 7" in text
    assert "Every series was fitted." in text
    assert "no candidates were compared" in text


# ----------------------------------------------------------------------------------------
# bad input
# ----------------------------------------------------------------------------------------
def test_bad_input(fit1, tmp_path):
    with pytest.raises(iso.DataError, match="'fits' must be a FitSet.*got str"):
        R.write_report("fits", tmp_path / "r")
    with pytest.raises(iso.DataError, match="'fits' position 1: expected a TurnoverFit; got int"):
        R.write_report([fit1, 3], tmp_path / "r")
    with pytest.raises(iso.DataError, match="'fits' key 'b': expected a TurnoverFit"):
        R.write_report({"a": fit1, "b": None}, tmp_path / "r")
    with pytest.raises(iso.DataError, match="'fits' is empty"):
        R.write_report([], tmp_path / "r")
    with pytest.raises(iso.DataError, match=r"'path' must end in \.md, \.html .*got .*r\.txt"):
        R.write_report([fit1], tmp_path / "r.txt")
    with pytest.raises(iso.DataError, match="'path': the folder .* does not exist"):
        R.write_report([fit1], tmp_path / "missing" / "r.md")
    with pytest.raises(iso.DataError, match="'level' must be between 0 and 1"):
        R.write_report([fit1], tmp_path / "r", level=95)
    with pytest.raises(iso.DataError,
                       match="'method' must be one of 'profile', 'asymptotic', 'bootstrap'"):
        R.write_report([fit1], tmp_path / "r", method="bca")
    with pytest.raises(iso.DataError, match="'bootstrap' tables are shown only with "
                                            "method='bootstrap'"):
        R.write_report([fit1], tmp_path / "r", bootstrap={"series 1": pd.DataFrame()})
    with pytest.raises(iso.DataError, match="'bootstrap' key 'x' names no series"):
        R.write_report([fit1], tmp_path / "r", method="bootstrap",
                       bootstrap={"x": pd.DataFrame()})
    with pytest.raises(iso.DataError, match="'bootstrap' key 'series 1': expected a "
                                            "DataFrame with columns parameter"):
        R.write_report([fit1], tmp_path / "r", method="bootstrap", bootstrap={"series 1": 3})
    with pytest.raises(iso.DataError, match="'bootstrap' must be a dict"):
        R.write_report([fit1], tmp_path / "r", method="bootstrap", bootstrap=[1])
    with pytest.raises(iso.DataError, match="'n_boot' must be"):
        R.write_report([fit1], tmp_path / "r", method="bootstrap", n_boot=0)
    with pytest.raises(iso.DataError, match="'seed' must be a non-negative integer"):
        R.write_report([fit1], tmp_path / "r", method="bootstrap", seed=-1)
    with pytest.raises(iso.DataError, match="'n_jobs'"):
        R.write_report([fit1], tmp_path / "r", n_jobs=0)
    with pytest.raises(iso.DataError, match="'title' must be a non-empty string"):
        R.write_report([fit1], tmp_path / "r", title="")
    with pytest.raises(iso.DataError, match="'overwrite' must be True or False"):
        R.write_report([fit1], tmp_path / "r", overwrite="yes")
    assert _listing(tmp_path) == []


def test_mixed_time_units_named_per_series(fit1, tmp_path):
    # breath CO2 in hours beside plasma in days (invented)
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 12, 16, 24.0])
    y = DEQ + (D0 - DEQ) * np.exp(-0.3 * t) + np.random.default_rng(2).normal(0, 0.1, t.size)
    breath = iso.TurnoverModel(1).fit(t, y, time_unit="h", warn=False)
    md, _ = R.write_report({"plasma": fit1, "breath": breath}, tmp_path / "u", figures=False)
    text = md.read_text(encoding="utf-8")
    assert "Time unit: days, hours" in text
    hl_b = breath.half_lives().iloc[0]
    hl_p = fit1.half_lives().iloc[0]
    # one summary table per time unit: no column mixes days with hours, nothing converted
    summary = text.split("## Summary")[1].split("\n## ")[0]
    assert "no time was converted" in summary
    days = summary.split("### Series timed in days")[1].split("###")[0]
    hours = summary.split("### Series timed in hours")[1].split("###")[0]
    assert "| Half-life (days) \\[95 % profile interval\\] |" in days
    assert "| Half-life (hours) \\[95 % profile interval\\] |" in hours
    assert f"| plasma | 1 pool; step switch at t = 0 | 12 | {hl_p['half_life']:.4g} " in days
    assert f"| breath | 1 pool; step switch at t = 0 | 11 | {hl_b['half_life']:.4g} " in hours
    assert "breath" not in days and "| plasma |" not in hours


def test_fitset_with_nothing_fitted(tmp_path):
    rows = [{"subject": "Z", "tissue": "hair", "isotope": "d15N", "time": a, "value": 8.0}
            for a in (0.0, 10.0, 20.0, 30.0)]
    fs = iso.fit_each(pd.DataFrame(rows), pools=(1,))
    paths = R.write_report(fs, tmp_path / "none")
    assert len(paths) == 2  # nothing to draw: no figures folder either
    assert _listing(tmp_path) == ["none.html", "none.md"]
    text = paths[0].read_text(encoding="utf-8")
    assert "Series: 1 (0 fitted, 1 not fitted)" in text
    assert "| Z / hair / d15N | no\\_change | all values are equal" in text


def test_file_appearing_meanwhile_is_not_replaced(fit1, tmp_path, monkeypatch):
    real = plotting.plot_overview

    def meanwhile(*a, **k):
        (tmp_path / "r.html").write_text("written by someone else")
        return real(*a, **k)

    monkeypatch.setattr(plotting, "plot_overview", meanwhile)
    with pytest.raises(FileExistsError, match="appeared while the report was written"):
        R.write_report([fit1], tmp_path / "r.md")
    assert _listing(tmp_path) == ["r.html"]
    assert (tmp_path / "r.html").read_text() == "written by someone else"


# ----------------------------------------------------------------------------------------
# bootstrap intervals in the report
# ----------------------------------------------------------------------------------------
def test_bootstrap_intervals_shown(fitset, tmp_path):
    from isoturnover.resampling import bootstrap

    key = ("B", "plasma", "d13C")
    f = fitset[key].best
    res = bootstrap(f, n=60, kind="residual", rng=5, progress=False)
    tab = res.intervals(0.95, method="percentile")
    md, page = R.write_report(fitset, tmp_path / "b", method="bootstrap",
                              bootstrap={key: tab}, n_boot=40, seed=3, figures=False)
    text = md.read_text(encoding="utf-8")
    # the summary's half-life of B carries the given bootstrap bounds, not the profile ones
    b = tab.set_index("parameter").loc["half_life_1"]
    hl = f.half_lives().iloc[0]
    assert "| Half-life (days) \\[95 % bootstrap interval\\] |" in text
    (row,) = [ln for ln in text.splitlines() if ln.startswith("| B / plasma / d13C |")]
    assert f"{hl['half_life']:.4g} \\[{b['lower']:.4g}, {b['upper']:.4g}\\]" in row
    assert f"{hl['lower']:.4g}, {hl['upper']:.4g}" not in row
    # each series has its bootstrap table with units; A was bootstrapped in the report
    assert text.count("### Bootstrap intervals (95 %, residual bootstrap, percentile)") == 2
    assert "Replicates: 60 drawn, 60 used, 0 failed" in text
    assert "Replicates: 40 drawn" in text
    assert f"| half\\_life\\_1 | {b['estimate']:.4g} | {b['stderr']:.4g} | {b['lower']:.4g} | " \
           f"{b['upper']:.4g} | days |" in text
    assert "Efron & Tibshirani 1993" in text and "percentile interval" in text
    # the series bootstrapped here draw from the seed and their name: same text again
    md2, _ = R.write_report(fitset, tmp_path / "b2", method="bootstrap",
                            bootstrap={key: tab}, n_boot=40, seed=3, figures=False)
    assert md2.read_text(encoding="utf-8") == text


def test_every_number_has_its_unit(written):
    text = written[1][0].read_text(encoding="utf-8")
    assert "| Half-life (days) \\[95 % profile interval\\] |" in text
    assert "| n (time points) |" in text
    assert "| RSS (‰²) |" in text
    assert "| Parameter | Estimate | SE | Lower | Upper | Method | Unit |" in text


# ----------------------------------------------------------------------------------------
# the study at a glance, and figures drawn by worker processes
# ----------------------------------------------------------------------------------------
def test_study_figure_at_the_top(written):
    text = written[1][0].read_text(encoding="utf-8")
    glance = text.index("## The study at a glance")
    assert glance < text.index("## Summary") < text.index("## Series 1:")
    assert "![Half-lives of every series](goats_figures/00_study.png)" in text


def test_figures_identical_whatever_the_worker_count(fitset, tmp_path):
    one = R.write_report(fitset, tmp_path / "one", n_jobs=1)
    two = R.write_report(fitset, tmp_path / "two", n_jobs=2)
    assert [p.name for p in one[2:]] == [p.name for p in two[2:]]
    for a, b in zip(one[2:], two[2:]):
        assert a.read_bytes() == b.read_bytes(), a.name
    assert one[0].read_text(encoding="utf-8") == two[0].read_text(
        encoding="utf-8").replace("two_figures", "one_figures")


def test_figures_drawn_ahead_are_the_same_files(fitset, tmp_path):
    from isoturnover.reportfigures import FigureJobs

    plain = R.write_report(fitset, tmp_path / "plain", n_jobs=2)
    jobs = FigureJobs(2, 0.95)
    fits = [r.best for r in fitset.values() if r.best is not None]
    for f in fits:  # started before the report is asked for, as the demo does
        jobs.draw_ahead("overview", f)
    assert len(jobs.ahead) == len(fits)
    ahead = R.write_report(fitset, tmp_path / "ahead", n_jobs=2, figure_jobs=jobs)
    assert jobs.ahead == {} and jobs.executor is None  # every one taken; workers shut down
    assert [p.name for p in plain[2:]] == [p.name for p in ahead[2:]]
    for a, b in zip(plain[2:], ahead[2:]):
        assert a.read_bytes() == b.read_bytes(), a.name
    with pytest.raises(iso.DataError, match="'figure_jobs' must be a FigureJobs"):
        R.write_report(fitset, tmp_path / "bad", figure_jobs="workers")


def test_figure_workers():
    from isoturnover.reportfigures import figure_workers

    assert figure_workers(1, 50) == 1
    assert figure_workers(2, 1) == 1  # never more workers than figures
    assert figure_workers(None, 3) == 1  # a few figures: drawn here
    assert figure_workers(None, 40) in (1, 2)
    with pytest.raises(iso.DataError, match="'n_jobs'"):
        figure_workers(-3, 10)


def _study_rows(n_series, units=("d",), seed=0):
    """Invented half-lives: two groups per unit, every 5th series' upper bound open."""
    rng = np.random.default_rng(seed)
    rows = []
    for u in units:
        for g in ("goats d13C / plasma", "goats d15N / red_cells"):
            for i in range(n_series // (2 * len(units))):
                for pool in (1, 2) if i % 2 else (1,):
                    h = float(rng.lognormal(np.log(5.0 * pool ** 2), 0.3))
                    is_open = i % 5 == 0
                    rows.append({"group": g, "label": f"A{i + 1:03d}", "pool": pool,
                                 "half_life": h, "lower": h / 1.4,
                                 "upper": math.inf if is_open else h * 1.4,
                                 "lower_status": "ok",
                                 "upper_status": "open" if is_open else "ok",
                                 "time_unit": u})
    return pd.DataFrame(rows)


def _arrows(fig):
    """Open-bound arrowheads: markers drawn at the right edge (x = 1 in axes fraction)."""
    n = 0
    for ax in fig.axes:
        for c in ax.collections:
            off = c.get_offsets()
            if len(off) and c.get_transform() != ax.transData and np.allclose(off[:, 0], 1.0):
                n += len(off)
    return n


def test_plot_study_open_bounds_are_arrows_and_units_apart():
    import matplotlib.pyplot as plt

    from isoturnover.plotstudy import plot_study, pretty_isotopes

    tab = _study_rows(12, units=("d", "h"))
    fig = plot_study(tab)
    try:
        # one panel per time unit, each axis naming its unit
        assert [ax.get_xlabel() for ax in fig.axes] == ["Half-life (days)", "Half-life (hours)"]
        assert all(ax.get_xscale() == "log" for ax in fig.axes)
        assert _arrows(fig) == int((tab["upper_status"] == "open").sum())
        labels = [t.get_text() for t in fig.axes[0].get_yticklabels()]
        assert "goats δ¹³C / plasma" in labels and "A001" in labels
    finally:
        plt.close(fig)
    assert pretty_isotopes("goats d15N / d2H, d13Cx") == "goats δ¹⁵N / δ²H, d13Cx"


def test_plot_study_readable_with_200_series():
    import matplotlib.pyplot as plt

    from isoturnover.plotstudy import plot_study

    tab = _study_rows(200)
    fig = plot_study(tab)
    try:
        w, h = fig.get_size_inches()
        assert w == 7.0 and h <= 9.0  # one page
        assert 2 <= len(fig.axes) <= 4  # panels side by side
        shown = [t.get_text() for ax in fig.axes for t in ax.get_yticklabels()]
        assert len([s for s in shown if s.startswith("A")]) == 200  # every series a row
        sizes = {t.get_fontsize() for ax in fig.axes for t in ax.get_yticklabels()}
        assert min(sizes) >= 4.5
    finally:
        plt.close(fig)
    with pytest.raises(iso.DataError, match="plot_study: 'table' lacks the column"):
        plot_study(tab.drop(columns="upper_status"))
    with pytest.raises(iso.DataError, match="'max_rows' must be an integer of at least 5"):
        plot_study(tab, max_rows=2)
