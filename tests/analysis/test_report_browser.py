"""report.html in a real browser: headless Chromium renders it to a PNG and prints it to PDF.

Skipped, with the reason, where Chromium is not installed (``.ci/run`` installs the Debian
package ``chromium`` when it can).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

pytestmark = pytest.mark.slow

# A generous bound so a hung browser fails the test instead of stalling the suite; it is not a
# timing assertion.
BROWSER_LIMIT_S = 180
# A PDF page object: "/Type /Page" (not "/Pages", the page tree).
PDF_PAGE = re.compile(rb"/Type\s*/Page(?![A-Za-z])")


def _chromium() -> str:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    pytest.skip(
        "headless Chromium is not installed (Debian package 'chromium'); the report's browser "
        "rendering cannot be checked here"
    )


def _run(args: list[str], tmp_path: Path) -> None:
    profile = tmp_path / "profile"
    profile.mkdir(exist_ok=True)
    command = [
        _chromium(),
        "--headless",
        "--no-sandbox",  # the test may run as root in a container
        "--disable-gpu",
        "--hide-scrollbars",
        "--no-first-run",
        f"--user-data-dir={profile}",
        *args,
    ]
    done = subprocess.run(command, capture_output=True, timeout=BROWSER_LIMIT_S, check=False)
    assert done.returncode == 0, done.stderr.decode(errors="replace")[-2000:]


@pytest.mark.parametrize(("width", "height"), [(1200, 2400), (420, 1600)])
def test_report_renders_to_a_screenshot(pilot_summary, tmp_path, width, height) -> None:
    """Chromium draws the report (desktop and phone width) as a PNG of that size with text and
    figures on it: many colours, not one blank page colour.

    Source: PNG specification (ISO/IEC 15948) decoded by Pillow; Chromium's --screenshot.
    """
    out, _ = pilot_summary
    png = tmp_path / "report.png"
    _run(
        [f"--screenshot={png}", f"--window-size={width},{height}", (out / "report.html").as_uri()],
        tmp_path,
    )
    with Image.open(png) as image:
        assert image.size == (width, height)
        pixels = np.asarray(image.convert("RGB"))
    colours = np.unique(pixels.reshape(-1, 3), axis=0)
    assert len(colours) > 50
    # Ink covers part of the page: dark pixels (text, rules) are present but not everywhere.
    dark = (pixels.mean(axis=2) < 100).mean()
    assert 0.002 < dark < 0.5


def test_report_prints_to_pdf(pilot_summary, tmp_path) -> None:
    """Chromium prints the report to a PDF of several pages (one per page object).

    Source: ISO 32000-1:2008 (PDF 1.7), section 7.7.3.3: each page is a dictionary with
    /Type /Page.
    """
    out, _ = pilot_summary
    pdf = tmp_path / "report.pdf"
    _run(
        ["--no-pdf-header-footer", f"--print-to-pdf={pdf}", (out / "report.html").as_uri()],
        tmp_path,
    )
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-")
    assert len(PDF_PAGE.findall(data)) >= 3
