"""Evidence bundles: a folder with a Markdown summary, a self-contained HTML page, figures, tables and a
manifest, for handing model results over in an expert report.

:class:`Bundle` is the writing API shared by every command that produces one (``supergame report``,
``supergame run --report``, the assessment command). Content is added in reading order as blocks --
headings, paragraphs, lists, tables, figures -- and :meth:`Bundle.write` renders them twice, as
``summary.md`` and as ``summary.html`` (figures embedded as ``data:`` URIs, so the page needs no other
file), and writes ``manifest.json`` with the SHA-256 of every file of the bundle.

Files::

    summary.md  summary.html  manifest.json
    figures/NAME.png  figures/NAME.pdf
    tables/NAME.csv   tables/NAME.tex      (LaTeX, booktabs)

Every figure, table and text depends only on what was added, so writing the same content twice gives
the same bytes (figures are saved without timestamps). The caution (:data:`sim.core.text.CAUTION`) closes
every summary.

Files are written into a hidden sibling folder (``.NAME.partial-*``) and moved into place by
:meth:`Bundle.write` in one rename, replacing an earlier bundle there, so that a write that is
interrupted -- an error, or the process killed -- leaves the earlier bundle (or nothing), never a
mixture. :func:`clear_leftovers` removes what an interrupted write left beside the folder.

Example
-------
>>> from sim.evidence.bundle import Bundle
>>> b = Bundle("out/bundle", "Coordinated effects of the merger")          # doctest: +SKIP
>>> b.paragraph("Thresholds before and after the merger.")                   # doctest: +SKIP
>>> b.table("thresholds", ["scheme", "before", "after"], rows, caption="Critical discount factors")  # doctest: +SKIP
>>> b.figure("thresholds", fig, caption="...")                              # doctest: +SKIP
>>> b.assumptions(["..."])                                                   # doctest: +SKIP
>>> b.write(manifest={"experiment": {...}, "command": sys.argv})             # doctest: +SKIP
"""

from __future__ import annotations

import base64
import hashlib
import html
import json
import math
import re
import shutil
import tempfile
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sim.core.files import REPLACED, STAGED, clear_leftovers
from sim.core.provenance import package_versions, platform_info
from sim.core.text import CAUTION, fmt_num
from sim.evidence.render import figure_bytes, pyplot
from sim.runner.tabular import csv_text

__all__ = ["Bundle", "Estimate", "clear_leftovers", "holds_bundle", "latex_table", "markdown_table"]

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}\Z")
BUNDLE_FORMAT = "supergame-bundle/1"


def holds_bundle(folder) -> bool:
    """Whether ``folder`` is an empty folder or holds an evidence bundle (its ``manifest.json`` says so),
    i.e. whether a bundle may be written over it.

    Parameters
    ----------
    folder : path-like

    Returns
    -------
    bool
    """
    folder = Path(folder)
    if not folder.is_dir() or folder.is_symlink():
        return False
    if not any(folder.iterdir()):
        return True
    try:
        man = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(man, dict) and str(man.get("format", "")).startswith("supergame-bundle")


@dataclass(frozen=True)
class Estimate:
    """A number and its 95 % interval, shown in one table cell (the interval under the number in the HTML page), so
    that a table of many estimates stays narrow enough to read and print.

    Attributes
    ----------
    value, low, high : float
    """

    value: float
    low: float
    high: float

    def parts(self, digits: int = 4) -> tuple:
        """The number and its interval as text (``"-"`` for an interval the cell does not report).

        Parameters
        ----------
        digits : int

        Returns
        -------
        tuple of (str, str)
        """
        bounds = (self.low, self.high)
        ci = "-" if any(b is None or math.isnan(b) for b in bounds) else \
            f"[{fmt_num(self.low, digits)}, {fmt_num(self.high, digits)}]"
        return _fmt(self.value, digits), ci


