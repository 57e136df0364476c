"""Output folders that lose nothing: one-move replacement, a lock, a manifest, safe CSV cells.

:func:`write_output` is how every output folder of the package is written:

* **One move.** Everything is built in a temporary folder beside the target
  (``.<name>.isoturnover-tmp-…``), then swapped in. On Linux (``renameat2`` with
  ``RENAME_EXCHANGE``) and macOS (``renamex_np`` with ``RENAME_SWAP``) the two folders are
  exchanged in one atomic step; elsewhere the previous folder is renamed to a backup
  (``.<name>.isoturnover-old-…``), the new one renamed into place and the backup removed. A
  process killed at any moment leaves the previous output whole or the new one whole; in
  the second scheme the previous output may wait in its backup, and the next run (or
  :func:`recover_output`) puts it back. The next run also removes the temporary and backup
  folders a killed run left beside the target (only those named for this target, and only
  while it holds the target's lock, so never a live run's).
* **A lock.** :class:`OutputLock` takes ``.<name>.isoturnover-lock`` beside the target:
  ``fcntl.flock`` where it exists (the kernel drops it when its process dies), otherwise a
  file created with ``O_CREAT | O_EXCL`` that holds the process id (a lock whose process is
  gone is taken over). A second run into the same folder is refused at once with one
  :class:`~isoturnover.errors.DataError` line naming the folder.
* **A manifest.** ``.isoturnover-manifest.json`` in the output folder lists the files the
  package wrote. With ``force``, every other file or folder the user put into the output
  (anywhere, the figures folder included) is copied into the new output at the same place;
  the run is refused when one of them stands where the new output writes a file. A
  non-empty folder without a manifest is replaced only when it holds nothing but the files
  the package names (:data:`TOOL_FILES`); otherwise it is refused, listing the others.
* **Path problems first.** :func:`check_out_dir` refuses a target that is a file, a
  dangling symbolic link, a parent that is a file, or a place the process cannot write in
  (checked with :func:`os.access` and by creating and removing a probe file), so the
  command line and :func:`~isoturnover.analysis.run_demo` can call it before any fit.
* **Safe CSV cells.** :func:`neutralise_formulas` prefixes a single quote to every text
  cell that a spreadsheet would read as a formula (OWASP, "CSV Injection").

The module is plain file handling (standard library and pandas); it knows nothing of fits.
"""

from __future__ import annotations

import atexit
import contextlib
import ctypes
import errno
import fnmatch
import hashlib
import json
import os
import re
import secrets
import shutil
import sys
import tempfile
import threading
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from .errors import DataError

try:  # POSIX advisory locks; absent on Windows (the lock-file fallback is used there)
    import fcntl as _fcntl
except ImportError:  # pragma: no cover - not on Linux or macOS
    _fcntl = None

__all__ = [
    "MANIFEST",
    "TOOL_FILES",
    "FORMULA_STARTS",
    "OutputLock",
    "check_out_dir",
    "release_out_dir",
    "recover_output",
    "read_manifest",
    "write_output",
    "neutralise_formulas",
]

MANIFEST = ".isoturnover-manifest.json"
"""Name of the manifest inside an output folder (the files the package wrote)."""

TOOL_FILES = ("results.csv", "fits.json", "report.md", "report.html", "CAUTION.txt",
              "report_figures/*.png", "plan.csv", "plan.md", "plan.png", "clock*.csv",
              "clock_figures/*.png")
"""Files the package writes (shell patterns, relative to the output folder, ``/``-separated).

A non-empty folder without a manifest is replaced with ``force`` only when every file in it
matches one of these."""

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make a spreadsheet read a cell as a formula (OWASP)."""

_MARK = ".isoturnover-"
_KINDS = ("tmp", "old", "probe")
_MAX_LISTED = 10
_MANIFEST_FORMAT = "isoturnover-output"


# --------------------------------------------------------------------------------------------
# Names beside the target
# --------------------------------------------------------------------------------------------

def _tag(target: Path) -> str:
    """The target's name as used in the names beside it (shortened when very long)."""
    name = target.name
    if len(name.encode("utf-8", "surrogateescape")) <= 120:
        return name
    digest = hashlib.sha256(name.encode("utf-8", "surrogateescape")).hexdigest()[:16]
    return f"{name[:40]}~{digest}"


