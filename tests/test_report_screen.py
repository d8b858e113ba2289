"""The report fits a 1366 px wide screen: no sideways scrolling, neither of the page nor of a table.

Headless Chromium (Debian's ``chromium``; the test skips when none is found) opens a copy of
report.html with one added script that writes, after the page has loaded, the page's scroll
width and every element whose content is wider than its box into the DOM; ``--dump-dom``
prints it. 1366 x 768 is the most common laptop screen (common practice). The designs are the
demo and the bundled designs with the widest tables: the generations table of the two with the
widest minimum table (tree_vessel, twin_culture_manifold) and the channel table of an explicit
network (bench_loop_network). test_report_print.py checks that printing keeps every column.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from chipflow.export.bundle import build_to_folder

ROOT = Path(__file__).resolve().parents[1]
BROWSERS = ("chromium", "chromium-browser", "google-chrome", "chrome")
SCREEN = 1366

#: Writes "scroll width|overflowing elements" into the body's data-fit attribute.
PROBE = """<script>
window.addEventListener('load', () => {
  const wide = [];
  document.body.querySelectorAll('*').forEach(e => {
    if (e.closest('svg')) return;  // figures scale to their box; SVG text boxes are not boxes
    if (e.clientWidth > 0 && e.scrollWidth > e.clientWidth + 1)
      wide.push(e.tagName + ':' + e.scrollWidth + '>' + e.clientWidth);
  });
  document.body.setAttribute('data-fit',
    document.documentElement.scrollWidth + '|' + wide.join(';'));
});
</script>"""


def _browser() -> str | None:
    return next((b for b in map(shutil.which, BROWSERS) if b), None)


def page_fit(report: Path, tmp_path: Path, width: int = SCREEN) -> tuple[int, list[str]]:
    """The page's scroll width [px] at ``width`` and the elements wider than their box."""
    browser = _browser()
    if browser is None:
        pytest.skip("no Chromium on this machine (Debian: apt-get install chromium)")
    probe = report.with_name("probe.html")
    probe.write_text(report.read_text().replace("</body>", PROBE + "</body>"))
    done = subprocess.run(
        [
            browser,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            f"--user-data-dir={tmp_path / 'profile'}",
            f"--window-size={width},900",
            "--dump-dom",
            probe.as_uri(),
        ],
        capture_output=True,
        text=True,
        timeout=240,
    )
    found = re.search(r'data-fit="(\d+)\|([^"]*)"', done.stdout)
    assert found, done.stderr[-2000:]
    return int(found.group(1)), [w for w in found.group(2).split(";") if w]


@pytest.mark.parametrize(
    "design",
    ["demo_endothelial_bed", "tree_vessel", "twin_culture_manifold", "bench_loop_network"],
)
def test_report_fits_a_1366_px_screen(design: str, tmp_path: Path) -> None:
    if _browser() is None:
        pytest.skip("no Chromium on this machine (Debian: apt-get install chromium)")
    _, files = build_to_folder(ROOT / "designs" / f"{design}.toml", tmp_path / "out")
    report = files[0].parent / "report.html"
    width, wide = page_fit(report, tmp_path)
    assert width <= SCREEN
    assert not wide, f"content wider than its box (scrolls sideways): {wide}"
    assert report.read_text().count("<th") > 20  # the columns are all there


def test_the_probe_sees_a_table_too_wide(tmp_path: Path) -> None:
    """The probe fails a page whose table needs a sideways scroll (the test can fail)."""
    if _browser() is None:
        pytest.skip("no Chromium on this machine (Debian: apt-get install chromium)")
    from chipflow.report.html import report_html

    results = {"generations": [{"role": "bed", "count": 1, "width": 1e-4}] * 2}
    page = report_html(results).replace(
        "</h1>",
        "</h1><div class='wide'><table><tr>" + "<td>0.123456789</td>" * 40 + "</tr></table></div>",
    )
    report = tmp_path / "report.html"
    report.write_text(page)
    _, wide = page_fit(report, tmp_path)
    assert any(w.startswith("DIV") for w in wide)
