"""Outputs that lose nothing: a run killed mid-write leaves the previous output whole, a second
run into the same folder is refused, the user's files survive ``force``, text cells cannot run
as spreadsheet formulas, and path problems are caught before any fit."""

import csv
import os
import shutil
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from isoturnover import outputdir
from isoturnover.analysis import analyse, check_out_dir
from isoturnover.errors import DataError
from isoturnover.outputdir import (
    MANIFEST,
    OutputLock,
    neutralise_formulas,
    read_manifest,
    recover_output,
    write_output,
)

FORMULA = '=HYPERLINK("http://x","y")'
TIMES = [0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70]

# The samples of one or more animals: a one-pool change from -25 to -12 permil with a
# half-life of 8 d (the series of tests/test_cli.py), seeded noise of sd 0.1 permil.
SAMPLES_CODE = textwrap.dedent("""
    import numpy as np
    import pandas as pd

    def samples(subjects):
        rng = np.random.default_rng(4)
        rows = []
        for s in subjects:
            for t, e in zip(TIMES, rng.normal(0, 0.1, len(TIMES))):
                v = -12 + (-25 + 12) * np.exp(-np.log(2) / 8 * t) + e
                rows.append({"subject": s, "tissue": "plasma", "isotope": "d13C",
                             "time": t, "value": round(v, 3), "sd": 0.1})
        return pd.DataFrame(rows)
""")
_ns = {"TIMES": TIMES}
exec(SAMPLES_CODE, _ns)
samples = _ns["samples"]


def one_line(exc_info):
    text = str(exc_info.value)
    assert "\n" not in text, text
    return text


def snapshot(folder):
    """Every file under ``folder`` (relative path → bytes)."""
    folder = Path(folder)
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def beside(out):
    """Names in the folder that holds ``out`` that belong to this tool and ``out``."""
    return sorted(p.name for p in Path(out).parent.iterdir()
                  if p.name != Path(out).name and "isoturnover" in p.name)


@pytest.fixture(scope="module")
def fitted():
    a = analyse(samples(["a"]), pools=(1,), title="old run")
    assert a.n_fitted() == 1
    return a


# ---------------------------------------------------------------------------------------------
# 4. formula injection
# ---------------------------------------------------------------------------------------------