def _prefix(target: Path, kind: str) -> str:
    return f".{_tag(target)}{_MARK}{kind}-"


def _lock_path(target: Path) -> Path:
    return target.parent / f".{_tag(target)}{_MARK}lock"


def _stale_pattern(target: Path):
    kinds = "|".join(_KINDS)
    return re.compile(rf"^\.{re.escape(_tag(target))}{re.escape(_MARK)}({kinds})-[A-Za-z0-9_]+$")


def _target(out) -> Path:
    """The output folder as an absolute path; a link to a folder is followed."""
    try:
        text = os.fspath(out)
    except TypeError:
        raise DataError(f"'out_dir' must be a path (str or path-like); got "
                        f"{type(out).__name__}") from None
    if isinstance(text, bytes):
        text = os.fsdecode(text)
    if not text.strip():
        raise DataError("'out_dir' must name a folder; got an empty path")
    target = Path(os.path.abspath(text))
    if target.is_symlink():
        if not target.exists():
            raise DataError(f"output folder {str(target)!r} is a symbolic link to a missing "
                            f"place ({os.readlink(target)!r}); remove the link or choose "
                            "another folder")
        target = Path(os.path.realpath(target))
    if not target.name:
        raise DataError(f"output folder {str(target)!r} is the root of the file system; "
                        "choose a folder inside it")
    return target


# --------------------------------------------------------------------------------------------
# Path checks
# --------------------------------------------------------------------------------------------

def _check_path(target: Path) -> None:
    """Refuse a target that is not a writable folder or cannot be created (no change made)."""
    name = str(target)
    try:
        here = Path(os.path.realpath(os.getcwd()))
    except OSError:  # the working folder was removed under us
        here = None
    real = Path(os.path.realpath(target))
    if real.parent == real or (here is not None and (here == real or real in here.parents)):
        # the folder is swapped in one move: the working folder would be moved away with it
        raise DataError(f"output folder {name!r} is the current folder or holds it; name a "
                        "new subfolder instead (for example --out results)")
    if os.path.lexists(target):
        if not target.is_dir():
            raise DataError(f"output folder {name!r} exists and is not a folder")
        if not os.access(target, os.W_OK | os.X_OK):
            raise DataError(f"output folder {name!r} cannot be replaced: no permission to "
                            "write in it")
    anc = target.parent
    while not os.path.lexists(anc) and anc != anc.parent:
        anc = anc.parent
    if anc.is_symlink() and not anc.exists():
        raise DataError(f"output folder {name!r} cannot be made: {str(anc)!r} is a symbolic "
                        f"link to a missing place ({os.readlink(anc)!r})")
    if not anc.is_dir():
        raise DataError(f"output folder {name!r} cannot be made: {str(anc)!r} is a file, "
                        "not a folder")
    _probe(anc, target)


def _probe(folder: Path, target: Path) -> None:
    """Create and remove a probe file in ``folder``: can this process write there?"""
    what = f"output folder {str(target)!r} cannot be written: no permission to write in " \
           f"{str(folder)!r}"
    if not os.access(folder, os.W_OK | os.X_OK):
        raise DataError(what)
    try:
        fd, probe = tempfile.mkstemp(prefix=_prefix(target, "probe"), dir=folder)
    except OSError as exc:
        raise DataError(f"{what} ({exc.strerror or exc})") from None
    os.close(fd)
    with contextlib.suppress(OSError):
        os.unlink(probe)


# --------------------------------------------------------------------------------------------
# The lock
# --------------------------------------------------------------------------------------------

@dataclass
class _Held:
    kind: str          # "flock" or "pid"
    fd: int | None     # the open, locked lock file ("flock")
    path: Path
    thread: int
    count: int = 0
    hold: bool = False


_HELD: dict[str, _Held] = {}
_REGISTRY = threading.Lock()


def _busy(target: Path, pid) -> DataError:
    who = f"process {pid}" if pid else "another process"
    return DataError(f"output folder {str(target)!r} is in use by another isoturnover run "
                     f"({who}); wait for it to finish or choose another folder")


def _read_pid(path: Path):
    try:
        text = path.read_text(encoding="ascii", errors="replace").strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None


