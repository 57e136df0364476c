"""The report's document model, its Markdown and HTML rendering, and all-or-nothing writes.

A :class:`Doc` collects headings, paragraphs (plain or strong segments), tables, lists and
figures; :func:`render_markdown` and :func:`render_html` turn it into text (Markdown special
characters escaped, HTML escaped with :func:`html.escape`). :func:`commit_files` moves
temporary files into place, backing up what it replaces and restoring everything if any
step fails, so a report is written whole or not at all. Used by :mod:`isoturnover.report`.
"""

from __future__ import annotations

import html
import math
import os
import re
import shutil
import tempfile
from pathlib import Path

__all__ = ["Doc", "render_markdown", "render_html", "fmt_number", "fmt_bound", "fmt_text",
           "fmt_interval", "pct_text", "move_path", "remove_path", "temp_file", "commit_files",
           "slug", "md_escape"]


# ----------------------------------------------------------------------------------------
# a tiny document model rendered to Markdown and to HTML
# ----------------------------------------------------------------------------------------
class Doc:
    """Blocks: ("h", level, text), ("p", segments), ("table", header, rows),
    ("ol", items), ("ul", items), ("img", url, alt, caption).

    Text is plain (escaped on rendering); a paragraph is a list of segments, each a plain
    string or a tuple ("em" | "strong", text).
    """

    def __init__(self):
        self.blocks = []

    def h(self, level, text):
        self.blocks.append(("h", level, str(text)))

    def p(self, *segments):
        self.blocks.append(("p", list(segments)))

    def table(self, header, rows):
        self.blocks.append(("table", [str(h) for h in header],
                            [[str(c) for c in r] for r in rows]))

    def ol(self, items):
        self.blocks.append(("ol", [str(i) for i in items]))

    def ul(self, items):
        self.blocks.append(("ul", items))

    def img(self, url, alt, caption):
        self.blocks.append(("img", url, str(alt), str(caption)))


_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>|#])")


def md_escape(text):
    """Escape Markdown's active characters (CommonMark backslash escapes) in plain text."""
    return _MD_SPECIAL.sub(r"\\\1", str(text)).replace("\n", " ")


def _md_segments(segs):
    out = []
    for s in segs:
        if isinstance(s, tuple):
            kind, txt = s
            mark = "*" if kind == "em" else "**"
            out.append(f"{mark}{md_escape(txt)}{mark}")
        else:
            out.append(md_escape(s))
    return "".join(out)


def _html_segments(segs):
    out = []
    for s in segs:
        if isinstance(s, tuple):
            kind, txt = s
            out.append(f"<{kind}>{html.escape(txt)}</{kind}>")
        else:
            out.append(html.escape(s))
    return "".join(out)


def _item_segments(item):
    return item if isinstance(item, list) else [item]


def render_markdown(doc):
    out = []
    for b in doc.blocks:
        kind = b[0]
        if kind == "h":
            out.append("#" * b[1] + " " + md_escape(b[2]))
        elif kind == "p":
            out.append(_md_segments(b[1]))
        elif kind == "table":
            header, rows = b[1], b[2]
            lines = ["| " + " | ".join(md_escape(h) for h in header) + " |",
                     "|" + "|".join("---" for _ in header) + "|"]
            lines += ["| " + " | ".join(md_escape(c) for c in r) + " |" for r in rows]
            out.append("\n".join(lines))
        elif kind == "ol":
            out.append("\n".join(f"{i + 1}. {md_escape(t)}" for i, t in enumerate(b[1])))
        elif kind == "ul":
            out.append("\n".join(f"- {_md_segments(_item_segments(t))}" for t in b[1]))
        elif kind == "img":
            out.append(f"![{md_escape(b[2])}]({b[1]})\n\n{md_escape(b[3])}")
    return "\n\n".join(out) + "\n"


_CSS = (
    "body{font-family:Helvetica,Arial,sans-serif;max-width:60em;margin:2em auto;"
    "padding:0 1em;line-height:1.45;color:#111}"
    "table{border-collapse:collapse;margin:0.6em 0 1.2em 0;font-size:0.9em}"
    "th,td{border:1px solid #bbb;padding:0.25em 0.5em;text-align:left;vertical-align:top}"
    "th{background:#f0f0f0}figure{margin:1em 0}img{max-width:100%}"
    "figcaption{font-size:0.9em;color:#333}.caution{border-left:4px solid #D55E00;"
    "padding:0.4em 0.8em;background:#fff6ef}"
)


