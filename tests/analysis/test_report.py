"""Tests of runner.data.report and the report that write_summary builds."""

from __future__ import annotations

import base64
import re
from html.parser import HTMLParser

import pandas as pd
import pytest

from runner.data import report

# Anything that would make a browser fetch another file or site.
DATA_URI = re.compile(r"data:image/png;base64,[A-Za-z0-9+/=]+")
EXTERNAL = re.compile(r"(https?:|ftp:|file:|//[a-z0-9]|<link\b|<script\b|@import|url\()", re.I)


class _Images(HTMLParser):
    """Collects tags, image sources and alt texts, links, headings and table captions."""

    def __init__(self) -> None:
        super().__init__()
        self.sources: list[str] = []
        self.alts: list[str | None] = []
        self.links: list[str] = []
        self.tags: list[str] = []
        self.headings: dict[str, list[str]] = {"h1": [], "h2": [], "h3": []}
        self.captions: list[str] = []
        self._open: list[str] = []
        self._text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        values = dict(attrs)
        if tag == "img":
            self.sources.append(values.get("src") or "")
            self.alts.append(values.get("alt"))
        for name in ("href", "src", "action", "poster", "srcset"):
            if values.get(name) is not None and tag != "img":
                self.links.append(values[name] or "")
        if tag in self.headings or tag in ("caption", "figcaption"):
            self._open.append(tag)
            self._text = []

    def handle_data(self, data: str) -> None:
        if self._open:
            self._text.append(data)

    def handle_endtag(self, tag: str) -> None:
        if self._open and self._open[-1] == tag:
            self._open.pop()
            text = "".join(self._text).strip()
            if tag in self.headings:
                self.headings[tag].append(text)
            else:
                self.captions.append(text)


def _parse(html: str) -> _Images:
    parser = _Images()
    parser.feed(html)
    return parser


def test_report_has_no_external_references(pilot_summary) -> None:
    """report.html names no URL, style sheet, script or external file."""
    out, _ = pilot_summary
    html = (out / "report.html").read_text(encoding="utf-8")
    # Base64 text can hold "//" by chance; the data URIs themselves are checked separately.
    text = DATA_URI.sub("data-uri", html)
    # 8 level plots (2 factors x 4), the best difficulty model, load curves of RT and accuracy.
    assert text.count("data-uri") == 11
    assert EXTERNAL.search(text) is None, EXTERNAL.search(text)


def test_report_embeds_every_plot(pilot_summary) -> None:
    """Every PNG written is embedded, byte for byte, as a data URI in report.html.

    Source: RFC 2397 (the data URL scheme) and RFC 4648 (base64).
    """
    out, paths = pilot_summary
    parser = _Images()
    parser.feed((out / "report.html").read_text(encoding="utf-8"))
    prefix = "data:image/png;base64,"
    assert all(src.startswith(prefix) for src in parser.sources)
    embedded = sorted(base64.b64decode(src[len(prefix) :]) for src in parser.sources)
    written = sorted(p.read_bytes() for p in paths if p.suffix == ".png")
    assert len(written) == 11
    assert embedded == written


def test_report_holds_tables_and_sections(pilot_summary) -> None:
    """The report has its tables and the sections of a results write-up, numbered."""
    out, _ = pilot_summary
    parser = _parse((out / "report.html").read_text(encoding="utf-8"))
    # two factors, the loadings, the hardest stimuli, the difficulty models, the two-lines
    # tests, the participants
    assert parser.tags.count("table") == 7
    assert parser.headings["h2"] == [
        "1Participants and data",
        "2Results",
        "3Methods",
        "4Interpretation and cautions",
        "5Appendix: participants",
        "References",
    ]
    assert parser.headings["h3"] == [
        "2.1By nodes",
        "2.2By density",
        "2.3Floor and ceiling",
        "2.4Difficulty score",
        "2.5What drives difficulty",
        "2.6Where load gives way",
    ]
    assert [c.split(".")[0] for c in parser.captions if c.startswith("Table")] == [
        f"Table {k}" for k in range(1, 8)
    ]


def test_report_links_only_to_itself_and_describes_every_image(pilot_summary) -> None:
    """Links point inside the page, images are data URIs, every image has alt text and every
    figure caption ends with a reading of its numbers."""
    out, _ = pilot_summary
    parser = _parse((out / "report.html").read_text(encoding="utf-8"))
    assert parser.links and all(link.startswith("#") for link in parser.links)
    assert parser.sources and all(s.startswith("data:image/png;base64,") for s in parser.sources)
    assert all(alt and alt.strip() for alt in parser.alts)
    figures = [c for c in parser.captions if c.startswith("Figure")]
    assert len(figures) == len(parser.sources) == 11
    readings = (
        "Accuracy ",
        "Mean response time ",
        "The mean rating ",
        "The mean difficulty",
        "Response time rose",
        "Accuracy fell",
        "The scores of the ",
    )
    for caption in figures:
        assert any(r in caption for r in readings), caption


def test_render_report_escapes_text() -> None:
    """Titles, paragraphs and table cells are HTML-escaped."""
    html = report.render_report(
        "A <b> title",
        [
            report.Section(
                "S & T", paragraphs=["x < y"], tables=[("t", pd.DataFrame({"a": ["<i>"]}))]
            )
        ],
    )
    assert "A &lt;b&gt; title" in html and "S &amp; T" in html and "x &lt; y" in html
    assert "&lt;i&gt;" in html and "<i>" not in html


def test_png_data_uri_refuses_other_bytes() -> None:
    """Bytes that are not a PNG file are refused rather than embedded as a broken image."""
    with pytest.raises(ValueError, match="not a PNG"):
        report.png_data_uri(b"GIF89a....")
