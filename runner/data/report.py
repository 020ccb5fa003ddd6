"""A self-contained HTML report laid out like a results section: inline CSS, numbered tables and
figures, images as base64 data URIs, a reference list, and print rules for a clean PDF.

The report must open on a lab laptop with no network and survive being mailed as one file, so it
refers to nothing outside itself: no style sheets, fonts, scripts or image files. Fonts are the
reader's own serif and sans-serif faces. Tables and figures are numbered in order of appearance
when the page is rendered; printing keeps each table and figure on one page where it fits.
"""

from __future__ import annotations

import base64
import html
import re
from collections.abc import Sequence
from dataclasses import dataclass, field

import pandas as pd

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
#: What an empty table cell shows (and the table notes explain).
MISSING_CELL = "–"

_CSS = """
:root { --ink: #1f1f1f; --muted: #5c5c5c; --rule: #1f1f1f; --hair: #cfcac0;
        --accent: #7a2e1f; --paper: #ffffff; --shade: #f4f1ea; }
* { box-sizing: border-box; }
html { -webkit-text-size-adjust: 100%; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 16px/1.55 Charter, "Bitstream Charter", Georgia, "DejaVu Serif",
             "Liberation Serif", "Times New Roman", serif; }
main { max-width: 50rem; margin: 0 auto; padding: 2.5rem 2rem 4rem; }
.sans, header .kicker, header .byline, h2, h3, caption, figcaption, table, .note, nav.toc {
  font-family: "Helvetica Neue", Arial, "Liberation Sans", "DejaVu Sans", sans-serif; }
header { border-bottom: 1px solid var(--rule); padding-bottom: 0.9rem; margin-bottom: 1.2rem; }
header .kicker { text-transform: uppercase; letter-spacing: 0.12em; font-size: 0.72rem;
                 color: var(--accent); margin: 0 0 0.3rem; font-weight: 600; }
h1 { font-size: 2rem; line-height: 1.2; margin: 0 0 0.4rem; font-weight: 600; }
header .byline { font-size: 0.86rem; color: var(--muted); margin: 0; max-width: none; }
nav.toc { font-size: 0.82rem; color: var(--muted); margin: 0 0 1.6rem; }
nav.toc ol { margin: 0.2rem 0 0; padding-left: 1.3rem; columns: 2; column-gap: 2rem; }
nav.toc a { color: inherit; text-decoration: none; border-bottom: 1px dotted var(--hair); }
h2 { font-size: 1.18rem; margin: 2.2rem 0 0.6rem; font-weight: 700; letter-spacing: 0.01em; }
h2 .num, h3 .num { color: var(--accent); margin-right: 0.45em; }
h3 { font-size: 1rem; margin: 1.6rem 0 0.4rem; font-weight: 600; }
p { margin: 0.45rem 0 0.7rem; hyphens: auto; text-align: left; }
p.lead { font-size: 1.04rem; }
.note { font-size: 0.86rem; color: var(--ink); background: var(--shade);
        border-left: 3px solid var(--accent); padding: 0.6rem 0.9rem; margin: 1rem 0; }
.note + .note { margin-top: -1rem; padding-top: 0.1rem; }
.table-block { margin: 1.2rem 0 1.4rem; }
.scroll { overflow-x: auto; }
table { border-collapse: collapse; font-size: 0.78rem; line-height: 1.35; width: 100%;
        border-top: 1.5px solid var(--rule); border-bottom: 1.5px solid var(--rule); }
caption { caption-side: top; text-align: left; font-size: 0.84rem; padding: 0 0 0.45rem;
          color: var(--ink); }
.label { font-weight: 700; }
th, td { padding: 0.22rem 0 0.22rem 0.8rem; text-align: right; white-space: nowrap;
         font-variant-numeric: tabular-nums lining-nums; }
thead th { font-weight: 600; vertical-align: bottom;
           border-bottom: 1px solid var(--rule); }
td.text, th.text { text-align: left; }
td:first-child, th:first-child { text-align: left; padding-left: 0; }
tbody tr + tr td { border-top: 0.5px solid #ebe7df; }
.table-note { font-family: "Helvetica Neue", Arial, "Liberation Sans", "DejaVu Sans", sans-serif;
              font-size: 0.76rem; color: var(--muted); margin: 0.35rem 0 0; }
figure { margin: 1.4rem 0 1.6rem; }
figure img { display: block; max-width: 100%; height: auto; margin: 0 auto; }
figcaption { font-size: 0.84rem; margin-top: 0.5rem; line-height: 1.45; }
figcaption .reading { display: block; margin-top: 0.15rem; color: var(--muted); }
ol.refs { padding-left: 0; list-style: none; font-size: 0.9rem; }
ol.refs li { margin: 0 0 0.45rem; padding-left: 1.6rem; text-indent: -1.6rem; }
footer { margin-top: 3rem; padding-top: 0.6rem; border-top: 1px solid var(--hair);
         font-size: 0.78rem; color: var(--muted); }
@media (max-width: 40rem) { main { padding: 1.2rem 1rem 3rem; } nav.toc ol { columns: 1; } }
@page { size: A4; margin: 18mm 16mm 18mm 16mm; }
@media print {
  body { background: #fff; font-size: 10.5pt; }
  main { max-width: none; padding: 0; }
  nav.toc { display: none; }
  h2, h3, caption { break-after: avoid; page-break-after: avoid; }
  figure, .table-block, .note, ol.refs li { break-inside: avoid; page-break-inside: avoid; }
  figure { margin: 0.5rem 0 0.9rem; }
  figure img { max-height: 88mm; width: auto; }
  thead { display: table-header-group; }
  tr { break-inside: avoid; page-break-inside: avoid; }
  .scroll { overflow: visible; }
  table { font-size: 8pt; }
  a { color: inherit; text-decoration: none; border: 0; }
  p { orphans: 3; widows: 3; }
  footer { break-before: avoid; page-break-before: avoid; margin-top: 1.5rem; }
}
"""


