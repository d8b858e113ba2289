"""The demo report printed to PDF by headless Chromium keeps every column of every table.

Chromium is Debian's ``chromium`` package (.ci/run installs it when missing); the test skips
only when no Chromium can be found on the machine.
"""

from __future__ import annotations

import html
import re
import shutil
import subprocess
import unicodedata
from pathlib import Path

import pytest

from chipflow.export.bundle import build_to_folder

ROOT = Path(__file__).resolve().parents[1]
BROWSERS = ("chromium", "chromium-browser", "google-chrome", "chrome")


def _browser() -> str | None:
    return next((b for b in map(shutil.which, BROWSERS) if b), None)


def _normal(text: str) -> str:
    """Ligatures and superscripts unfolded (NFKC), hyphenated breaks joined, one space."""
    text = unicodedata.normalize("NFKC", text)
    text = re.sub(r"-\s+", "-", text)
    return " ".join(text.split())


@pytest.mark.parametrize("design", ["demo_endothelial_bed", "bench_loop_network"])
def test_printed_report_keeps_every_column_heading(design: str, tmp_path: Path) -> None:
    browser = _browser()
    if browser is None:
        pytest.skip("no Chromium on this machine (Debian: apt-get install chromium)")
    import pypdf  # the test extra has it

    _, files = build_to_folder(ROOT / "designs" / f"{design}.toml", tmp_path / "out")
    report = files[0].parent / "report.html"
    pdf = tmp_path / "report.pdf"
    done = subprocess.run(
        [
            browser,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-pdf-header-footer",
            f"--user-data-dir={tmp_path / 'profile'}",
            f"--print-to-pdf={pdf}",
            report.as_uri(),
        ],
        capture_output=True,
        text=True,
        timeout=240,
    )
    assert done.returncode == 0 and pdf.exists(), done.stderr[-2000:]
    text = _normal(" ".join(page.extract_text() for page in pypdf.PdfReader(pdf).pages))
    headings = re.findall(r"<th[^>]*>(.*?)</th>", report.read_text(), re.DOTALL)
    assert len(headings) > 20
    missing = [h for h in headings if _normal(html.unescape(h)) not in text]
    assert not missing, f"columns lost in print: {missing}"