def _alive(pid: int) -> bool:
    """Whether process ``pid`` runs (on this machine)."""
    if pid == os.getpid():
        return True
    if os.name == "nt":  # pragma: no cover - Windows only
        kernel = ctypes.windll.kernel32
        handle = kernel.OpenProcess(0x1000, False, pid)  # PROCESS_QUERY_LIMITED_INFORMATION
        if not handle:
            return False
        code = ctypes.c_ulong()
        ok = kernel.GetExitCodeProcess(handle, ctypes.byref(code))
        kernel.CloseHandle(handle)
        return bool(ok) and code.value == 259  # STILL_ACTIVE
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _take_flock(path: Path, target: Path):
    """flock the lock file; None when the file system does not support it."""
    while True:
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise DataError(f"output folder {str(target)!r} cannot be locked: its lock file "
                            f"{str(path)!r} cannot be opened ({exc.strerror or exc})") from None
        try:
            _fcntl.flock(fd, _fcntl.LOCK_EX | _fcntl.LOCK_NB)
        except OSError as exc:
            os.close(fd)
            if exc.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                raise _busy(target, _read_pid(path)) from None
            return None  # e.g. ENOLCK on a network file system: use the lock file
        # the holder before us unlinks the file on release: lock the file now at the path
        st = os.fstat(fd)
        try:
            cur = os.stat(path)
        except FileNotFoundError:
            cur = None
        if cur is None or (cur.st_dev, cur.st_ino) != (st.st_dev, st.st_ino):
            os.close(fd)
            continue
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode("ascii"))
        return fd


def _take_pidfile(path: Path, target: Path) -> None:
    """Create the lock file exclusively; take over one whose process is gone."""
    for _ in range(5):
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            pid = _read_pid(path)
            if pid is not None and _alive(pid):
                raise _busy(target, pid) from None
            with contextlib.suppress(FileNotFoundError):
                os.unlink(path)  # a stale lock of a process that is gone
            continue
        try:
            os.write(fd, f"{os.getpid()}\n".encode("ascii"))
        finally:
            os.close(fd)
        return
    raise _busy(target, _read_pid(path))


def _give(held: _Held) -> None:
    if held.kind == "flock":
        with contextlib.suppress(OSError):
            os.unlink(held.path)  # while still locked, so no one locks a dead file
        os.close(held.fd)
    elif _read_pid(held.path) == os.getpid():
        with contextlib.suppress(OSError):
            os.unlink(held.path)


def _drop(key: str) -> None:
    held = _HELD.get(key)
    if held is not None and held.count <= 0 and not held.hold:
        del _HELD[key]
        _give(held)


@atexit.register
def _release_all() -> None:
    with _REGISTRY:
        for key in list(_HELD):
            held = _HELD.pop(key)
            with contextlib.suppress(OSError):
                _give(held)


class OutputLock:
    """Exclusive lock on one output folder, for one process (re-entrant in its thread).

    The lock is the file ``.<name>.isoturnover-lock`` beside the folder (its parent must
    exist). Where :mod:`fcntl` exists it is ``flock``-ed, so the kernel releases it when its
    process dies however it dies; otherwise it is created with ``O_CREAT | O_EXCL`` and
    holds the process id, and a lock whose process is gone is taken over. The file is
    removed on release.

    Parameters
    ----------
    out : str or path-like
        The output folder (it need not exist; a link to a folder is followed).

    Raises
    ------
    DataError
        On :meth:`acquire` (or entering the ``with`` block), when another process (or
        another thread of this one) holds the lock: one line naming the folder.

    Examples
    --------
    >>> with OutputLock(tmp_folder / "out"):  # doctest: +SKIP
    ...     pass  # no other run writes into tmp_folder/out here
    """

    def __init__(self, out):
        self.target = _target(out)
        self.path = _lock_path(self.target)

    def acquire(self, *, hold: bool = False) -> OutputLock:
        """Take the lock (or count one more use of it when this thread holds it).

        Parameters
        ----------
        hold : bool, default=False
            Keep the lock after the matching :meth:`release`: until
            :func:`release_out_dir`, the end of a :func:`write_output` into the folder, or
            the end of the process.

        Returns
        -------
        OutputLock
            This lock.
        """
        key = str(self.path)
        with _REGISTRY:
            held = _HELD.get(key)
            if held is None:
                fd = _take_flock(self.path, self.target) if _fcntl is not None else None
                if fd is not None:
                    held = _Held("flock", fd, self.path, threading.get_ident())
                else:
                    _take_pidfile(self.path, self.target)
                    held = _Held("pid", None, self.path, threading.get_ident())
                _HELD[key] = held
            elif held.thread != threading.get_ident():
                raise _busy(self.target, os.getpid())
            if hold:
                held.hold = True
            else:
                held.count += 1
        return self

    def release(self) -> None:
        """Give back one use of the lock; the file goes when no use or hold is left."""
        key = str(self.path)
        with _REGISTRY:
            held = _HELD.get(key)
            if held is not None and held.count > 0:
                held.count -= 1
            _drop(key)

    def __enter__(self) -> OutputLock:
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def release_out_dir(out) -> None:
    """Release the hold that ``check_out_dir(out, hold=True)`` took (if any).

    Parameters
    ----------
    out : str or path-like
        The output folder.
    """
    key = str(_lock_path(_target(out)))
    with _REGISTRY:
        held = _HELD.get(key)
        if held is not None:
            held.hold = False
            _drop(key)


