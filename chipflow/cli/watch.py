"""``chipflow build DESIGN --watch``: rebuild on every save, serve a report that reloads itself.

The design file (and a pump waveform CSV it names) is checked for changes twice a second by
its modification time and size: a cheap ``stat``, no extra dependency. Each change rebuilds
into the output folder exactly as ``chipflow build`` does and prints the verdict line; a
design that does not build prints its one-line error and the last good build stays served.

The output folder is served on 127.0.0.1 by the standard library's HTTP server. Only the served
copy of ``report.html`` carries a small script that asks the server every second for the build
number and reloads the page when it changes; the file written to disk is the ordinary,
self-contained report, byte for byte. Ctrl-C (or SIGTERM) stops the server and the watch.
"""

from __future__ import annotations

import contextlib
import html
import http.server
import signal
import threading
import time
import tomllib
from collections.abc import Callable, Sequence
from functools import partial
from pathlib import Path

import click

from chipflow.errors import ChipflowError

__all__ = ["watch", "VERSION_PATH", "RELOAD_SCRIPT"]

#: Where the served page asks for the number of the latest build.
VERSION_PATH = "/__chipflow__/version"
#: Seconds between two looks at the watched files.
POLL_SECONDS = 0.5
#: A change is built once the files have stayed the same this long [s] (editors save in steps).
SETTLE_SECONDS = 0.3

#: Injected before ``</body>`` of the served report only (``{build}``: its build number).
RELOAD_SCRIPT = """<script>
(function () {
  var shown = "{build}";
  function poll() {
    fetch("__VERSION__", {cache: "no-store"})
      .then(function (r) { return r.text(); })
      .then(function (v) {
        if (v.trim() !== shown) { location.reload(); } else { setTimeout(poll, 1000); }
      })
      .catch(function () { setTimeout(poll, 2000); });
  }
  setTimeout(poll, 1000);
})();
</script>
""".replace("__VERSION__", VERSION_PATH)

_WAITING = (
    '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"><title>{name} - waiting for a '
    "build</title></head><body><p>chipflow is waiting for a build of {name} that succeeds: "
    "{reason}</p>\n</body></html>\n"
)


class _State:
    """What the server shows: the build number, and why there is no report yet."""

    def __init__(self, name: str) -> None:
        self.build = 0
        self.name = name
        self.reason = "the first build is running"
        self.lock = threading.Lock()


class _Handler(http.server.SimpleHTTPRequestHandler):
    """Static files of the output folder, the report with the reload script, the version."""

    def __init__(self, *args, state: _State, folder: Path, **kwargs) -> None:
        self.state = state
        self.folder = folder
        super().__init__(*args, directory=str(folder), **kwargs)

    def log_message(self, format, *args) -> None:  # noqa: A002 - the base class's name
        return None  # the console shows the builds, not every request

    def end_headers(self) -> None:
        self.send_header("Cache-Control", "no-store")
        super().end_headers()

    def _send(self, body: str, content_type: str) -> None:
        data = body.encode("utf-8")
        self.send_response(200)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(data)))
        self.end_headers()
        self.wfile.write(data)

    def do_GET(self) -> None:  # noqa: N802 - the base class's name
        path = self.path.split("?", 1)[0]
        with self.state.lock:
            build, reason, name = self.state.build, self.state.reason, self.state.name
        if path == VERSION_PATH:
            self._send(str(build), "text/plain; charset=utf-8")
            return
        if path in ("/", "/report.html"):
            script = RELOAD_SCRIPT.replace("{build}", str(build))
            try:
                page = (self.folder / "report.html").read_text("utf-8")
            except OSError:
                page = _WAITING.format(name=html.escape(name), reason=html.escape(reason))
            at = page.rfind("</body>")
            self._send(page[:at] + script + page[at:], "text/html; charset=utf-8")
            return
        super().do_GET()


def watched_files(design: Path) -> list[Path]:
    """The design file and the pump waveform CSV its ``[supply]`` names, if any."""
    files = [design]
    with contextlib.suppress(OSError, ValueError, tomllib.TOMLDecodeError, AttributeError):
        wave = tomllib.loads(design.read_text("utf-8-sig")).get("supply", {}).get("waveform")
        if isinstance(wave, str):
            path = Path(wave)
            files.append(path if path.is_absolute() else design.parent / path)
    return files


def _stamp(files: Sequence[Path]) -> tuple:
    out = []
    for path in files:  # one or two files
        try:
            info = path.stat()
            out.append((info.st_mtime_ns, info.st_size))
        except OSError:
            out.append(None)
    return tuple(out)


def watch(
    design: Path,
    outdir: Path,
    build: Callable[[], object],
    *,
    port: int = 8765,
    verdict: Callable[[object], str],
    name: str,
) -> int:
    """Build ``design`` now and on every change, serving ``outdir`` until Ctrl-C.

    Parameters
    ----------
    design : pathlib.Path
        The design file (a waveform CSV it names is watched too).
    outdir : pathlib.Path
        The output folder the builds write (served as it is).
    build : callable
        Builds and writes the outputs; returns what ``verdict`` reads.
    port : int
        Port on 127.0.0.1 (0: any free port).
    verdict : callable
        The one line printed after each build.
    name : str
        Shown while no build has succeeded.

    Returns
    -------
    int
        0 after Ctrl-C, 143 after SIGTERM.
    """
    state = _State(name)
    handler = partial(_Handler, state=state, folder=outdir)
    try:
        server = http.server.ThreadingHTTPServer(("127.0.0.1", port), handler)
    except OSError as exc:
        raise ChipflowError(
            f"--watch: cannot serve on 127.0.0.1:{port} ({exc.strerror}); give another --port"
        ) from None
    server.daemon_threads = True
    thread = threading.Thread(target=server.serve_forever, name="chipflow-watch", daemon=True)
    thread.start()
    url = f"http://127.0.0.1:{server.server_address[1]}/report.html"
    files = watched_files(design)
    names = " and ".join(str(f) for f in files)
    click.echo(f"watching {names}; the report is at {url} (Ctrl-C stops)")

    def terminate(signum, frame):
        raise SystemExit(128 + signum)

    previous = signal.signal(signal.SIGTERM, terminate)
    # Ctrl-C stops the watch even when it was started with SIGINT ignored (a background job
    # of a shell without job control inherits that)
    previous_int = signal.signal(signal.SIGINT, signal.default_int_handler)
    status = 0
    try:
        count = 0
        while True:
            stamp = _stamp(files)
            count += 1
            try:
                result = build()
            except (ChipflowError, OSError) as exc:
                line = " ".join(str(exc).split())
                click.echo(f"build {count}: error: {line}")
                with state.lock:
                    state.reason = line
            else:
                with state.lock:
                    state.build = count
                click.echo(f"build {count}: {verdict(result)}")
            files = watched_files(design)
            while True:  # wait for a change that has settled
                time.sleep(POLL_SECONDS)
                now = _stamp(files)
                if now != stamp:
                    time.sleep(SETTLE_SECONDS)
                    if _stamp(files) == now:
                        break
    except KeyboardInterrupt:
        status = 0
    except SystemExit as exc:  # SIGTERM, or Ctrl-C while a build held its output folder
        status = 0 if exc.code == 128 + signal.SIGINT else int(exc.code or 0)
    finally:
        signal.signal(signal.SIGTERM, previous)
        signal.signal(signal.SIGINT, previous_int)
        server.shutdown()
        server.server_close()
        click.echo("stopped watching")
    return status
