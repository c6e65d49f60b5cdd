"""One self-contained HTML page per report.

The page needs no network to be viewed: the style sheet and the small
table-sorting script are inlined, figures are embedded as base64 PNG data
URIs, and no external font, script or image is referenced.  A
Content-Security-Policy in the page itself allows only data-URI images and
the exact inline script and style written here (by their SHA-256 hashes), so
even a text that slipped past escaping could not run.

Every text that reaches the page (titles, captions, table cells, file names,
FASTA headers, log templates) goes through :func:`html.escape`.

Example
-------
>>> from fractalseq.report.html import HtmlReport
>>> page = HtmlReport("Profile of lambda.fa", caution="For research use.")
>>> page.section("Dimensions")
>>> page.table(["q", "D_q"], [[0, 2.0], [2, 1.93]])
>>> text = page.render()
"""

from __future__ import annotations

import base64
import hashlib
import html
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np

from fractalseq.io._outputs import write_text

__all__ = ["HtmlReport", "Link", "format_value", "PAGE_CSS", "PAGE_JS"]

#: House colours (also used by :mod:`fractalseq.report.figures`).
INK = "#1d2b36"
PAPER = "#fbfaf7"
ACCENT = "#0b6e69"
ACCENT_SOFT = "#e3f1ef"
WARM = "#b4541a"
WARM_SOFT = "#fdf0e4"
RULE = "#d9d4c7"

PAGE_CSS = f"""
:root {{ --ink:{INK}; --paper:{PAPER}; --accent:{ACCENT}; --accent-soft:{ACCENT_SOFT};
  --warm:{WARM}; --warm-soft:{WARM_SOFT}; --rule:{RULE}; }}
* {{ box-sizing: border-box; }}
html {{ background: var(--paper); color: var(--ink); }}
body {{ margin: 0; font: 15px/1.55 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", sans-serif; }}
header.top {{ background: var(--ink); color: #f4f1e8; padding: 1.4rem 2rem 1.1rem; border-bottom: 5px solid var(--accent); }}
header.top h1 {{ margin: 0; font-size: 1.55rem; font-weight: 650; letter-spacing: .01em; overflow-wrap: anywhere; }}
header.top p.sub {{ margin: .35rem 0 0; color: #c9d6d3; overflow-wrap: anywhere; }}
header.top .mark {{ font: 600 .72rem/1 ui-monospace, "DejaVu Sans Mono", monospace; letter-spacing: .18em;
  text-transform: uppercase; color: #8fd0c8; margin-bottom: .45rem; }}
nav.toc {{ padding: .55rem 2rem; border-bottom: 1px solid var(--rule); background: #f3f0e8; font-size: .9rem; }}
nav.toc a {{ color: var(--accent); text-decoration: none; margin-right: 1.1rem; white-space: nowrap; }}
nav.toc a:hover {{ text-decoration: underline; }}
main {{ max-width: 1100px; margin: 0 auto; padding: .5rem 2rem 2rem; }}
section {{ margin-top: 1.6rem; }}
h2 {{ font-size: 1.2rem; margin: 0 0 .6rem; padding-bottom: .25rem; border-bottom: 2px solid var(--accent-soft); }}
p {{ max-width: 78ch; overflow-wrap: anywhere; }}
aside.caution {{ margin: 1.2rem 0 0; padding: .7rem 1rem; background: var(--warm-soft);
  border-left: 5px solid var(--warm); border-radius: 3px; }}
aside.caution strong {{ color: var(--warm); margin-right: .4rem; }}
div.note {{ margin: .6rem 0; padding: .55rem .9rem; background: var(--accent-soft); border-left: 4px solid var(--accent);
  border-radius: 3px; }}
div.note ul {{ margin: .2rem 0; padding-left: 1.2rem; }}
dl.kv {{ display: grid; grid-template-columns: max-content 1fr; gap: .25rem 1.2rem; margin: .4rem 0; }}
dl.kv dt {{ font-weight: 600; color: #45535c; }}
dl.kv dd {{ margin: 0; font-variant-numeric: tabular-nums; overflow-wrap: anywhere; }}
div.tablewrap {{ overflow-x: auto; margin: .5rem 0 1rem; }}
table {{ border-collapse: collapse; font-size: .9rem; font-variant-numeric: tabular-nums; }}
caption {{ caption-side: top; text-align: left; color: #45535c; padding-bottom: .3rem; font-style: italic; }}
th, td {{ padding: .28rem .7rem; border-bottom: 1px solid var(--rule); text-align: left; vertical-align: top; }}
td.num {{ text-align: right; }}
thead th {{ background: #eeeae0; position: sticky; top: 0; }}
table.sortable thead th {{ cursor: pointer; user-select: none; }}
table.sortable thead th::after {{ content: " \\2195"; color: #9aa3a8; font-size: .8em; }}
table.sortable thead th[aria-sort="ascending"]::after {{ content: " \\2191"; color: var(--accent); }}
table.sortable thead th[aria-sort="descending"]::after {{ content: " \\2193"; color: var(--accent); }}
tbody tr:nth-child(even) {{ background: #f5f2ea; }}
tbody tr:hover {{ background: var(--accent-soft); }}
td a, dd a, li a {{ color: var(--accent); }}
figure {{ margin: .8rem 0 1.4rem; }}
figure img {{ max-width: 100%; height: auto; border: 1px solid var(--rule); background: #fff; }}
figcaption {{ color: #45535c; font-size: .9rem; max-width: 78ch; margin-top: .3rem; }}
footer {{ max-width: 1100px; margin: 0 auto; padding: 1rem 2rem 2rem; color: #6b767c; font-size: .8rem;
  border-top: 1px solid var(--rule); }}
@media print {{ nav.toc {{ display: none; }} header.top {{ background: none; color: var(--ink); }} }}
""".strip()

