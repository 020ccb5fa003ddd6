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
    def __init__(self) -> None:
        super().__init__()
        self.sources: list[str] = []
        self.tags: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        if tag == "img":
            self.sources.append(dict(attrs).get("src") or "")


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
    """The report has its tables and the overview, floor/ceiling and difficulty sections."""
    out, _ = pilot_summary
    html = (out / "report.html").read_text(encoding="utf-8")
    parser = _Images()
    parser.feed(html)
    # two factors, participants, hardest stimuli, best difficulty models
    assert parser.tags.count("table") == 5
    for heading in ("Overview", "Floor and ceiling", "By nodes", "By density", "Difficulty score"):
        assert f"<h2>{heading}</h2>" in html
    assert "Participants may stop at any time" in html


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
