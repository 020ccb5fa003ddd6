"""A self-contained HTML report: inline CSS, tables as HTML, images as base64 data URIs.

The report must open on a lab laptop with no network and survive being mailed as one file, so it
refers to nothing outside itself: no style sheets, fonts, scripts or image files.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Sequence
from dataclasses import dataclass, field

import pandas as pd

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"

_CSS = """
:root { --ink: #2b2b2b; --muted: #6b6b6b; --rule: #e4e1da; --accent: #2e6b9e; --paper: #fbfaf7; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; }
main { max-width: 1080px; margin: 0 auto; padding: 28px 32px 64px; }
h1 { font-size: 26px; margin: 0 0 4px; color: var(--accent); }
h2 { font-size: 19px; margin: 36px 0 10px; padding-bottom: 4px; border-bottom: 2px solid var(--rule); }
h3 { font-size: 15px; margin: 18px 0 6px; color: var(--muted); font-weight: 600; }
p { margin: 6px 0; max-width: 78ch; }
.scroll { overflow-x: auto; }
table { border-collapse: collapse; font-size: 13px; margin: 6px 0 14px; background: #fff; }
th, td { padding: 4px 8px; border-bottom: 1px solid var(--rule); text-align: right;
         white-space: nowrap; font-variant-numeric: tabular-nums; }
th { background: #f1efe9; font-weight: 600; white-space: normal; vertical-align: bottom; }
td:first-child, th:first-child { text-align: left; }
tbody tr:nth-child(even) { background: #faf9f6; }
figure { margin: 14px 0 22px; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); background: #fff; }
figcaption { font-size: 13px; color: var(--muted); margin-top: 4px; }
"""


@dataclass(frozen=True)
class Image:
    """A PNG to embed, with its alternative text and caption."""

    png: bytes
    alt: str
    caption: str = ""


@dataclass(frozen=True)
class Section:
    """One titled part of the report: paragraphs, then tables, then images."""

    title: str
    paragraphs: Sequence[str] = ()
    tables: Sequence[tuple[str, pd.DataFrame]] = ()
    figures: Sequence[Image] = field(default_factory=tuple)


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


def _table_html(table: pd.DataFrame) -> str:
    # pandas escapes cell text by default; the wrapper lets wide tables scroll on small screens.
    return (
        '<div class="scroll">'
        + table.to_html(index=False, border=0, na_rep="–", escape=True)
        + "</div>"
    )


def render_report(title: str, sections: Sequence[Section]) -> str:
    """Render a complete HTML document from sections.

    Parameters
    ----------
    title : str
        Page title and top heading.
    sections : sequence of Section
        The parts of the report, in order.

    Returns
    -------
    str
        One HTML5 document with inline CSS and embedded images, referring to no other file.
    """
    esc = html.escape
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
        f"<h1>{esc(title)}</h1>",
    ]
    for section in sections:
        parts.append(f"<section><h2>{esc(section.title)}</h2>")
        parts.extend(f"<p>{esc(text)}</p>" for text in section.paragraphs)
        for caption, table in section.tables:
            parts.append(f"<h3>{esc(caption)}</h3>")
            parts.append(_table_html(table))
        for image in section.figures:
            parts.append(
                f'<figure><img src="{png_data_uri(image.png)}" alt="{esc(image.alt)}">'
                + (f"<figcaption>{esc(image.caption)}</figcaption>" if image.caption else "")
                + "</figure>"
            )
        parts.append("</section>")
    parts.extend(["</main>", "</body>", "</html>", ""])
    return "\n".join(parts)