@dataclass(frozen=True)
class Image:
    """A PNG to embed: alternative text, a caption, and a one-sentence reading of its numbers."""

    png: bytes
    alt: str
    caption: str = ""
    reading: str = ""


@dataclass(frozen=True)
class Table:
    """A table to show: caption above, an optional note below (abbreviations, missing cells)."""

    caption: str
    frame: pd.DataFrame
    note: str = ""


@dataclass(frozen=True)
class Paragraph:
    """A paragraph of text; ``kind`` ``"note"`` sets it apart as a boxed note."""

    text: str
    kind: str = ""


Block = Paragraph | Table | Image


@dataclass(frozen=True)
class Section:
    """One titled part of the report.

    ``blocks`` are shown in order, then (for older callers) ``paragraphs``, ``tables`` as
    ``(caption, frame)`` pairs and ``figures``, then the ``subsections``.
    """

    title: str
    paragraphs: Sequence[str] = ()
    tables: Sequence[tuple[str, pd.DataFrame]] = ()
    figures: Sequence[Image] = field(default_factory=tuple)
    blocks: Sequence[Block] = ()
    subsections: Sequence[Section] = ()
    anchor: str = ""


def png_data_uri(png: bytes) -> str:
    """Encode PNG bytes as a ``data:image/png;base64,...`` URI.

    Parameters
    ----------
    png : bytes
        The content of a PNG file.

    Returns
    -------
    str

    Raises
    ------
    ValueError
        If the bytes are not a PNG file (a wrong file would show as a broken image).
    """
    if not png.startswith(PNG_SIGNATURE):
        raise ValueError("the image to embed is not a PNG file")
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


_ANCHOR = re.compile(r"[^a-z0-9]+")
_LETTER = re.compile(r"[A-Za-z]")
_TEXT = ' class="text"'


def _anchor(section: Section, used: set[str]) -> str:
    base = section.anchor or _ANCHOR.sub("-", section.title.lower()).strip("-") or "section"
    name, k = base, 2
    while name in used:
        name, k = f"{base}-{k}", k + 1
    used.add(name)
    return name