PAGE_JS = """
(function () {
  "use strict";
  function key(cell) {
    var v = cell.getAttribute("data-v");
    var n = (v === null || v === "") ? NaN : Number(v);
    return { n: n, s: cell.textContent.trim() };
  }
  function compare(a, b) {
    var an = !isNaN(a.n), bn = !isNaN(b.n);
    if (an && bn) { return a.n - b.n; }
    if (an !== bn) { return an ? -1 : 1; }
    return a.s.localeCompare(b.s, undefined, { numeric: true });
  }
  var tables = document.querySelectorAll("table.sortable");
  Array.prototype.forEach.call(tables, function (table) {
    var heads = table.querySelectorAll("thead th");
    Array.prototype.forEach.call(heads, function (th, col) {
      th.tabIndex = 0;
      th.setAttribute("title", "Click to sort");
      function sort() {
        var body = table.tBodies[0];
        var rows = Array.prototype.slice.call(body.rows);
        var asc = th.getAttribute("aria-sort") !== "ascending";
        Array.prototype.forEach.call(heads, function (h) { h.removeAttribute("aria-sort"); });
        th.setAttribute("aria-sort", asc ? "ascending" : "descending");
        rows.sort(function (r1, r2) {
          var c = compare(key(r1.cells[col]), key(r2.cells[col]));
          return asc ? c : -c;
        });
        rows.forEach(function (r) { body.appendChild(r); });
      }
      th.addEventListener("click", sort);
      th.addEventListener("keydown", function (e) {
        if (e.key === "Enter" || e.key === " ") { e.preventDefault(); sort(); }
      });
    });
  });
})();
""".strip()

_SAFE_HREF = re.compile(r"^(?![a-zA-Z][a-zA-Z0-9+.-]*:)[^\s<>\"']*$")


def _csp_hash(text: str) -> str:
    return "'sha256-" + base64.b64encode(hashlib.sha256(text.encode("utf-8")).digest()).decode("ascii") + "'"


@dataclass(frozen=True)
class Link:
    """A table cell or list item that links to another file of the report (relative path only)."""

    text: str
    href: str

    def __post_init__(self) -> None:
        if not _SAFE_HREF.match(self.href):
            raise ValueError(f"link target {self.href!r} is not a plain relative path")