# --------------------------------------------------------------------------------------------
# Stale folders, the manifest and the contents of a folder
# --------------------------------------------------------------------------------------------

def recover_output(out) -> list[Path]:
    """Tidy what a killed run left beside an output folder (under the folder's lock).

    A backup of the previous output (``.<name>.isoturnover-old-…``) is renamed back to the
    folder when the folder is missing (a run was killed between its two renames), and
    removed otherwise; temporary folders (``.<name>.isoturnover-tmp-…``) and probe files of
    this folder are removed. Nothing else is touched: only names made for this folder, and
    only while this process holds the folder's lock, so no live run's folders.

    Parameters
    ----------
    out : str or path-like
        The output folder.

    Returns
    -------
    list of pathlib.Path
        What was removed (a restored backup is not listed).

    Raises
    ------
    DataError
        When another run holds the folder's lock.
    """
    target = _target(out)
    if not target.parent.is_dir():
        return []
    with OutputLock(target):
        pattern = _stale_pattern(target)
        found = {k: [] for k in _KINDS}
        for entry in os.scandir(target.parent):
            m = pattern.match(entry.name)
            if m:
                found[m.group(1)].append(Path(entry.path))
        if found["old"] and not os.path.lexists(target):
            newest = max(found["old"], key=lambda p: p.lstat().st_ctime_ns)
            os.rename(newest, target)
            found["old"].remove(newest)
        removed = []
        for path in found["tmp"] + found["old"] + found["probe"]:
            if path.is_dir() and not path.is_symlink():
                shutil.rmtree(path, ignore_errors=True)
            else:
                with contextlib.suppress(OSError):
                    path.unlink()
            removed.append(path)
        return removed


def read_manifest(out) -> list[str] | None:
    """The files the package wrote into an output folder, from its manifest.

    Parameters
    ----------
    out : str or path-like
        The output folder.

    Returns
    -------
    list of str or None
        Paths relative to the folder, ``/``-separated; None when there is no manifest or it
        is not one the package wrote (then the folder is treated as having none).
    """
    path = Path(out) / MANIFEST
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("format") != _MANIFEST_FORMAT:
        return None
    files = data.get("files")
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        return None
    return list(files)


def _write_manifest(folder: Path, files: list[str]) -> None:
    data = {"format": _MANIFEST_FORMAT, "version": 1, "files": sorted(files)}
    (folder / MANIFEST).write_text(json.dumps(data, indent=1) + "\n", encoding="utf-8")


def _entries(folder: Path) -> list[str]:
    """Every file, link and empty folder under ``folder``, relative (``/``; folders end in /)."""
    def unreadable(exc):
        raise DataError(f"output folder {str(folder)!r} cannot be read in full: "
                        f"{exc.filename!r} ({exc.strerror or exc})")

    found = []
    for root, dirs, files in os.walk(folder, onerror=unreadable, followlinks=False):
        rel = Path(root).relative_to(folder)
        for d in list(dirs):
            if os.path.islink(os.path.join(root, d)):  # a link to a folder is one entry
                dirs.remove(d)
                files.append(d)
        for f in files:
            found.append((rel / f).as_posix())
        if not dirs and not files and root != os.fspath(folder):
            found.append(rel.as_posix() + "/")
    return sorted(found)