def render_html(doc, title):
    e = html.escape
    out = ["<!DOCTYPE html>", "<html lang=\"en\">", "<head>", "<meta charset=\"utf-8\">",
           f"<title>{e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>"]
    for b in doc.blocks:
        kind = b[0]
        if kind == "h":
            lv = min(max(int(b[1]), 1), 6)
            out.append(f"<h{lv}>{e(b[2])}</h{lv}>")
        elif kind == "p":
            segs = b[1]
            cls = " class=\"caution\"" if segs and segs[0] == ("strong", "Caution.") else ""
            out.append(f"<p{cls}>{_html_segments(segs)}</p>")
        elif kind == "table":
            header, rows = b[1], b[2]
            out.append("<table><thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in header)
                       + "</tr></thead><tbody>")
            out += ["<tr>" + "".join(f"<td>{e(c)}</td>" for c in r) + "</tr>" for r in rows]
            out.append("</tbody></table>")
        elif kind == "ol":
            out.append("<ol>" + "".join(f"<li>{e(t)}</li>" for t in b[1]) + "</ol>")
        elif kind == "ul":
            out.append("<ul>" + "".join(f"<li>{_html_segments(_item_segments(t))}</li>"
                                        for t in b[1]) + "</ul>")
        elif kind == "img":
            out.append(f"<figure><img src=\"{e(b[1])}\" alt=\"{e(b[2])}\">"
                       f"<figcaption>{e(b[3])}</figcaption></figure>")
    out += ["</body>", "</html>"]
    return "\n".join(out) + "\n"


# ----------------------------------------------------------------------------------------
# formatting of numbers and interval bounds
# ----------------------------------------------------------------------------------------
def fmt_number(x, digits=4):
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "—"
    if not math.isfinite(x):
        return "—"
    return f"{x:.{digits}g}"


def fmt_bound(x, status):
    """An interval bound as text: a number only when its status is 'ok' (or 'at_bound')."""
    status = str(status)
    if status == "open":
        return "open"
    if status == "failed":
        return "failed"
    if status == "fixed":
        return "fixed"
    if status == "not_available":
        return "n/a"
    if status == "at_bound":
        return f"{fmt_number(x)} (at bound)"
    if status == "ok":
        return fmt_number(x)
    return status


def fmt_text(x):
    """A table cell from a possibly missing value (NaN or None become an empty cell)."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return ""
    return str(x)


def fmt_interval(lo, hi, ls, hs):
    return f"[{fmt_bound(lo, ls)}, {fmt_bound(hi, hs)}]"


def pct_text(level):
    return f"{level * 100:g} %"


# ----------------------------------------------------------------------------------------
# files: atomic, all-or-nothing
# ----------------------------------------------------------------------------------------
def move_path(src, dst):
    """Rename ``src`` to ``dst`` in the same folder (atomic on POSIX and Windows)."""
    os.replace(src, dst)


def remove_path(p):
    p = Path(p)
    if p.is_dir() and not p.is_symlink():
        shutil.rmtree(p, ignore_errors=True)
    else:
        try:
            p.unlink()
        except FileNotFoundError:
            pass


def temp_file(folder, name, data):
    fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o644)
    except BaseException:
        remove_path(tmp)
        raise
    return Path(tmp)


def commit_files(plan, folder, overwrite):
    """Move temporaries into place. ``plan``: list of (tmp or None, target).

    An existing target is first renamed to a backup; on any failure every target placed so
    far is removed, backups are restored and temporaries deleted, then the error re-raised.
    (A backup that cannot be moved back is left in its hidden ``.bak`` folder rather than
    deleted: the user's old file is never lost.)
    """
    placed, backups = [], []  # backups: [backup folder, item in it, target, moved?]
    try:
        for tmp, target in plan:
            if target.exists() or target.is_symlink():
                if not overwrite:  # appeared while the report was being built
                    raise FileExistsError(f"write_report: {str(target)!r} appeared while the "
                                          "report was written; nothing was replaced")
                bak = Path(tempfile.mkdtemp(dir=folder, prefix=f".{target.name}.", suffix=".bak"))
                entry = [bak, bak / target.name, target, False]
                backups.append(entry)
                move_path(target, entry[1])
                entry[3] = True
            if tmp is not None:
                move_path(tmp, target)
                placed.append(target)
    except BaseException:
        for target in reversed(placed):
            remove_path(target)
        for bak, item, target, moved in reversed(backups):
            try:
                if moved:
                    move_path(item, target)
            except OSError:  # pragma: no cover - keep the old file where it is, never lose it
                continue
            remove_path(bak)
        for tmp, _ in plan:
            if tmp is not None:
                remove_path(tmp)
        raise
    for bak, _, _, _ in backups:
        remove_path(bak)


def slug(text):
    s = re.sub(r"[^A-Za-z0-9._-]+", "_", str(text)).strip("._")
    return (s or "series")[:60]