def format_value(value: Any) -> str:
    """Text of one value as shown in a page: 5 significant digits for floats, '–' for missing."""
    if value is None:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        f = float(value)
        if math.isnan(f):
            return "–"
        if math.isinf(f):
            return "∞" if f > 0 else "-∞"
        if f == 0:
            return "0"
        return f"{f:.5g}"
    return str(value)


def _sort_key(value: Any) -> str | None:
    if isinstance(value, (bool, np.bool_)):
        return "1" if value else "0"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        f = float(value)
        return repr(f) if math.isfinite(f) else ("" if math.isnan(f) else ("1e308" if f > 0 else "-1e308"))
    if value is None:
        return ""
    return None


#: Characters a page should never carry raw: C0/C1 controls (but tab and newline), DEL, bidirectional controls.
_CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def _esc(text: Any) -> str:
    """HTML-escaped text with control characters shown as visible escapes (``\\x1b``)."""
    shown = _CONTROL.sub(lambda m: f"\\x{ord(m.group(0)):02x}" if ord(m.group(0)) < 0x100 else f"\\u{ord(m.group(0)):04x}", str(text))
    return html.escape(shown, quote=True)


class HtmlReport:
    """A self-contained HTML report built block by block.

    Parameters
    ----------
    title:
        Page title (shown in the header and the browser tab).
    subtitle:
        One line under the title (e.g. the input file and its length).
    caution:
        Text of a visible caution box under the header, e.g. "Genomic output
        is for research, not for clinical decisions."; ``None`` for none.

    Notes
    -----
    Blocks appear in the order they are added.  :meth:`section` starts a new
    section (listed in the page's table of contents); blocks added before the
    first section go in an untitled opening section.
    """

    def __init__(self, title: str, subtitle: str = "", caution: str | None = None) -> None:
        self.title = str(title)
        self.subtitle = str(subtitle)
        self.caution = caution
        self._sections: list[tuple[str, list[str]]] = [("", [])]
        self._figures = 0
        self._tables = 0

    # --------------------------------------------------------------- blocks
    def _add(self, block: str) -> None:
        self._sections[-1][1].append(block)

    def section(self, title: str) -> None:
        """Start a new section with an ``<h2>`` heading."""
        self._sections.append((str(title), []))

    def paragraph(self, text: str) -> None:
        """A paragraph of plain (escaped) text."""
        self._add(f"<p>{_esc(text)}</p>")

    def note(self, text: str, items: Sequence[str] = ()) -> None:
        """A highlighted note box with optional bullet items (all escaped)."""
        body = f"<p>{_esc(text)}</p>" if text else ""
        if items:
            body += "<ul>" + "".join(f"<li>{_esc(i)}</li>" for i in items) + "</ul>"
        self._add(f'<div class="note">{body}</div>')

    def bullets(self, items: Iterable[str | Link]) -> None:
        """A bullet list of plain texts or :class:`Link` items."""
        lis = []
        for item in items:
            if isinstance(item, Link):
                lis.append(f'<li><a href="{_esc(item.href)}">{_esc(item.text)}</a></li>')
            else:
                lis.append(f"<li>{_esc(item)}</li>")
        self._add("<ul>" + "".join(lis) + "</ul>")

    def table(
        self,
        header: list[str],
        rows: list[list],
        sortable: bool = True,
        caption: str = "",
    ) -> None:
        """A table; every cell is escaped, numbers are right-aligned and sort numerically.

        Cells may be numbers, strings, ``None`` (shown as '–'), booleans or
        :class:`Link` objects.  Floats are shown with 5 significant digits.
        """
        self._tables += 1
        cls = ' class="sortable"' if sortable else ""
        parts = [f'<div class="tablewrap"><table{cls} id="table-{self._tables}">']
        if caption:
            parts.append(f"<caption>{_esc(caption)}</caption>")
        parts.append("<thead><tr>" + "".join(f'<th scope="col">{_esc(h)}</th>' for h in header) + "</tr></thead>")
        parts.append("<tbody>")
        for row in rows:
            cells = []
            for v in row:
                if isinstance(v, Link):
                    cells.append(f'<td><a href="{_esc(v.href)}">{_esc(v.text)}</a></td>')
                    continue
                key = _sort_key(v)
                if key is None:
                    cells.append(f"<td>{_esc(format_value(v))}</td>")
                else:
                    cells.append(f'<td class="num" data-v="{_esc(key)}">{_esc(format_value(v))}</td>')
            parts.append("<tr>" + "".join(cells) + "</tr>")
        parts.append("</tbody></table></div>")
        self._add("".join(parts))

    def figure(self, png: bytes, caption: str, alt: str) -> None:
        """A PNG figure embedded as a base64 data URI, with an escaped caption and alt text."""
        if not isinstance(png, (bytes, bytearray)) or not bytes(png[:8]) == b"\x89PNG\r\n\x1a\n":
            raise ValueError("figure() needs the bytes of a PNG image")
        self._figures += 1
        data = base64.b64encode(bytes(png)).decode("ascii")
        self._add(
            f'<figure id="figure-{self._figures}"><img src="data:image/png;base64,{data}" alt="{_esc(alt)}">'
            f"<figcaption>{_esc(caption)}</figcaption></figure>"
        )

    def key_values(self, pairs: list[tuple[str, object]]) -> None:
        """A two-column list of names and values (values formatted like table cells)."""
        items = []
        for k, v in pairs:
            if isinstance(v, Link):
                val = f'<a href="{_esc(v.href)}">{_esc(v.text)}</a>'
            else:
                val = _esc(format_value(v))
            items.append(f"<dt>{_esc(k)}</dt><dd>{val}</dd>")
        self._add('<dl class="kv">' + "".join(items) + "</dl>")

    # -------------------------------------------------------------- output
    def render(self) -> str:
        """The whole page as one HTML string (no external resource of any kind)."""
        from fractalseq import __version__

        csp = (
            "default-src 'none'; img-src data:; "
            f"style-src {_csp_hash(PAGE_CSS)}; script-src {_csp_hash(PAGE_JS)}; "
            "base-uri 'none'; form-action 'none'"
        )
        toc = []
        body = []
        for i, (title, blocks) in enumerate(self._sections):
            if not title and not blocks:
                continue
            sid = f"section-{i}"
            if title:
                toc.append(f'<a href="#{sid}">{_esc(title)}</a>')
                body.append(f'<section id="{sid}"><h2>{_esc(title)}</h2>' + "\n".join(blocks) + "</section>")
            else:
                body.append(f'<section id="{sid}">' + "\n".join(blocks) + "</section>")
        caution = ""
        if self.caution:
            caution = f'<aside class="caution" role="note"><strong>Caution</strong>{_esc(self.caution)}</aside>'
        sub = f'<p class="sub">{_esc(self.subtitle)}</p>' if self.subtitle else ""
        nav = f'<nav class="toc" aria-label="Contents">{"".join(toc)}</nav>' if toc else ""
        return (
            "<!DOCTYPE html>\n"
            '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
            f'<meta http-equiv="Content-Security-Policy" content="{_esc(csp)}">\n'
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            '<meta name="generator" content="fractalseq">\n'
            '<link rel="icon" href="data:,">\n'
            f"<title>{_esc(self.title)}</title>\n"
            f"<style>{PAGE_CSS}</style>\n</head>\n<body>\n"
            f'<header class="top"><div class="mark">fractalseq report</div><h1>{_esc(self.title)}</h1>{sub}</header>\n'
            f"{nav}\n<main>\n{caution}\n" + "\n".join(body) + "\n</main>\n"
            f"<footer>Written by fractalseq {_esc(__version__)}. This page is self-contained: "
            "it loads nothing from the network. Click a table heading to sort by that column.</footer>\n"
            f"<script>{PAGE_JS}</script>\n</body>\n</html>\n"
        )

    def write(self, path: str | Path, force: bool = False) -> Path:
        """Write the page atomically to ``path`` (refuses to overwrite unless ``force``)."""
        return write_text(path, self.render(), force=force)