def _tool_named(rel: str) -> bool:
    if rel == MANIFEST:
        return True
    if rel.endswith("/"):
        return any(p.startswith(rel) for p in TOOL_FILES)
    return any(fnmatch.fnmatchcase(rel, p) for p in TOOL_FILES)


def _listed(items) -> str:
    items = list(items)
    text = ", ".join(items[:_MAX_LISTED])
    if len(items) > _MAX_LISTED:
        text += f" and {len(items) - _MAX_LISTED} more"
    return text


def _user_entries(target: Path, force: bool) -> list[str]:
    """Refuse a folder that may not be replaced; else the user's entries to carry over."""
    if not os.path.lexists(target):
        return []
    if not target.is_dir():
        raise DataError(f"output folder {str(target)!r} exists and is not a folder")
    entries = _entries(target)
    if not entries:
        return []
    if not force:
        raise DataError(f"output folder {str(target)!r} is not empty; choose another folder "
                        "or pass --force (force=True) to replace its files")
    mine = read_manifest(target)
    if mine is None:
        foreign = [e for e in entries if not _tool_named(e)]
        if foreign:
            raise DataError(
                f"output folder {str(target)!r} has no {MANIFEST} (it was not written by "
                f"isoturnover) and holds files isoturnover does not write: {_listed(foreign)}; "
                "--force (force=True) replaces only what isoturnover wrote: move them or "
                "choose another folder")
        return []
    mine = set(mine) | {MANIFEST}
    return [e for e in entries if e not in mine]


def _carry_over(target: Path, tmp: Path, keep: list[str], written: list[str]) -> None:
    """Copy the user's entries from the previous output into the new one, or refuse."""
    if not keep:
        return
    new = set(written)
    clash = []
    for rel in keep:
        dst = tmp / rel.rstrip("/")
        parts = Path(rel.rstrip("/")).parts
        parents = ["/".join(parts[:i]) for i in range(1, len(parts))]
        if rel.endswith("/"):
            bad = rel.rstrip("/") in new or any(p in new for p in parents)
        else:
            bad = os.path.lexists(dst) or any(p in new for p in parents)
        if bad:
            clash.append(rel)
    if clash:
        raise DataError(f"output folder {str(target)!r} holds files of yours where this run "
                        f"writes: {_listed(clash)}; move them and run again")
    for rel in keep:
        src, dst = target / rel.rstrip("/"), tmp / rel.rstrip("/")
        if rel.endswith("/"):
            dst.mkdir(parents=True, exist_ok=True)
            continue
        try:
            dst.parent.mkdir(parents=True, exist_ok=True)
            if src.is_symlink():
                os.symlink(os.readlink(src), dst)
            else:
                shutil.copy2(src, dst)
        except OSError as exc:
            raise DataError(f"output folder {str(target)!r}: your file {rel!r} cannot be kept "
                            f"({exc.strerror or exc}); nothing was changed") from None


# --------------------------------------------------------------------------------------------
# The swap
# --------------------------------------------------------------------------------------------

_SWAP_FUNCTION = []


def _swap_function():
    """The C function that exchanges two paths atomically, or None."""
    if not _SWAP_FUNCTION:
        fn = None
        try:
            libc = ctypes.CDLL(None, use_errno=True)
            if sys.platform.startswith("linux"):
                raw = libc.renameat2
                raw.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p,
                                ctypes.c_uint]
                raw.restype = ctypes.c_int

                def fn(a, b):  # AT_FDCWD = -100, RENAME_EXCHANGE = 2
                    return raw(-100, a, -100, b, 2)
            elif sys.platform == "darwin":  # pragma: no cover - macOS only
                raw = libc.renamex_np
                raw.argtypes = [ctypes.c_char_p, ctypes.c_char_p, ctypes.c_uint]
                raw.restype = ctypes.c_int

                def fn(a, b):  # RENAME_SWAP = 2
                    return raw(a, b, 2)
        except (AttributeError, OSError):  # pragma: no cover - old C library
            fn = None
        _SWAP_FUNCTION.append(fn)
    return _SWAP_FUNCTION[0]


