"""``chipflow build --watch``: rebuilds on save, serves a report that reloads itself.

The end-to-end test runs the command in a process of its own and opens the served report in
headless Chromium (Debian's ``chromium``; the test skips without it). It reads what the page
shows from Chromium's own list of open pages (the DevTools HTTP endpoint ``/json/list``,
standard library only): the page's title is the design's name, so after the design file is
edited the open page must show the new name without being told to reload. Its numbers are
polling intervals and time limits, not reference values from a source.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import threading
import time
import urllib.request
from pathlib import Path

import pytest

from chipflow.cli.watch import RELOAD_SCRIPT, VERSION_PATH, watched_files

ROOT = Path(__file__).resolve().parents[1]
BROWSERS = ("chromium", "chromium-browser", "google-chrome", "chrome")
DESIGN = (
    (ROOT / "tests" / "data" / "two_channel_tree.toml")
    .read_text()
    .replace('name = "two-channel-tree"', 'name = "{name}"')
)


class _Lines:
    """The lines a process prints, collected by a thread so that reading never blocks."""

    def __init__(self, stream) -> None:
        self.lines: list[str] = []
        self.thread = threading.Thread(target=self._read, args=(stream,), daemon=True)
        self.thread.start()

    def _read(self, stream) -> None:
        for line in stream:
            self.lines.append(line.rstrip("\n"))

    def wait_for(self, predicate, timeout: float = 120.0) -> str:
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            for line in list(self.lines):
                if predicate(line):
                    return line
            time.sleep(0.1)
        raise AssertionError(f"not seen within {timeout} s; output so far: {self.lines}")


def _url(lines: _Lines) -> str:
    line = lines.wait_for(lambda s: "http://127.0.0.1:" in s)
    return re.search(r"http://127\.0\.0\.1:\d+/report\.html", line).group()


def _get(url: str) -> str:
    with urllib.request.urlopen(url, timeout=10) as response:
        return response.read().decode("utf-8")


def _start_watch(design: Path, out: Path) -> tuple[subprocess.Popen, _Lines]:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "MPLBACKEND": "Agg"}
    process = subprocess.Popen(
        [sys.executable, "-c", "from chipflow.cli import main; main()", "build", str(design),
         "--watch", "--port", "0", "--no-field", "-o", str(out)],
        stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=env,
    )  # fmt: skip
    return process, _Lines(process.stdout)


def _stop(process: subprocess.Popen, lines: _Lines) -> int:
    process.send_signal(signal.SIGINT)
    status = process.wait(timeout=60)
    lines.thread.join(timeout=10)
    return status


def test_the_served_report_reloads_itself_and_the_file_stays_plain(tmp_path: Path) -> None:
    design = tmp_path / "live.toml"
    design.write_text(DESIGN.format(name="live-one"))
    out = tmp_path / "out"
    process, lines = _start_watch(design, out)
    try:
        url = _url(lines)
        lines.wait_for(lambda s: s.startswith("build 1: checks:"))
        base = url.rsplit("/", 1)[0]
        served = _get(url)
        assert "<title>live-one - chipflow report</title>" in served
        assert VERSION_PATH in served and _get(base + VERSION_PATH) == "1"
        written = (out / "report.html").read_text()
        assert "<script" not in written  # the file on disk is the plain, self-contained report
        assert served.replace(RELOAD_SCRIPT.replace("{build}", "1"), "") == written
        # an edit rebuilds; a broken edit keeps the last good build served and says why
        design.write_text(DESIGN.format(name="live-two"))
        lines.wait_for(lambda s: s.startswith("build 2: checks:"))
        assert _get(base + VERSION_PATH) == "2" and "live-two" in _get(url)
        design.write_text("[tree\n")
        lines.wait_for(lambda s: s.startswith("build 3: error:") and "not valid TOML" in s)
        assert _get(base + VERSION_PATH) == "2" and "live-two" in _get(url)
    finally:
        status = _stop(process, lines)
    assert status == 0 and lines.lines[-1] == "stopped watching"
    # what the watch wrote is what a plain build writes
    from click.testing import CliRunner

    from chipflow.cli import main

    design.write_text(DESIGN.format(name="live-two"))
    plain = tmp_path / "plain"
    assert (
        CliRunner().invoke(main, ["build", str(design), "--no-field", "-o", str(plain)]).exit_code
        == 0
    )
    assert (plain / "report.html").read_bytes() == (out / "report.html").read_bytes()


def _browser() -> str | None:
    return next((b for b in map(shutil.which, BROWSERS) if b), None)


def _page_titles(profile: Path) -> list[str]:
    port_file = profile / "DevToolsActivePort"
    if not port_file.exists():
        return []
    port = port_file.read_text().split()[0]
    try:
        pages = json.loads(_get(f"http://127.0.0.1:{port}/json/list"))
    except OSError:
        return []
    return [p.get("title", "") for p in pages if p.get("type") == "page"]


def test_an_open_page_shows_the_new_value_after_the_file_changes(tmp_path: Path) -> None:
    browser = _browser()
    if browser is None:
        pytest.skip("no Chromium on this machine (Debian: apt-get install chromium)")
    design = tmp_path / "live.toml"
    design.write_text(DESIGN.format(name="before-edit"))
    process, lines = _start_watch(design, tmp_path / "out")
    chrome = None
    try:
        url = _url(lines)
        lines.wait_for(lambda s: s.startswith("build 1: checks:"))
        profile = tmp_path / "profile"
        chrome = subprocess.Popen(
            [browser, "--headless", "--no-sandbox", "--disable-gpu",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             "--no-first-run", f"--user-data-dir={profile}", "--remote-debugging-port=0", url],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )  # fmt: skip
        _wait(lambda: "before-edit - chipflow report" in _page_titles(profile))
        design.write_text(DESIGN.format(name="after-edit"))
        lines.wait_for(lambda s: s.startswith("build 2: checks:"))
        # nobody tells the page: its own script sees build 2 and reloads
        _wait(lambda: "after-edit - chipflow report" in _page_titles(profile))
    finally:
        if chrome is not None:
            chrome.terminate()
            chrome.wait(timeout=30)
        status = _stop(process, lines)
    assert status == 0


def _wait(condition, timeout: float = 90.0) -> None:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if condition():
            return
        time.sleep(0.25)
    raise AssertionError("the page did not show it in time")


def test_the_waveform_named_by_the_design_is_watched_too(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text('[supply]\ninlet = "peristaltic"\nwaveform = "pump.csv"\n')
    assert watched_files(design) == [design, tmp_path / "pump.csv"]
    design.write_text("[tree\n")  # unreadable: the design alone
    assert watched_files(design) == [design]
