"""The worked-analysis notebooks in notebooks/: they run top to bottom and are committed clean.

Each notebook is executed with nbclient in a kernel started from this test's own interpreter
(a kernelspec written to a temporary folder, so the installed package is the one tested), with
``MPLBACKEND=Agg`` (no display needed), from an empty temporary working directory and with
``TMPDIR`` pointing into the test's temporary folder (the report of notebook 1 goes to
``tempfile.mkdtemp()``, so it lands there and can be checked).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import nbformat
import pytest

NOTEBOOKS = Path(__file__).resolve().parent.parent / "notebooks"
NAMES = ("01_diet_switch.ipynb", "02_growth_dilution.ipynb")
CELL_TIMEOUT = 300  # s per cell


def _read(name):
    path = NOTEBOOKS / name
    assert path.is_file(), f"notebook {path} is missing"
    return nbformat.read(path, as_version=4)


def _kernel_manager(tmp_path: Path):
    """A kernel manager whose only kernelspec runs ipykernel in this interpreter."""
    from jupyter_client.kernelspec import KernelSpecManager
    from jupyter_client.manager import KernelManager

    kernels = tmp_path / "kernels"
    spec = kernels / "isoturnover-test"
    spec.mkdir(parents=True)
    (spec / "kernel.json").write_text(json.dumps({
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "Python (isoturnover tests)",
        "language": "python",
    }), encoding="utf-8")
    ksm = KernelSpecManager(kernel_dirs=[str(kernels)])
    return KernelManager(kernel_name="isoturnover-test", kernel_spec_manager=ksm)


def _execute(name, tmp_path, monkeypatch):
    from nbclient import NotebookClient

    nb = _read(name)
    work = tmp_path / "work"
    work.mkdir()
    tmp = tmp_path / "tmp"
    tmp.mkdir()
    monkeypatch.setenv("MPLBACKEND", "Agg")
    monkeypatch.setenv("TMPDIR", str(tmp))
    client = NotebookClient(nb, km=_kernel_manager(tmp_path), timeout=CELL_TIMEOUT,
                            allow_errors=False, resources={"metadata": {"path": str(work)}})
    client.execute()
    return nb, work, tmp


def _outputs(nb):
    """All text the executed code cells showed (streams, plain text and HTML)."""
    parts, html_tables, errors = [], 0, []
    for cell in nb.cells:
        if cell.cell_type != "code":
            continue
        for out in cell.get("outputs", []):
            if out.output_type == "error":
                errors.append(f"{out.ename}: {out.evalue}")
            elif out.output_type == "stream":
                parts.append(out.text)
            elif "data" in out:
                data = out["data"]
                parts.append(data.get("text/plain", ""))
                html = data.get("text/html", "")
                parts.append(html)
                html_tables += "<table" in html
    return "\n".join(parts), html_tables, errors


def _check_committed_clean(name):
    """The committed notebook: valid, no outputs, python3 kernel, labelled invented, ending
    with the animal-care caution."""
    committed = _read(name)
    nbformat.validate(committed)
    assert all(not c.outputs and c.execution_count is None
               for c in committed.cells if c.cell_type == "code")
    assert committed.metadata.get("kernelspec", {}).get("name") == "python3"
    markdown = [" ".join(c.source.split()) for c in committed.cells
                if c.cell_type == "markdown"]
    assert "data are invented" in markdown[0]
    assert "animal-care authority" in markdown[-1] and "not replace it" in markdown[-1]


def _check_wrote_nothing(work, tmp):
    """Nothing written: not in the work dir, no figure or table in the temporary folder."""
    assert list(work.iterdir()) == []
    assert not [p for p in tmp.rglob("*") if p.suffix in (".png", ".csv", ".md", ".html")]


def test_diet_switch_notebook_runs(tmp_path, monkeypatch):
    nb, work, tmp = _execute("01_diet_switch.ipynb", tmp_path, monkeypatch)
    text, tables, errors = _outputs(nb)
    assert errors == []
    assert tables >= 10, f"expected the notebook to show tables; found {tables}"
    assert "time unit: d" in text and "time unit: h" in text
    # the breath fit is in hours and its axis label says so
    assert "Time since diet switch (hours)" in text
    assert "rows are analytic replicates of" in text
    # fit_each over every goat: 8 goats x 3 series
    assert "24 series, 24 fitted, 0 not fitted" in text
    # the report went to a temporary folder, with its figures, and nothing to the work dir
    assert list(work.iterdir()) == []
    reports = list(tmp.glob("isoturnover_goats_*"))
    assert len(reports) == 1
    md = list(reports[0].glob("*.md"))
    html = list(reports[0].glob("*.html"))
    pngs = list(reports[0].glob("*_figures/*.png"))
    # the study overview (three series) and one figure per series
    assert len(md) == 1 and len(html) == 1 and len(pngs) == 4
    assert any(p.name == "00_study.png" for p in pngs)
    assert all(p.stat().st_size > 10_000 for p in pngs)
    assert pngs[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "animal-care authority" in md[0].read_text(encoding="utf-8")


def test_growth_dilution_notebook_runs(tmp_path, monkeypatch):
    nb, work, _ = _execute("02_growth_dilution.ipynb", tmp_path, monkeypatch)
    text, tables, errors = _outputs(nb)
    assert errors == []
    assert tables >= 10, f"expected the notebook to show tables; found {tables}"
    assert "catabolic" in text and "incorporation" in text
    assert "fry_arnold_c" in text
    assert "BootstrapResult subjects" in text
    assert list(work.iterdir()) == []


def test_field_plan_notebook_runs_committed_clean(tmp_path, monkeypatch):
    from isoturnover.design import PLAN_CAUTION

    name = "04_field_plan.ipynb"
    _check_committed_clean(name)
    nb, work, tmp = _execute(name, tmp_path, monkeypatch)
    text, tables, errors = _outputs(nb)
    assert errors == []
    assert tables >= 5, f"expected the notebook to show tables; found {tables}"
    # equilibration and windows: from rates, from the pilot population (a new bird)
    assert "Equilibration time (95 %)" in text and "prediction" in text
    # the window checked by numerical integration of the weight (in the notebook)
    assert "∫ w over the red-cell 50 % window: 0.50000" in text
    # designs with constraints, a prior-averaged one, the command line, the checks
    assert "Samples: 20 on 5 animals" in text
    assert "averaged over a log-normal prior on the rates (cv 0.5" in text
    assert "Simulated experiments: 150" in text and "Smallest number of animals" in text
    assert " ".join(PLAN_CAUTION.split()) in " ".join(text.split())
    # nothing written: not in the work dir, not in the temporary folder
    assert list(work.iterdir()) == []
    assert not [p for p in tmp.rglob("plan.*")]


def test_population_notebook_runs_committed_clean(tmp_path, monkeypatch):
    from isoturnover.conventions import CAUTION

    name = "03_population.ipynb"
    _check_committed_clean(name)
    nb, work, tmp = _execute(name, tmp_path, monkeypatch)
    text, tables, errors = _outputs(nb)
    assert errors == []
    assert tables >= 5, f"expected the notebook to show tables; found {tables}"
    # the shared fit of the eight goats, its half-life and the AICc comparison
    assert "Shared fit of 8 series" in text and "half-life of pool 1 [all]" in text
    assert "AICc prefers the" in text
    # the pen comparison: the test and the half-life ratio
    assert "F test p = " in text and "likelihood-ratio p = " in text
    assert "half-life of pen B / pen A" in text
    # the population estimate, its forest plot's axis and the caution
    assert "Population half-life from 8 animals" in text
    assert "prediction interval" in text and "x axis: Half-life (days)" in text
    assert " ".join(CAUTION.split()) in " ".join(text.split())
    _check_wrote_nothing(work, tmp)

def test_field_clock_notebook_runs_committed_clean(tmp_path, monkeypatch):
    from isoturnover.conventions import CAUTION

    name = "05_field_clock.ipynb"
    _check_committed_clean(name)
    nb, work, tmp = _execute(name, tmp_path, monkeypatch)
    text, tables, errors = _outputs(nb)
    assert errors == []
    assert tables >= 2, f"expected the notebook to show tables; found {tables}"
    # one animal's clock, and the closed form checked in the notebook (its own assert)
    assert "Time since the diet change (plasma, red_cells)" in text
    assert "closed form" in text
    # the batch against the invented truth, both ways; the statuses explained on W01, W12
    assert "old diet known: the true time inside the 95 % interval for" in text
    assert "old diet unknown: the true time inside the 95 % interval for" in text
    assert "W01 -> too_early" in text and "W12 -> equilibrated" in text
    assert "x axis: time since the diet change (days)" in text
    assert " ".join(CAUTION.split()) in " ".join(text.split())
    _check_wrote_nothing(work, tmp)


def test_segments_notebook_runs_committed_clean(tmp_path, monkeypatch):
    from isoturnover.conventions import CAUTION

    name = "06_segments.ipynb"
    _check_committed_clean(name)
    nb, work, tmp = _execute(name, tmp_path, monkeypatch)
    text, tables, errors = _outputs(nb)
    assert errors == []
    assert tables >= 4, f"expected the notebook to show tables; found {tables}"
    # the four goats' profiles, fitted with the segment model against the invented truth
    assert "segments per goat: {'G01': 24, 'G02': 24, 'G05': 24, 'G06': 24}" in text
    assert "the true half-life inside the 95 % profile interval for" in text
    assert "segments of a growing tissue (formation-interval means)" in text
    # the resolution warning on the 8 mm cut, the growth-rate check, the segment plan
    assert "DesignWarning: pool k1: half-life" in text and "shortest 20" in text
    assert "G05, true half-life" in text
    assert "Segment plan for half-life (k1)" in text
    # the diet history read back: switch times against the truth (day 0; day 120 for pen B)
    assert "switch times within one grid step (10 days) of the truth for" in text
    assert "segment profile: 24 segments from 0 to 96" in text
    assert "top axis: ['distance from the base of the tissue (mm)']" in text
    assert " ".join(CAUTION.split()) in " ".join(text.split())
    _check_wrote_nothing(work, tmp)


@pytest.mark.parametrize("name", NAMES)
def test_notebook_committed_without_outputs(name):
    nb = _read(name)
    nbformat.validate(nb)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert code, f"{name} has no code cells"
    dirty = [i for i, c in enumerate(nb.cells)
             if c.cell_type == "code" and (c.outputs or c.execution_count is not None)]
    assert dirty == [], f"{name}: cells {dirty} carry outputs or execution counts; strip them"
    assert nb.metadata.get("kernelspec", {}).get("name") == "python3"


@pytest.mark.parametrize("name", NAMES)
def test_notebook_labels_data_invented_and_ends_with_animal_care(name):
    nb = _read(name)
    first = next(c for c in nb.cells if c.cell_type == "markdown")
    last = [c for c in nb.cells if c.cell_type == "markdown"][-1]
    ending = " ".join(last.source.split())
    assert "data are invented" in " ".join(first.source.split())
    assert "animal-care authority" in ending and "not replace it" in ending