def _exchange(a: Path, b: Path) -> bool:
    """Exchange two existing paths in one atomic step; False when not supported here."""
    fn = _swap_function()
    if fn is None:
        return False
    if fn(os.fsencode(a), os.fsencode(b)) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.EINVAL, errno.ENOSYS, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False  # the file system cannot: fall back to two renames
    raise OSError(code, os.strerror(code), str(b))


def _swap(tmp: Path, target: Path) -> None:
    """Put the complete folder ``tmp`` at ``target`` in one move; the old one goes."""
    if not os.path.lexists(target):
        os.rename(tmp, target)
        return
    if _exchange(tmp, target):
        shutil.rmtree(tmp, ignore_errors=True)  # now the previous output
        return
    backup = target.parent / f"{_prefix(target, 'old')}{secrets.token_hex(6)}"
    os.rename(target, backup)
    try:
        os.rename(tmp, target)
    except BaseException:
        os.rename(backup, target)
        raise
    shutil.rmtree(backup, ignore_errors=True)


def _make_tmp(target: Path) -> Path:
    """A new empty folder beside ``target``, with the mode the target has (or the umask's)."""
    for _ in range(100):
        tmp = target.parent / f"{_prefix(target, 'tmp')}{secrets.token_hex(6)}"
        try:
            os.mkdir(tmp, 0o777)  # the umask applies, as for a folder made by hand
        except FileExistsError:  # pragma: no cover - 48 random bits
            continue
        if target.is_dir():
            with contextlib.suppress(OSError):
                shutil.copymode(target, tmp)
        return tmp
    raise FileExistsError(f"no free temporary name beside {str(target)!r}")  # pragma: no cover


def _files(folder: Path) -> list[str]:
    return [e for e in _entries(folder) if not e.endswith("/")]


# --------------------------------------------------------------------------------------------
# Public entry points
# --------------------------------------------------------------------------------------------

def check_out_dir(out, force: bool = False, *, hold: bool = False) -> Path:
    """Check an output folder before any work: path problems, contents, other runs.

    Refuses (with one :class:`~isoturnover.errors.DataError` line naming the folder) when
    the folder

    * is a file, or a symbolic link to a missing place;
    * cannot be made: a parent on its path is a file or a dangling link;
    * cannot be written: no permission in the folder or in the nearest existing parent
      (checked with :func:`os.access` and by creating and removing a probe file);
    * is not empty and ``force`` is False;
    * is not empty, has no manifest and holds files the package does not write
      (:data:`TOOL_FILES`), even with ``force``;
    * is being written by another run (its lock is held).

    Before the contents are judged, what a killed run left beside the folder is tidied
    (:func:`recover_output`). Nothing else is changed, and no folder is created unless
    ``hold`` is True.

    Parameters
    ----------
    out : str or path-like
        The output folder (it need not exist).
    force : bool, default=False
        Accept a non-empty folder (see :func:`write_output` for what is kept).
    hold : bool, default=False
        Keep the folder's lock (:class:`OutputLock`) from now until the end of the next
        :func:`write_output` into it (or :func:`release_out_dir`, or the end of the
        process), so that no other run can start writing there while this one fits. The
        parent folders are created for the lock file. A refused folder is not kept locked.

    Returns
    -------
    pathlib.Path
        The folder as an absolute path (a link to a folder followed).

    Raises
    ------
    DataError
        For each case listed above.
    """
    target = _target(out)
    _check_path(target)
    if hold:
        target.parent.mkdir(parents=True, exist_ok=True)
        OutputLock(target).acquire(hold=True)
    try:
        if target.parent.is_dir():
            with OutputLock(target):
                recover_output(target)
                _user_entries(target, force)
    except BaseException:
        if hold:
            release_out_dir(target)  # a refused folder is not kept locked
        raise
    return target