def _fmt(v: Any, digits: int) -> str:

    if isinstance(v, Estimate):
        value, ci = v.parts(digits)
        return value if ci == "-" else f"{value} {ci}"
    if v is None:
        return "-"
    if isinstance(v, str):
        return v
    if isinstance(v, float) and math.isnan(v):
        return "-"
    return fmt_num(v, digits)


_TEX = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_", "{": r"\{",
        "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}"}
_TEX_TABLE = str.maketrans(_TEX)  # one pass in C: the full results table of a large sweep has millions of characters


def tex_escape(text: str) -> str:
    """``text`` with LaTeX's special characters escaped.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    return str(text).translate(_TEX_TABLE)


def latex_table(headers, rows, caption: str | None = None, label: str | None = None, digits: int = 4,
                align: str | None = None) -> str:
    """A booktabs LaTeX table (``\\usepackage{booktabs}``); numbers right-aligned, text left-aligned.

    Parameters
    ----------
    headers : list of str
    rows : list of list
        One list of cells per row (numbers or text).
    caption, label : str, optional
    digits : int
        Significant digits of the numbers.
    align : str, optional
        LaTeX column alignment (default: ``r`` for numeric columns, ``l`` otherwise).

    Returns
    -------
    str
    """
    cells = [[_fmt(v, digits) for v in r] for r in rows]
    if align is None:
        align = "".join("r" if rows and all(isinstance(r[j], int | float) and not isinstance(r[j], bool)
                                             for r in rows) else "l" for j in range(len(headers)))
    lines = [r"\begin{table}[htbp]", r"\centering"]
    if caption:
        lines.append(rf"\caption{{{tex_escape(caption)}}}")
    if label:
        lines.append(rf"\label{{{label}}}")
    lines += [rf"\begin{{tabular}}{{{align}}}", r"\toprule",
              " & ".join(tex_escape(h) for h in headers) + r" \\", r"\midrule"]
    lines += [" & ".join(tex_escape(c) for c in r) + r" \\" for r in cells]
    lines += [r"\bottomrule", r"\end{tabular}", r"\end{table}"]
    return "\n".join(lines) + "\n"


def _md_text(text) -> str:
    """Text for Markdown: HTML in it is shown as text, never run by a viewer that renders Markdown (a label such
    as ``<script>`` from an experiment file stays inert)."""
    return html.escape(str(text), quote=False)


def _md_escape(text: str) -> str:
    return _md_text(text).replace("|", r"\|")


def markdown_table(headers, rows, digits: int = 4) -> str:
    """A Markdown (pipe) table, HTML in the cells escaped; numeric columns right-aligned.

    Parameters
    ----------
    headers : list of str
    rows : list of list
        One list of cells per row (numbers or text).
    digits : int
        Significant digits of the numbers.

    Returns
    -------
    str
    """
    cells = [[_md_escape(_fmt(v, digits)) for v in r] for r in rows]
    nums = [bool(rows) and all(isinstance(r[j], int | float) and not isinstance(r[j], bool) for r in rows)
            for j in range(len(headers))]
    out = ["| " + " | ".join(_md_escape(h) for h in headers) + " |",
           "| " + " | ".join("---:" if n else "---" for n in nums) + " |"]
    out += ["| " + " | ".join(r) + " |" for r in cells]
    return "\n".join(out)


def _inline_html(text: str) -> str:
    """Escape text; ``code`` spans and **bold** become markup."""
    t = html.escape(str(text))
    t = re.sub(r"`([^`]+)`", r"<code>\1</code>", t)
    return re.sub(r"\*\*([^*]+)\*\*", r"<strong>\1</strong>", t)


def _cell_html(v, num: bool, digits: int) -> str:
    """One table cell: numbers right-aligned, an estimate with its interval under it."""
    if isinstance(v, Estimate):
        value, ci = v.parts(digits)
        return f'<td class="num">{html.escape(value)}<br><span class="ci">{html.escape(ci)}</span></td>'
    return f'<td class="{"num" if num else "text"}">{html.escape(_fmt(v, digits))}</td>'


def _slug(text: str, taken: set) -> str:
    """A unique anchor for a heading: lower-case words joined by dashes."""
    base = re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-") or "section"
    slug, k = base, 2
    while slug in taken:
        slug, k = f"{base}-{k}", k + 1
    taken.add(slug)
    return slug


@dataclass
class _Block:
    kind: str
    data: dict = field(default_factory=dict)


_CSS = """
body { font-family: -apple-system, "Segoe UI", Helvetica, Arial, sans-serif; max-width: 62rem; margin: 2rem auto;
       padding: 0 1rem; color: #1b1b1b; line-height: 1.45; overflow-wrap: break-word; }
h1 { font-size: 1.6rem; border-bottom: 2px solid #444; padding-bottom: .3rem; }
h2 { font-size: 1.25rem; margin-top: 2rem; border-bottom: 1px solid #bbb; }
h3 { font-size: 1.05rem; }
code { overflow-wrap: anywhere; }
.table-wrap { max-width: 100%; overflow-x: auto; margin: 0 0 .8rem; }
table { border-collapse: collapse; font-size: .85rem; }
th, td { padding: .2rem .45rem; border-bottom: 1px solid #ddd; vertical-align: top; }
th { border-bottom: 2px solid #444; text-align: left; font-weight: 600; hyphens: auto; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.text { min-width: 6rem; }
td .ci { color: #555; font-size: .9em; }
.table-caption { font-weight: 600; font-size: .85rem; margin: .8rem 0 .2rem; }
figure { margin: 1.2rem 0; }
figure img { width: 100%; height: auto; border: 1px solid #eee; box-sizing: border-box; }
figcaption { font-size: .85rem; color: #333; }
pre { background: #f5f5f5; padding: .6rem; overflow-x: auto; font-size: .8rem; white-space: pre-wrap;
      overflow-wrap: anywhere; }
.headline { border: 1px solid #999; background: #f7f7f2; padding: .2rem 1rem .6rem; margin: 1rem 0; }
.headline h2 { margin-top: .6rem; border: none; }
.answer { font-size: 1.05rem; }
nav.contents ol { columns: 2; font-size: .9rem; }
.caution { border-left: 4px solid #b00; padding: .4rem .8rem; background: #fff4f4; }
.note { font-size: .85rem; color: #555; }
@media (max-width: 40rem) { nav.contents ol { columns: 1; } body { margin: 1rem auto; } }
@media print {
  @page { size: A4; margin: 15mm 14mm; }
  body { max-width: none; margin: 0; padding: 0; font-size: 10pt; }
  nav.contents { display: none; }
  h2.appendix { break-before: page; }
  .table-wrap { overflow: visible; }
  table { font-size: 8pt; }
  thead { display: table-header-group; }
  tr, figure, .headline, .caution { break-inside: avoid; }
  h2, h3, .table-caption { break-after: avoid; }
  img { max-width: 100%; }
  figure img { width: auto; max-height: 215mm; }
  th, td { overflow-wrap: anywhere; }
  td.text { min-width: 0; }
  a { color: inherit; text-decoration: none; }
  pre { white-space: pre-wrap; }
}
"""


class Bundle:
    """An evidence bundle written into ``folder`` (see the module notes).

    Parameters
    ----------
    folder : path-like
        The bundle's folder, created by :meth:`write`; an earlier bundle there is replaced as a whole
        (a folder that is not empty and holds no bundle is refused, see :func:`holds_bundle`).
    title : str
    caution : str, optional
        Closing caution (default :data:`sim.core.text.CAUTION`).

    Attributes
    ----------
    manifest : dict
        Entries for ``manifest.json`` added while the content is written (for example by an experiment
        kind's report); :meth:`write` merges its own ``manifest`` over them (dict entries key by key).
    assumption_items : list of str
        Assumptions added while the content is written (for example by an analysis's renderer); :meth:`assumptions`
        states them first, in the bundle's one section of assumptions.
    """

    def __init__(self, folder, title: str, caution: str | None = None):


        self.folder = Path(folder)
        self.title = title
        self.caution = CAUTION if caution is None else caution
        self.blocks: list[_Block] = []
        self.manifest: dict = {}
        self.assumption_items: list = []
        self.front: dict | None = None
        self.files: list[str] = []
        self._names: set = set()
        self.folder.parent.mkdir(parents=True, exist_ok=True)
        self._stage = Path(tempfile.mkdtemp(prefix=f".{self.folder.name}{STAGED}", dir=self.folder.parent))
        (self._stage / "figures").mkdir()
        (self._stage / "tables").mkdir()
        self.written = False

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if not self.written:
            self.discard()
        return False

    def discard(self) -> None:
        """Drop what was written so far (the folder keeps its earlier bundle, if any)."""

        shutil.rmtree(self._stage, ignore_errors=True)

    # -- text --------------------------------------------------------------------------------------

    def headline(self, question: str, answer, numbers=(), heading: str = "In short") -> None:
        """The first page: what was asked, the answer in a sentence or two, the key numbers with their intervals,
        and the caution; shown first whenever it is added, followed by the contents of the bundle.

        Parameters
        ----------
        question : str
            What the experiment asks.
        answer : sequence of str
            One or two sentences.
        numbers : sequence of str
            The key numbers, one a line, each with its interval and unit.
        heading : str
        """
        self.front = {"heading": heading, "question": question, "answer": [str(a) for a in answer],
                      "numbers": [str(x) for x in numbers]}

    def heading(self, text: str, level: int = 2, appendix: bool = False) -> None:
        """A section heading.

        Parameters
        ----------
        text : str
        level : int
            2 (section) to 4.
        appendix : bool
            The section is an appendix (methods, glossary): printed from a new page.
        """
        self.blocks.append(_Block("heading", {"text": text, "level": max(2, min(4, level)), "appendix": appendix}))

    def paragraph(self, text: str, note: bool = False) -> None:
        """A paragraph of text (``code`` spans and **bold** are kept).

        Parameters
        ----------
        text : str
        note : bool
            Set in small type, as a remark.
        """
        self.blocks.append(_Block("paragraph", {"text": text, "note": note}))

    def bullets(self, items) -> None:
        """A bulleted list.

        Parameters
        ----------
        items : sequence of str
        """
        self.blocks.append(_Block("bullets", {"items": [str(x) for x in items]}))

    def code(self, text: str) -> None:
        """A block of code or commands, shown as written.

        Parameters
        ----------
        text : str
        """
        self.blocks.append(_Block("code", {"text": text}))

    # -- tables and figures ------------------------------------------------------------------------

    def _claim(self, name: str, what: str) -> None:
        if not _NAME.match(name):
            raise ValueError(f"bad {what} name {name!r}: letters, digits, '.', '_', '-'")
        if (what, name) in self._names:
            raise ValueError(f"a {what} named {name!r} was already added")
        self._names.add((what, name))

    def table(self, name: str, headers, rows, caption: str | None = None, digits: int = 4, show: bool = True,
              max_rows: int = 60, note: str | None = None, csv_rows=None) -> None:
        """Add a table: ``tables/NAME.csv`` (full precision) and ``tables/NAME.tex`` (booktabs, ``digits``
        significant digits), shown in the summary (at most ``max_rows`` rows) unless ``show`` is false.

        Parameters
        ----------
        name : str
            File stem.
        headers : sequence of str
        rows : sequence of sequence
        caption : str, optional
        digits : int
            Significant digits of the LaTeX and displayed numbers.
        show : bool
            Show it in the summary (the files are written either way).
        max_rows : int
            Rows shown in the summary (the files hold them all).
        note : str, optional
            A remark under the table.
        csv_rows : tuple of (headers, rows), optional
            What the CSV file holds instead (e.g. with more columns).
        """
        self._claim(name, "table")
        headers = [str(h) for h in headers]
        rows = [list(r) for r in rows]

        src = csv_rows if csv_rows is not None else (headers, rows)
        # the same CSV dialect and number format as the run folder's results.csv
        self._write(f"tables/{name}.csv", csv_text(list(src[0]), src[1]).encode("utf-8"))
        self._write(f"tables/{name}.tex", latex_table(headers, rows, caption, f"tab:{name}", digits).encode("utf-8"))
        if show:
            self.blocks.append(_Block("table", {"name": name, "headers": headers, "rows": rows, "caption": caption,
                                                "digits": digits, "max_rows": max_rows, "note": note}))

    def figure(self, name: str, fig, caption: str) -> None:
        """Add a matplotlib figure: ``figures/NAME.png`` and ``figures/NAME.pdf`` (the figure is closed).

        Parameters
        ----------
        name : str
            File stem.
        fig : matplotlib.figure.Figure
        caption : str
            What the figure shows and what to read from it.
        """
        self._claim(name, "figure")
        png, pdf = figure_bytes(fig, "png"), figure_bytes(fig, "pdf")
        pyplot().close(fig)
        self._write(f"figures/{name}.png", png)
        self._write(f"figures/{name}.pdf", pdf)
        self.blocks.append(_Block("figure", {"name": name, "caption": caption, "png": png}))

    def attach(self, relpath: str, data: bytes) -> None:
        """Add a file of any kind (e.g. a copy of the experiment file) inside the bundle.

        Parameters
        ----------
        relpath : str
            Path inside the bundle (relative, no ``..``).
        data : bytes
        """
        if relpath.startswith(("/", "..")) or "\\" in relpath:
            raise ValueError(f"bad path {relpath!r}")
        self._write(relpath, data)

    def assumptions(self, items, heading: str = "Assumptions and limitations") -> None:
        """The one section of assumptions and limitations (with those added to :attr:`assumption_items`).

        Parameters
        ----------
        items : sequence of str
        heading : str
        """
        self.heading(heading)
        self.bullets([*self.assumption_items, *items])

    # -- writing -----------------------------------------------------------------------------------

    def _write(self, rel: str, data: bytes) -> None:
        p = self._stage / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(data)
        if rel not in self.files:
            self.files.append(rel)

    def _anchors(self) -> dict:
        """Anchor of every heading block (by position), the headline's first."""
        taken = {"in-short", "contents"}
        return {i: _slug(b.data["text"], taken) for i, b in enumerate(self.blocks) if b.kind == "heading"}

    def _contents(self) -> list:
        """(anchor, text) of the sections (level-2 headings), in reading order."""
        anchors = self._anchors()
        return [(anchors[i], b.data["text"]) for i, b in enumerate(self.blocks)
                if b.kind == "heading" and b.data["level"] == 2]

    def _front_markdown(self) -> list:
        f = self.front
        if f is None:
            return []
        out = [f"## {_md_text(f['heading'])}", "", f"**Question.** {_md_text(f['question'])}", "",
               "**Answer.** " + " ".join(_md_text(a) for a in f["answer"]), ""]
        if f["numbers"]:
            out += ["**Key numbers.**", ""] + [f"- {_md_text(x)}" for x in f["numbers"]] + [""]
        out += [f"**Caution.** {_md_text(self.caution)}", ""]
        sections = self._contents()
        if sections:
            out += ["**Contents:** " + "; ".join(_md_text(t) for _, t in sections) + ".", ""]
        return out

    def markdown(self) -> str:
        """The summary as Markdown (HTML in the text shown as text).

        Returns
        -------
        str
        """
        out = [f"# {_md_text(self.title)}", "", *self._front_markdown()]
        for b in self.blocks:
            d = b.data
            if b.kind == "heading":
                out += ["#" * d["level"] + " " + _md_text(d["text"]), ""]
            elif b.kind == "paragraph":
                out += [(f"*{_md_text(d['text'])}*" if d["note"] else _md_text(d["text"])), ""]
            elif b.kind == "bullets":
                out += [f"- {_md_text(x)}" for x in d["items"]] + [""]
            elif b.kind == "code":
                out += ["```", d["text"].rstrip("\n"), "```", ""]
            elif b.kind == "table":
                if d["caption"]:
                    out += [f"**{_md_text(d['caption'])}**", ""]
                rows = d["rows"][: d["max_rows"]]
                out += [markdown_table(d["headers"], rows, d["digits"]), ""]
                extra = []
                if len(d["rows"]) > d["max_rows"]:
                    extra.append(f"First {d['max_rows']} of {len(d['rows'])} rows")
                extra.append(f"table: `tables/{d['name']}.csv`, `tables/{d['name']}.tex`")
                if d["note"]:
                    extra.insert(0, _md_text(d["note"]))
                out += ["*" + "; ".join(extra) + ".*", ""]
            elif b.kind == "figure":
                cap = _md_text(d["caption"])
                out += [f"![{cap}](figures/{d['name']}.png)", "",
                        f"*Figure: {cap}* (`figures/{d['name']}.png`, `figures/{d['name']}.pdf`)", ""]
        out += ["---", "", f"**Caution.** {self.caution}", ""]
        return "\n".join(out)

    def _front_html(self) -> list:
        f = self.front
        out = []
        if f is not None:
            out.append(f'<section class="headline" id="in-short"><h2>{_inline_html(f["heading"])}</h2>')
            out.append(f"<p><strong>Question.</strong> {_inline_html(f['question'])}</p>")
            out.append('<p class="answer"><strong>Answer.</strong> '
                       + " ".join(_inline_html(a) for a in f["answer"]) + "</p>")
            if f["numbers"]:
                out.append("<p><strong>Key numbers.</strong></p><ul>"
                           + "".join(f"<li>{_inline_html(x)}</li>" for x in f["numbers"]) + "</ul>")
            out.append(f'<p class="caution"><strong>Caution.</strong> {html.escape(self.caution)}</p></section>')
        sections = self._contents()
        if f is not None and sections:
            out.append('<nav class="contents" id="contents"><strong>Contents</strong><ol>'
                       + "".join(f'<li><a href="#{a}">{_inline_html(t)}</a></li>' for a, t in sections)
                       + "</ol></nav>")
        return out

    def _table_html(self, d: dict) -> list:
        rows = d["rows"][: d["max_rows"]]
        nums = [bool(rows) and all(isinstance(r[j], int | float | Estimate) and not isinstance(r[j], bool)
                                   for r in rows) for j in range(len(d["headers"]))]
        # the caption sits above the table's frame, so that it wraps to the page when a wide table scrolls
        t = [f'<p class="table-caption">{_inline_html(d["caption"])}</p>' if d["caption"] else "",
             '<div class="table-wrap"><table>']
        t.append("<thead><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in d["headers"]) + "</tr></thead>")
        t.append("<tbody>")
        for r in rows:
            t.append("<tr>" + "".join(_cell_html(v, nums[j], d["digits"]) for j, v in enumerate(r)) + "</tr>")
        t.append("</tbody></table></div>")
        extra = []
        if d["note"]:
            extra.append(_inline_html(d["note"]))
        if len(d["rows"]) > d["max_rows"]:
            extra.append(f"first {d['max_rows']} of {len(d['rows'])} rows shown")
        name = html.escape(d["name"])
        extra.append(f'full table: <a href="tables/{name}.csv">tables/{name}.csv</a>, '
                     f'<a href="tables/{name}.tex">tables/{name}.tex</a>')
        return ["".join(t), f'<p class="note">{"; ".join(extra)}.</p>']

    def html(self) -> str:
        """The summary as one HTML page (figures embedded; the tables' files linked).

        Returns
        -------
        str
        """
        out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
               '<meta name="viewport" content="width=device-width, initial-scale=1">',
               f"<title>{html.escape(self.title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>",
               f"<h1>{html.escape(self.title)}</h1>", *self._front_html()]
        anchors = self._anchors()
        for i, b in enumerate(self.blocks):
            d = b.data
            if b.kind == "heading":
                cls = ' class="appendix"' if d.get("appendix") else ""
                out.append(f'<h{d["level"]}{cls} id="{anchors[i]}">{_inline_html(d["text"])}</h{d["level"]}>')
            elif b.kind == "paragraph":
                cls = ' class="note"' if d["note"] else ""
                out.append(f"<p{cls}>{_inline_html(d['text'])}</p>")
            elif b.kind == "bullets":
                out.append("<ul>" + "".join(f"<li>{_inline_html(x)}</li>" for x in d["items"]) + "</ul>")
            elif b.kind == "code":
                out.append(f"<pre>{html.escape(d['text'])}</pre>")
            elif b.kind == "table":
                out += self._table_html(d)
            elif b.kind == "figure":
                uri = "data:image/png;base64," + base64.b64encode(d["png"]).decode("ascii")
                name = html.escape(d["name"])
                out.append(f'<figure><a href="figures/{name}.png"><img src="{uri}" alt="{html.escape(d["caption"])}">'
                           f"</a><figcaption>{_inline_html(d['caption'])} (full size: "
                           f'<a href="figures/{name}.png">PNG</a>, <a href="figures/{name}.pdf">PDF</a>)'
                           "</figcaption></figure>")
        out.append(f'<p class="caution"><strong>Caution.</strong> {html.escape(self.caution)}</p>')
        out += ["</body>", "</html>", ""]
        return "\n".join(out)

    def write(self, manifest: dict | None = None) -> list[str]:
        """Write ``summary.md``, ``summary.html`` and ``manifest.json`` and move the bundle into place.

        Parameters
        ----------
        manifest : dict, optional
            Entries added to the manifest (for example ``experiment`` with its file and SHA-256, ``command``,
            ``seeds``, ``started``, ``finished``), over those of :attr:`manifest`; package versions, the platform and
            the SHA-256 of every file of the bundle are filled in.

        Returns
        -------
        list of str
            The bundle's files, relative to its folder.
        """

        if self.written:
            raise RuntimeError(f"the bundle {self.folder} was already written")
        if self.folder.exists() and not holds_bundle(self.folder):
            self.discard()
            raise FileExistsError(f"{self.folder} exists and does not hold an evidence bundle")
        self._write("summary.md", self.markdown().encode("utf-8"))
        self._write("summary.html", self.html().encode("utf-8"))
        man = {"format": BUNDLE_FORMAT, "title": self.title, **self.manifest}
        for k, v in (manifest or {}).items():
            man[k] = {**man[k], **v} if isinstance(v, dict) and isinstance(man.get(k), dict) else v
        man.setdefault("packages", package_versions())
        man.setdefault("platform", platform_info())
        man["caution"] = self.caution
        man["files"] = {rel: hashlib.sha256((self._stage / rel).read_bytes()).hexdigest() for rel in sorted(self.files)}
        (self._stage / "manifest.json").write_text(json.dumps(man, indent=2) + "\n", encoding="utf-8")
        self._move_into_place()
        return sorted(self.files) + ["manifest.json"]

    def _move_into_place(self) -> None:
        """Replace the folder by the staged bundle: two renames within one parent folder."""

        old = None
        if self.folder.exists():
            old = self.folder.parent / f".{self.folder.name}{REPLACED}{uuid.uuid4().hex[:8]}"
            self.folder.rename(old)
        self._stage.rename(self.folder)
        self.written = True
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