def test_formula_subject_is_neutralised_in_results_csv(tmp_path):
    a = analyse(samples([FORMULA, "-b", "c"]), pools=(1,))
    table = a.results_table()
    a.write(tmp_path / "out", figures=False)
    with open(tmp_path / "out" / "results.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    subjects = [r["subject"] for r in rows]
    # OWASP CSV injection: a leading quote makes the spreadsheet show the cell as text
    assert "'" + FORMULA in subjects and "'-b" in subjects and "c" in subjects
    assert FORMULA not in subjects
    # numbers are written as they are: the text round-trips to the table's floats
    back = pd.read_csv(tmp_path / "out" / "results.csv")
    np.testing.assert_array_equal(back["half_life_1"].to_numpy(),
                                  table["half_life_1"].to_numpy())
    assert (back["half_life_1"] > 0).all()
    # the table in memory is unchanged
    assert FORMULA in set(a.results_table()["subject"])


def test_neutralise_formulas_text_cells_only_input_unchanged():
    frame = pd.DataFrame({
        "name": ["=1+1", "+a", "-b", "@c", "\tt", "\rr", "plain", None, "-3.2", "a=b"],
        "number": [-1.5, 2.0, -3.0, 4.0, 5.0, 6.0, 7.0, 8.0, -9.0, 10.0],
        "count": np.arange(-5, 5),
        "flag": [True, False] * 5,
        "mixed": ["=x", 1.5, -2, None, "ok", "+1", 3, "@", "", "-"],
        "=header": ["x"] * 10,
        "category": pd.Categorical(["=k", "k"] * 5),
    })
    before = frame.copy(deep=True)
    out = neutralise_formulas(frame)
    pd.testing.assert_frame_equal(frame, before)  # no input is mutated
    # OWASP: each of = + - @ tab and carriage return at the start gets a quote in front
    assert out["name"].tolist()[:7] == ["'=1+1", "'+a", "'-b", "'@c", "'\tt", "'\rr", "plain"]
    assert pd.isna(out["name"].iloc[7])  # missing stays missing
    assert out["name"].iloc[8] == "'-3.2"  # text, so prefixed (numeric columns never are)
    assert out["name"].iloc[9] == "a=b"
    pd.testing.assert_series_equal(out["number"], frame["number"])
    pd.testing.assert_series_equal(out["count"], frame["count"])
    pd.testing.assert_series_equal(out["flag"], frame["flag"])
    assert out["mixed"].tolist()[:3] == ["'=x", 1.5, -2]
    assert out["mixed"].tolist()[5:] == ["'+1", 3, "'@", "", "'-"]
    assert "'=header" in out.columns and "=header" not in out.columns
    assert out["category"].tolist()[:2] == ["'=k", "k"]
    with pytest.raises(DataError, match="'frame' must be a pandas DataFrame"):
        neutralise_formulas([["=1"]])


# ---------------------------------------------------------------------------------------------
# 1. one move: a run killed mid-write leaves the previous output whole
# ---------------------------------------------------------------------------------------------

KILL_SCRIPT = SAMPLES_CODE + textwrap.dedent("""
    import os, shutil, sys, time
    from pathlib import Path
    from isoturnover import outputdir
    from isoturnover.analysis import analyse

    out, mode, point, flag = sys.argv[1:5]
    TIMES = {times}

    def pause():
        Path(flag).write_text(point)
        time.sleep(300)  # the test kills us here

    def before(fn, when=lambda *a: True):
        def wrapped(*args, **kw):
            if when(*args):
                pause()
            return fn(*args, **kw)
        return wrapped

    if mode == "rename":  # the two-rename scheme of file systems that cannot exchange
        outputdir._exchange = lambda a, b: False
    if point == "before-manifest":
        outputdir._write_manifest = before(outputdir._write_manifest)
    elif point == "before-swap":
        outputdir._swap = before(outputdir._swap)
    elif point == "between-renames":
        calls = []
        real = os.rename
        def rename(a, b):
            calls.append(a)
            if len(calls) == 2:
                pause()
            return real(a, b)
        os.rename = rename
    elif point == "after-swap":
        shutil.rmtree = before(shutil.rmtree, lambda p, *a: "isoturnover-" in str(p))
    a = analyse(samples(["a"]), pools=(1,), title="new run")
    a.write(out, force=True, figures=False)
    Path(flag).write_text("finished")
""").replace("{times}", repr(TIMES))


def _assert_new_whole(out, rows=1):
    listed = read_manifest(out)
    assert listed is not None
    assert sorted(snapshot(out)) == sorted(listed + [MANIFEST])
    assert "new run" in (out / "report.md").read_text(encoding="utf-8")
    assert len(pd.read_csv(out / "results.csv")) == rows


@pytest.mark.parametrize("mode, point, expect_now, expect_after", [
    ("exchange", "before-manifest", "old", "old"),
    ("exchange", "before-swap", "old", "old"),
    ("exchange", "after-swap", "new", "new"),
    ("rename", "between-renames", "missing", "old"),
    ("rename", "after-swap", "new", "new"),
])
def test_run_killed_mid_write_leaves_an_output_whole(fitted, tmp_path, mode, point,
                                                     expect_now, expect_after):
    if mode == "exchange" and outputdir._swap_function() is None:
        pytest.skip("no atomic exchange of folders on this system")
    out = tmp_path / "out"
    fitted.write(out, figures=False)
    old = snapshot(out)
    assert MANIFEST in old
    script = tmp_path / "killed_write.py"
    script.write_text(KILL_SCRIPT, encoding="utf-8")
    flag = tmp_path / "flag"
    proc = subprocess.Popen([sys.executable, str(script), str(out), mode, point, str(flag)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 180
        while not flag.exists() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert flag.exists(), proc.stderr.read().decode() if proc.poll() is not None else ""
        assert flag.read_text() == point
        os.kill(proc.pid, signal.SIGKILL)  # mid-write, with no chance to tidy up
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait()
        proc.stderr.close()
    assert proc.returncode == -signal.SIGKILL
    if expect_now == "old":
        assert snapshot(out) == old
    elif expect_now == "new":
        _assert_new_whole(out)
    else:  # between the renames: the previous output waits whole in its backup
        assert not out.exists()
        backups = [p for p in tmp_path.iterdir() if ".isoturnover-old-" in p.name]
        assert len(backups) == 1 and snapshot(backups[0]) == old
    assert beside(out)  # the killed run left its folders (or its lock file) beside the target
    # the next run tidies up: the backup is put back, stale folders go; the lock is free
    recover_output(out)
    if expect_after == "old":
        assert snapshot(out) == old
    else:
        _assert_new_whole(out)
    assert beside(out) == []
    fitted.write(out, force=True, figures=False)
    assert snapshot(out) == old  # the same analysis writes the same bytes
    assert beside(out) == []


RANDOM_KILL_SCRIPT = SAMPLES_CODE + textwrap.dedent("""
    import sys
    from pathlib import Path
    from isoturnover.analysis import analyse

    out, flag = sys.argv[1:3]
    TIMES = {times}
    a = analyse(samples(["a", "b"]), pools=(1,), title="new run")
    Path(flag).write_text("writing")
    a.write(out, force=True, figures=True)
""").replace("{times}", repr(TIMES))


@pytest.mark.slow  # three subprocesses drawing figures; the fixed kill points above run always
# a write with figures takes about 5 s here (drawing included): seeded delays over 0-6 s land
# while the files are built, near the swap or after the end; each outcome must be whole
@pytest.mark.parametrize("delay", sorted(np.random.default_rng(15).uniform(0.0, 6.0, 3)))
def test_run_killed_at_a_random_moment_leaves_an_output_whole(fitted, tmp_path, delay):
    out = tmp_path / "out"
    fitted.write(out, figures=False)
    old = snapshot(out)
    script = tmp_path / "random_kill.py"
    script.write_text(RANDOM_KILL_SCRIPT, encoding="utf-8")
    flag = tmp_path / "flag"
    env = {**os.environ, "MPLBACKEND": "Agg"}
    proc = subprocess.Popen([sys.executable, str(script), str(out), str(flag)], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 180
        while not flag.exists() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.01)
        assert flag.exists()
        time.sleep(delay)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait()
    if os.path.lexists(out):  # at every moment but between two renames: one whole output
        now = snapshot(out)
        assert now == old or "new run" in now["report.md"].decode("utf-8")
    recover_output(out)
    now = snapshot(out)
    print(f"killed after {delay:.2f} s: {'previous' if now == old else 'new'} output whole")
    if now != old:
        _assert_new_whole(out, rows=2)
    assert beside(out) == []


def test_next_run_removes_stale_folders_of_this_target_only(fitted, tmp_path):
    out = tmp_path / "out"
    fitted.write(out, figures=False)
    old = snapshot(out)
    stale = [tmp_path / ".out.isoturnover-tmp-ab12cd", tmp_path / ".out.isoturnover-old-x_9"]
    for p in stale:
        p.mkdir()
        (p / "results.csv").write_text("partial", encoding="utf-8")
    (tmp_path / ".out.isoturnover-probe-zz").write_text("", encoding="utf-8")
    others = [tmp_path / ".other.isoturnover-tmp-ab12cd", tmp_path / ".out.isoturnover-notes",
              tmp_path / ".isoturnover-ab12cd"]
    for p in others:
        p.mkdir()
    check_out_dir(out, True)  # before any fit: tidies, changes nothing else
    assert not any(p.exists() for p in stale)
    assert all(p.exists() for p in others)
    assert snapshot(out) == old
    # a backup with no target (killed between two renames) is put back
    backup = tmp_path / ".out.isoturnover-old-0a1b"
    out.rename(backup)
    with pytest.raises(DataError, match="not empty"):
        check_out_dir(out, False)
    assert snapshot(out) == old and not backup.exists()


# ---------------------------------------------------------------------------------------------
# 2. a lock: a second run into the same folder is refused at once
# ---------------------------------------------------------------------------------------------

HOLD_SCRIPT = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    from isoturnover.outputdir import OutputLock

    with OutputLock(sys.argv[1]):
        Path(sys.argv[2]).write_text("held")
        time.sleep(300)
""")


def _holder(tmp_path, out):
    script = tmp_path / "hold.py"
    script.write_text(HOLD_SCRIPT, encoding="utf-8")
    flag = tmp_path / "held"
    proc = subprocess.Popen([sys.executable, str(script), str(out), str(flag)],
                            stderr=subprocess.PIPE)
    deadline = time.monotonic() + 120
    while not flag.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    if not flag.exists():
        proc.kill()
        raise AssertionError(proc.stderr.read().decode())
    return proc


def test_second_concurrent_run_is_refused_and_a_dead_lock_taken_over(fitted, tmp_path,
                                                                      capsys):
    from isoturnover.cli import main

    out = tmp_path / "out"
    fitted.write(out, figures=False)
    old = snapshot(out)
    proc = _holder(tmp_path, out)
    try:
        t0 = time.perf_counter()
        with pytest.raises(DataError, match="is in use by another isoturnover run") as err:
            fitted.write(out, force=True, figures=False)
        assert time.perf_counter() - t0 < 5  # at once: no waiting for the lock
        text = one_line(err)
        assert repr(str(out)) in text and f"process {proc.pid}" in text
        with pytest.raises(DataError, match="in use"):
            check_out_dir(out, True)
        # the command line refuses before fitting, with one line naming the folder
        f = tmp_path / "samples.csv"
        samples(["a"]).to_csv(f, index=False)
        capsys.readouterr()
        code = main(["fit", str(f), "--out", str(out), "--force", "--no-figures"])
        err_text = capsys.readouterr().err
        assert code == 2
        lines = [ln for ln in err_text.splitlines() if ln.strip()]
        assert len(lines) == 1 and lines[0].startswith("error: ") and str(out) in lines[0]
        assert snapshot(out) == old
    finally:
        os.kill(proc.pid, signal.SIGKILL)  # the holder dies without releasing
        proc.wait()
        proc.stderr.close()
    # the lock of a dead process is taken over
    written = fitted.write(out, force=True, figures=False)
    assert out / MANIFEST in written and snapshot(out) == old


def test_lock_is_refused_to_another_thread_and_reentrant_in_its_own(tmp_path):
    out = tmp_path / "out"
    got = []

    def other():
        try:
            with OutputLock(out):
                got.append("took it")
        except DataError as exc:
            got.append(str(exc))

    with OutputLock(out):
        with OutputLock(out):  # the same thread may take it again
            pass
        t = threading.Thread(target=other)
        t.start()
        t.join()
    assert len(got) == 1 and "in use" in got[0]
    assert beside(out) == []  # the lock file goes with the lock


def test_lock_file_fallback_takes_over_a_dead_process_only(tmp_path, monkeypatch):
    # where fcntl is missing, the lock is a file created exclusively, holding the pid
    monkeypatch.setattr(outputdir, "_fcntl", None)
    out = tmp_path / "out"
    lock = tmp_path / ".out.isoturnover-lock"
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    lock.write_text(f"{dead.pid}\n", encoding="ascii")
    with OutputLock(out):
        assert lock.read_text(encoding="ascii").strip() == str(os.getpid())
    assert not lock.exists()
    live = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        lock.write_text(f"{live.pid}\n", encoding="ascii")
        with pytest.raises(DataError, match=f"in use by another isoturnover run "
                                            f"\\(process {live.pid}\\)"):
            OutputLock(out).acquire()
    finally:
        live.kill()
        live.wait()
    assert lock.exists()  # someone else's lock is never removed


def test_hold_keeps_the_lock_from_the_check_to_the_end_of_the_write(fitted, tmp_path):
    out = tmp_path / "out"
    check_out_dir(out, False, hold=True)
    lock = tmp_path / ".out.isoturnover-lock"
    assert lock.exists()
    r = subprocess.run([sys.executable, "-c",
                        "import sys; from isoturnover.outputdir import check_out_dir\n"
                        "try:\n    check_out_dir(sys.argv[1], True)\n"
                        "except Exception as e:\n    print(e)", str(out)],
                       capture_output=True, text=True, timeout=120)
    assert "is in use by another isoturnover run" in r.stdout, r.stderr
    fitted.write(out, figures=False)
    assert not lock.exists()  # released when the write ends
    with pytest.raises(DataError, match="not empty"):
        check_out_dir(out, False, hold=True)
    assert not lock.exists()  # a refused folder is not kept locked


# ---------------------------------------------------------------------------------------------
# 3. the manifest: force keeps the user's files
# ---------------------------------------------------------------------------------------------

def test_force_keeps_files_the_user_put_into_the_output(fitted, tmp_path):
    out = tmp_path / "out"
    fitted.write(out, figures=False)
    mine = {"notes.txt": b"my notes", "report_figures/my_plot.png": b"\x89PNG mine",
            "deep/er/data.csv": b"x,y\n1,2\n"}
    for rel, data in mine.items():
        (out / rel).parent.mkdir(parents=True, exist_ok=True)
        (out / rel).write_bytes(data)
    (out / "empty").mkdir()
    (out / "link.txt").symlink_to("notes.txt")
    (out / "results.csv").write_text("edited by hand", encoding="utf-8")  # a file we wrote
    written = fitted.write(out, force=True, figures=False)
    now = snapshot(out)
    for rel, data in mine.items():
        assert now[rel] == data
    assert (out / "empty").is_dir() and os.readlink(out / "link.txt") == "notes.txt"
    assert now["results.csv"] != b"edited by hand"  # ours is replaced
    assert sorted(read_manifest(out)) == sorted(p.relative_to(out).as_posix()
                                                for p in written if p.name != MANIFEST)
    assert "notes.txt" not in read_manifest(out)  # user files never enter the manifest


def test_user_file_where_the_run_writes_is_refused_and_nothing_changes(tmp_path):
    out = tmp_path / "out"

    def build(tmp, text="one"):
        (tmp / "results.csv").write_text(text, encoding="utf-8")

    write_output(out, build)
    (out / "report.md").write_text("mine", encoding="utf-8")  # not in the manifest
    before = snapshot(out)

    def build2(tmp):
        build(tmp, "two")
        (tmp / "report.md").write_text("ours", encoding="utf-8")

    with pytest.raises(DataError, match=r"holds files of yours where this run writes: "
                                        r"report\.md") as err:
        write_output(out, build2, force=True)
    one_line(err)
    assert snapshot(out) == before and beside(out) == []


def test_folder_without_manifest_replaced_only_when_it_holds_our_files(fitted, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "results.csv").write_text("old", encoding="utf-8")
    (out / "report_figures").mkdir()
    (out / "report_figures" / "a.png").write_bytes(b"png")
    (out / "report_figures" / "keep.svg").write_text("mine", encoding="utf-8")
    (out / "thesis.docx").write_bytes(b"mine")
    before = snapshot(out)
    with pytest.raises(DataError, match=r"has no \.isoturnover-manifest\.json .* "
                                        r"report_figures/keep\.svg, thesis\.docx") as err:
        fitted.write(out, force=True, figures=False)
    one_line(err)
    with pytest.raises(DataError, match="thesis.docx"):
        check_out_dir(out, True)  # refused before any fit too
    assert snapshot(out) == before
    (out / "thesis.docx").unlink()
    (out / "report_figures" / "keep.svg").unlink()
    fitted.write(out, force=True, figures=False)  # only our names: replaced
    assert "report_figures/a.png" not in snapshot(out)
    assert read_manifest(out) is not None


def test_non_empty_folder_refused_without_force(fitted, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "x.txt").write_text("x", encoding="utf-8")
    with pytest.raises(DataError, match=r"is not empty; choose another folder or pass "
                                        r"--force") as err:
        fitted.write(out, figures=False)
    one_line(err)
    assert snapshot(out) == {"x.txt": b"x"} and beside(out) == []


def test_link_to_the_output_folder_is_kept_and_followed(fitted, tmp_path):
    real = tmp_path / "real"
    fitted.write(real, figures=False)
    old = snapshot(real)
    link = tmp_path / "link"
    link.symlink_to(real, target_is_directory=True)
    fitted.write(link, force=True, figures=False)
    assert link.is_symlink() and snapshot(real) == old


# ---------------------------------------------------------------------------------------------
# 6. path problems are caught before any work
# ---------------------------------------------------------------------------------------------

def _no_write_folder(tmp_path):
    """A folder this process cannot write in, or None when it cannot be made here."""
    d = tmp_path / "locked"
    d.mkdir()
    if os.geteuid() != 0:
        d.chmod(0o555)
        return d
    # root may write anywhere os.access says; an immutable folder refuses even root, and
    # only the probe file finds that out
    if shutil.which("chattr") is None:
        return None
    r = subprocess.run(["chattr", "+i", str(d)], capture_output=True)
    return d if r.returncode == 0 else None


def _path_cases(tmp_path):
    a_file = tmp_path / "a_file.txt"
    a_file.write_text("x", encoding="utf-8")
    dangling = tmp_path / "dangling"
    dangling.symlink_to(tmp_path / "missing")
    return {
        "target is a file": (a_file, "exists and is not a folder"),
        "parent is a file": (a_file / "out", r"a_file\.txt' is a file, not a folder"),
        "target is a dangling link": (dangling, "is a symbolic link to a missing place"),
        "parent is a dangling link": (dangling / "out",
                                      "dangling' is a symbolic link to a missing place"),
    }


@pytest.mark.parametrize("case", ["target is a file", "parent is a file",
                                  "target is a dangling link", "parent is a dangling link",
                                  "no write permission"])
def test_path_problems_are_caught_before_any_fit(case, tmp_path, monkeypatch, capsys):
    import isoturnover.analysis as analysis
    from isoturnover.cli import main

    if case == "no write permission":
        d = _no_write_folder(tmp_path)
        if d is None:
            pytest.skip("cannot make a folder this process may not write in")
        out, pattern = d / "out", "no permission to write in"
    else:
        out, pattern = _path_cases(tmp_path)[case]
    try:
        def no_fit(*a, **k):
            raise AssertionError("the fit started before the output path was checked")

        monkeypatch.setattr(analysis, "fit_each", no_fit)
        monkeypatch.setattr(analysis, "analyse", no_fit)
        with pytest.raises(DataError, match=pattern) as err:
            check_out_dir(out, True)
        assert repr(str(out)) in one_line(err)
        with pytest.raises(DataError, match=pattern):
            analysis.run_demo(out, force=True, figures=False)
        f = tmp_path / "samples.csv"
        f.write_text("subject,tissue,isotope,time,value\n", encoding="utf-8")
        capsys.readouterr()
        assert main(["fit", str(f), "--out", str(out), "--no-figures"]) == 2
        err_text = capsys.readouterr().err
        assert err_text.startswith("error: ") and len(err_text.strip().splitlines()) == 1
        assert "not a folder" in err_text or "symbolic link" in err_text \
            or "permission" in err_text
    finally:
        if case == "no write permission":
            if os.geteuid() == 0:
                subprocess.run(["chattr", "-i", str(out.parent)], check=True)
            else:
                out.parent.chmod(0o755)
    if case == "target is a file":
        assert out.read_text(encoding="utf-8") == "x"
    elif case == "target is a dangling link":
        assert out.is_symlink() and not out.exists()
    else:
        assert not os.path.lexists(out)  # nothing was made
    assert not list(tmp_path.glob(".*isoturnover*"))


@pytest.mark.parametrize("where", [".", ".."])
def test_output_folder_holding_the_working_folder_is_refused(where, tmp_path, monkeypatch,
                                                              capsys):
    # the output is swapped in one move, which would carry the working folder away with it
    from isoturnover.cli import main

    work = tmp_path / "work"
    work.mkdir()
    (work / "notes.txt").write_text("mine", encoding="utf-8")
    monkeypatch.chdir(work)
    with pytest.raises(DataError, match="is the current folder or holds it"):
        check_out_dir(where, True)
    assert main(["demo", "--out", where, "--force", "--no-figures"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "current folder" in err
    assert (work / "notes.txt").read_text(encoding="utf-8") == "mine"
    assert Path.cwd() == work