class _Renderer:
    def __init__(self) -> None:
        self.n_tables = 0
        self.n_figures = 0
        self.anchors: set[str] = set()
        self.parts: list[str] = []
        self.top: list[tuple[str, str]] = []

    def table(self, table: Table) -> None:
        esc = html.escape
        self.n_tables += 1
        frame = table.frame
        body = [
            [
                MISSING_CELL if v is None or (isinstance(v, float) and v != v) else str(v)
                for v in values
            ]
            for values in frame.itertuples(index=False, name=None)
        ]
        # Words sit on the left, numbers on the right: a column is text when most cells hold a
        # letter. The first column is always on the left.
        text_cols = [
            k == 0 or 2 * sum(bool(_LETTER.search(row[k])) for row in body) > len(body)
            for k in range(len(frame.columns))
        ]
        # A line break in a column name breaks the header cell there.
        head = "".join(
            f'<th scope="col"{_TEXT if text else ""}>'
            + "<br>".join(esc(part) for part in str(c).split("\n"))
            + "</th>"
            for c, text in zip(frame.columns, text_cols, strict=True)
        )
        rows = [
            "<tr>"
            + "".join(
                f"<td{_TEXT if text else ''}>{esc(c)}</td>"
                for c, text in zip(cells, text_cols, strict=True)
            )
            + "</tr>"
            for cells in body
        ]
        self.parts.append(
            '<div class="table-block"><div class="scroll"><table>'
            f'<caption><span class="label">Table {self.n_tables}.</span> '
            f"{esc(table.caption)}</caption>"
            f"<thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>"
            + (f'<p class="table-note">{esc(table.note)}</p>' if table.note else "")
            + "</div>"
        )

    def figure(self, image: Image) -> None:
        esc = html.escape
        self.n_figures += 1
        caption = (
            f'<figcaption><span class="label">Figure {self.n_figures}.</span> '
            f"{esc(image.caption)}"
            + (f'<span class="reading">{esc(image.reading)}</span>' if image.reading else "")
            + "</figcaption>"
        )
        self.parts.append(
            f'<figure><img src="{png_data_uri(image.png)}" alt="{esc(image.alt)}">'
            f"{caption}</figure>"
        )

    def block(self, block: Block) -> None:
        if isinstance(block, Paragraph):
            css = f' class="{html.escape(block.kind)}"' if block.kind else ""
            tag = "div" if block.kind == "note" else "p"
            self.parts.append(f"<{tag}{css}>{html.escape(block.text)}</{tag}>")
        elif isinstance(block, Table):
            self.table(block)
        else:
            self.figure(block)

    def section(self, section: Section, number: str, depth: int) -> None:
        esc = html.escape
        tag = "h2" if depth == 0 else "h3"
        anchor = _anchor(section, self.anchors)
        if depth == 0:
            self.top.append((anchor, section.title))
        num = f'<span class="num">{esc(number)}</span>' if number else ""
        self.parts.append(f'<section id="{anchor}"><{tag}>{num}{esc(section.title)}</{tag}>')
        for block in section.blocks:
            self.block(block)
        for text in section.paragraphs:
            self.block(Paragraph(text))
        for caption, frame in section.tables:
            self.table(Table(caption, frame))
        for image in section.figures:
            self.figure(image)
        for k, sub in enumerate(section.subsections, start=1):
            self.section(sub, f"{number}.{k}" if number else "", depth + 1)
        self.parts.append("</section>")


def render_report(
    title: str,
    sections: Sequence[Section],
    *,
    kicker: str = "",
    byline: str = "",
    references: Sequence[str] = (),
    numbered: bool = False,
    footer: str = "",
) -> str:
    """Render a complete HTML document from sections.

    Parameters
    ----------
    title : str
        Page title and top heading.
    sections : sequence of Section
        The parts of the report, in order.
    kicker : str, optional
        A short line above the heading (for example "Pilot report").
    byline : str, optional
        A line under the heading (for example who and what the report covers).
    references : sequence of str, optional
        Full references, shown in this order under "References" at the end.
    numbered : bool, optional
        Number the sections (1, 1.1, ...) and show a list of contents.
    footer : str, optional
        A closing line (for example which program wrote the report).

    Returns
    -------
    str
        One HTML5 document with inline CSS and embedded images, referring to no other file.
    """
    esc = html.escape
    r = _Renderer()
    for k, section in enumerate(sections, start=1):
        r.section(section, str(k) if numbered else "", 0)
    if references:
        anchor = _anchor(Section("References"), r.anchors)
        r.top.append((anchor, "References"))
        r.parts.append(
            f'<section id="{anchor}"><h2>References</h2><ol class="refs">'
            + "".join(f"<li>{esc(ref)}</li>" for ref in references)
            + "</ol></section>"
        )
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{esc(title)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        "<main>",
        "<header>",
        f'<p class="kicker">{esc(kicker)}</p>' if kicker else "",
        f"<h1>{esc(title)}</h1>",
        f'<p class="byline">{esc(byline)}</p>' if byline else "",
        "</header>",
    ]
    if numbered and len(r.top) > 1:
        items = "".join(f'<li><a href="#{a}">{esc(t)}</a></li>' for a, t in r.top)
        parts.append(f'<nav class="toc" aria-label="Contents">Contents<ol>{items}</ol></nav>')
    parts.extend(r.parts)
    if footer:
        parts.append(f"<footer>{esc(footer)}</footer>")
    parts.extend(["</main>", "</body>", "</html>", ""])
    return "\n".join(p for p in parts if p)