def write_output(out, build, *, force: bool = False) -> list[Path]:
    """Write an output folder in one move: build it aside, then swap it in.

    Under the folder's lock (:class:`OutputLock`): what a killed run left beside the folder
    is tidied (:func:`recover_output`), the folder is checked (:func:`check_out_dir`), a
    temporary folder ``.<name>.isoturnover-tmp-…`` is made beside it and ``build(tmp)``
    writes the new files into it; then the user's own files are copied over from the
    previous output (with ``force``), the manifest is written, and the temporary folder
    takes the target's place in one move. If anything fails, or the process is stopped,
    the previous output stays whole (or, after a kill between the two renames of the
    fallback scheme, waits in its backup until the next run restores it).

    Parameters
    ----------
    out : str or path-like
        The output folder (created, with its parents, when missing).
    build : callable
        ``build(tmp)`` writes the output's files into the folder ``tmp``
        (a :class:`pathlib.Path`); it must not write :data:`MANIFEST`.
    force : bool, default=False
        Replace a non-empty folder. Files the package wrote (those in its manifest) are
        replaced; every other file, link or empty folder in it (the user's, anywhere,
        the figures folder included) is kept, copied into the new output at the same
        place. A non-empty folder without a manifest is replaced only when it holds
        nothing but :data:`TOOL_FILES`.

    Returns
    -------
    list of pathlib.Path
        The files written (those of ``build``, then the manifest).

    Raises
    ------
    DataError
        For the path problems of :func:`check_out_dir`; when the folder is not empty and
        ``force`` is False; when it has no manifest and holds other files; when a file of
        the user's stands where this run writes one (nothing is changed then); when another
        run holds the folder.
    """
    if not callable(build):
        raise DataError(f"'build' must be callable; got {type(build).__name__}")
    target = _target(out)
    _check_path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    try:
        with OutputLock(target):
            recover_output(target)
            keep = _user_entries(target, force)
            tmp = _make_tmp(target)
            try:
                build(tmp)
                written = _files(tmp)
                if MANIFEST in written:
                    raise DataError(f"'build' must not write {MANIFEST}")
                _carry_over(target, tmp, keep, written)
                _write_manifest(tmp, written)
                _swap(tmp, target)
            finally:
                if os.path.lexists(tmp):
                    shutil.rmtree(tmp, ignore_errors=True)
    finally:
        release_out_dir(target)  # a hold taken by check_out_dir ends with this write
    return [target / rel for rel in written] + [target / MANIFEST]


# --------------------------------------------------------------------------------------------
# CSV cells
# --------------------------------------------------------------------------------------------

def _safe_cell(value):
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def _is_text(series: pd.Series) -> bool:
    dtype = series.dtype
    return (isinstance(dtype, pd.CategoricalDtype) or pd.api.types.is_object_dtype(dtype)
            or pd.api.types.is_string_dtype(dtype))


def neutralise_formulas(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of a table whose text cells cannot run as spreadsheet formulas.

    Following the OWASP guidance on CSV injection, every text cell (and column name) that
    starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return
    (:data:`FORMULA_STARTS`) gets a single quote in front, so a spreadsheet shows it as
    text: ``=HYPERLINK("http://x","y")`` becomes ``'=HYPERLINK("http://x","y")``. Only
    text is touched: columns of a numeric, boolean or date type are left as they are, and
    so are numbers, missing values and other non-text cells within a text column. A text
    cell such as ``"-3.2"`` is prefixed too (it is text, and OWASP makes no exception).
    The index is left as it is (write the table with ``index=False``).

    Parameters
    ----------
    frame : pandas.DataFrame
        The table (not changed).

    Returns
    -------
    pandas.DataFrame
        The neutralised copy (its text columns as ``object``).

    Raises
    ------
    DataError
        When ``frame`` is not a DataFrame.
    """
    if not isinstance(frame, pd.DataFrame):
        raise DataError(f"'frame' must be a pandas DataFrame; got {type(frame).__name__}")
    out = frame.copy()
    for j in range(out.shape[1]):
        col = out.iloc[:, j]
        if _is_text(col):
            out.isetitem(j, col.astype(object).map(_safe_cell))
    if isinstance(out.columns, pd.MultiIndex):
        out.columns = pd.MultiIndex.from_tuples(
            [tuple(_safe_cell(x) for x in t) for t in out.columns], names=out.columns.names)
    else:
        out.columns = pd.Index([_safe_cell(c) for c in out.columns], name=out.columns.name)
    return out
