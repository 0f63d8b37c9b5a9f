"""The report on paper: an HTML page printed to PDF by headless Chromium.

:func:`print_pdf` opens the page in a headless Chromium and asks it, over the DevTools protocol,
to print it (``Page.printToPDF``): A4, every page with a footer holding the given text (a
report gives its plan's fingerprint) and "page n of N", and print rules that keep images,
figures and table rows whole across a page break and let long values (hashes) wrap instead of
running off the page. The PDF is written under a temporary name beside its place and renamed
into place when complete, so nothing half-written is ever left.

The browser is driven through ``--remote-debugging-pipe`` (the protocol's JSON messages, each
ended by a NUL byte, on the browser's file descriptors 3 and 4), so no network port is opened
and no library beyond the standard one is needed. :class:`Browser` is that session; the
browser tests use it too (a page at a given width, a script's value, a screenshot).

Chromium is found as ``$PRESPEC_CHROMIUM``, else ``chromium`` or ``chromium-browser`` on the
``PATH`` (Debian: ``apt-get install chromium``).
"""

from __future__ import annotations

import base64
import fcntl
import html
import json
import os
import select
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any, Self

from prespec.errors import BadInput, PrespecError

#: The name of the printed report in a report folder.
PDF = "report.pdf"
#: The environment variable that names the browser to print with.
CHROMIUM_VARIABLE = "PRESPEC_CHROMIUM"
_NAMES = ("chromium", "chromium-browser")

#: A4 in inches, and the margins (the bottom one holds the footer); the page is laid out at
#: 80 % (so 860 CSS pixels wide, and 14 px text prints at about 8.4 pt): the report's wide
#: tables fit without their headings broken inside words.
PAPER = {"paperWidth": 8.27, "paperHeight": 11.69, "marginTop": 0.55, "marginBottom": 0.75,
         "marginLeft": 0.55, "marginRight": 0.55, "scale": 0.8}


def paper_width_px() -> int:
    """The width, in CSS pixels, a page is laid out at when printed on :data:`PAPER`."""
    inches = PAPER["paperWidth"] - PAPER["marginLeft"] - PAPER["marginRight"]
    return int(inches * 96 / PAPER["scale"])


#: Print rules added to the page before it is printed: nothing cut at a page break, nothing
#: wider than the paper.
PRINT_CSS = """
@media print {
  html, body { background: #ffffff; }
  body { max-width: none !important; margin: 0 !important; padding: 0 !important; }
  img, svg, figure, pre, tr, .jp-RenderedImage, .jp-OutputArea-output img {
    break-inside: avoid; page-break-inside: avoid;
  }
  h1, h2, h3, h4, h5, caption { break-after: avoid; page-break-after: avoid; }
  thead { display: table-header-group; }
  img, svg { max-width: 100% !important; height: auto !important; }
  table { max-width: 100% !important; }
  td, th, code, pre { overflow-wrap: anywhere; white-space: normal; }
  td.num { white-space: nowrap; }
  a { color: inherit; text-decoration: none; }
}
"""

_READY = """
(async () => {
  if (document.fonts && document.fonts.ready) { await document.fonts.ready; }
  await Promise.all(Array.from(document.images).map(
    (img) => (img.complete ? null : img.decode().catch(() => null))));
  return document.readyState;
})()
"""


def find_chromium() -> Path | None:
    """The Chromium to use: ``$PRESPEC_CHROMIUM``, else ``chromium``/``chromium-browser`` on
    the PATH; None when there is none."""
    named = os.environ.get(CHROMIUM_VARIABLE)
    if named:
        path = Path(named)
        return path if path.is_file() and os.access(path, os.X_OK) else None
    for name in _NAMES:
        found = shutil.which(name)
        if found:
            return Path(found)
    return None


def require_chromium() -> Path:
    """The Chromium to use, or :class:`BadInput` (one line) saying how to get one."""
    found = find_chromium()
    if found is None:
        raise BadInput("no Chromium found to print or check the report with: install it "
                       f"(Debian: apt-get install chromium) or set {CHROMIUM_VARIABLE} to "
                       "its path")
    return found


def footer_of(results: dict[str, Any]) -> str:
    """A report's footer: the plan's fingerprint and version (a run of a plan never locked
    says so), so that every sheet names the analysis it belongs to."""
    version = results.get("plan_version")
    locked = f"version {version}" if version is not None else "not locked"
    return f"Plan fingerprint {results.get('plan')} ({locked})"


def footer_template(footer: str) -> str:
    """The footer Chromium prints on every page: the text on the left (a line break in it
    kept), "page n of N" on the right (``pageNumber`` and ``totalPages`` are filled in by the
    browser)."""
    from prespec.common.shown import visible

    text = "<br>".join(html.escape(visible(line)) for line in footer.split("\n"))
    return (
        '<div style="font-family: sans-serif; font-size: 7.5pt; color: #444444; width: 100%; '
        'margin: 0 0.55in; display: flex; justify-content: space-between; gap: 1em;">'
        f'<span style="overflow-wrap: anywhere;">{text}</span>'
        '<span style="white-space: nowrap;">page <span class="pageNumber"></span> of '
        '<span class="totalPages"></span></span></div>'
    )


def print_pdf(html: Path, pdf: Path, *, footer: str) -> None:
    """Print the page ``html`` to ``pdf`` with headless Chromium: A4, ``footer`` and the page
    number on every page, nothing cut at a page break.

    Raises :class:`BadInput` (one line) when no Chromium is found or the page is missing, and
    :class:`PrespecError` when the browser fails; ``pdf`` is then left as it was (written
    under a temporary name and renamed into place only when complete)."""
    page = Path(html)
    target = Path(pdf)
    if not page.is_file():
        raise BadInput(f"{page}: no page to print")
    if not target.parent.is_dir():
        raise BadInput(f"{target.parent}: no such folder to write {target.name} into")
    with Browser() as browser:
        browser.open(page)
        browser.add_style(PRINT_CSS)
        data = browser.pdf(footer=footer)
    if not data.startswith(b"%PDF-"):
        raise PrespecError(f"{page}: Chromium returned no PDF")
    write_atomically(target, data)


def write_atomically(target: Path, data: bytes) -> None:
    """Write ``data`` to ``target`` through a temporary file beside it, fsynced, then renamed."""
    fd, partial = tempfile.mkstemp(prefix=f".{target.name}.partial-", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(partial, 0o644)
        os.replace(partial, target)
    except BaseException:
        Path(partial).unlink(missing_ok=True)
        raise


def _above_4(fd: int) -> int:
    """The same pipe end on a descriptor above 4 (so that moving it onto 3 or 4 in the child
    never overwrites the other one), closed on exec unless passed on."""
    moved = fcntl.fcntl(fd, fcntl.F_DUPFD_CLOEXEC, 10)
    os.close(fd)
    return moved


class Browser:
    """A headless Chromium with one page, driven over the DevTools protocol on a pipe.

    ``with Browser(width=1000) as b: b.open(path); b.evaluate("...")``. Every call waits at
    most ``timeout`` seconds; a browser that does not answer, or dies, is a
    :class:`PrespecError`. The browser and its temporary profile are removed on exit."""

    def __init__(self, executable: Path | None = None, *, width: int = 1000,
                 height: int = 800, timeout: float = 60.0) -> None:
        self.executable = Path(executable or require_chromium())
        self.width, self.height, self.timeout = width, height, timeout
        self._profile: str | None = None
        self._process: subprocess.Popen[bytes] | None = None
        self._to: int | None = None
        self._from: int | None = None
        self._buffer = b""
        self._events: list[dict[str, Any]] = []
        self._next_id = 0
        self.session: str | None = None

    # -- the process ------------------------------------------------------------------------
    def __enter__(self) -> Self:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def start(self) -> None:
        self._profile = tempfile.mkdtemp(prefix="prespec-chromium-")
        browser_in, self._to = os.pipe()  # the browser reads fd 3
        self._from, browser_out = os.pipe()  # and writes fd 4
        browser_in, browser_out = _above_4(browser_in), _above_4(browser_out)

        args = [str(self.executable), "--headless", "--no-sandbox", "--disable-gpu",
                "--remote-debugging-pipe", f"--user-data-dir={self._profile}",
                "--no-first-run", "--no-default-browser-check", "--disable-extensions",
                "--disable-background-networking", "--disable-sync", "--hide-scrollbars",
                "--mute-audio", "--disable-dev-shm-usage", "--force-color-profile=srgb",
                f"--window-size={self.width},{self.height}", "about:blank"]
        # A small Python program puts the two pipe ends on the descriptors 3 and 4 the browser
        # reads and writes and becomes the browser (no code runs in this process's child
        # before exec, so this is safe beside threads).
        i, o = browser_in, browser_out
        onto = (f"import os, sys; os.dup2({i}, 3); os.dup2({o}, 4); os.close({i}); "
                f"os.close({o}); os.execv(sys.argv[1], sys.argv[1:])")
        try:
            self._process = subprocess.Popen(
                [sys.executable, "-I", "-S", "-c", onto, *args], stdin=subprocess.DEVNULL,
                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, pass_fds=(i, o))
        except OSError as exc:
            os.close(browser_in)
            os.close(browser_out)
            self.close()
            raise BadInput(f"{self.executable}: cannot start Chromium: {exc.strerror}") from exc
        os.close(browser_in)
        os.close(browser_out)
        try:
            target = self.call("Target.createTarget", {"url": "about:blank"}, in_page=False)
            attached = self.call("Target.attachToTarget",
                                 {"targetId": target["targetId"], "flatten": True},
                                 in_page=False)
            self.session = attached["sessionId"]
            self.call("Page.enable")
            self.call("Runtime.enable")
            self.resize(self.width, self.height)
        except BaseException:
            self.close()
            raise

    def close(self) -> None:
        process, self._process = self._process, None
        if process is not None:
            try:
                if process.poll() is None and self._to is not None:
                    self._send("Browser.close", {}, in_page=False)
                process.wait(timeout=10)
            except (OSError, subprocess.TimeoutExpired):
                process.kill()
                process.wait()
        for fd in (self._to, self._from):
            if fd is not None:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._to = self._from = None
        if self._profile is not None:
            shutil.rmtree(self._profile, ignore_errors=True)
            self._profile = None

    # -- the protocol -----------------------------------------------------------------------
    def _send(self, method: str, params: dict[str, Any], *, in_page: bool) -> int:
        self._next_id += 1
        message: dict[str, Any] = {"id": self._next_id, "method": method, "params": params}
        if in_page and self.session is not None:
            message["sessionId"] = self.session
        data = json.dumps(message).encode("utf-8") + b"\0"
        assert self._to is not None
        while data:
            written = os.write(self._to, data)
            data = data[written:]
        return self._next_id

    def _receive(self, deadline: float) -> dict[str, Any]:
        assert self._from is not None
        while b"\0" not in self._buffer:
            left = deadline - time.monotonic()
            if left <= 0:
                raise PrespecError(f"Chromium did not answer within {self.timeout:g} s")
            ready, _, _ = select.select([self._from], [], [], left)
            if not ready:
                continue
            chunk = os.read(self._from, 1 << 20)
            if not chunk:
                raise PrespecError("Chromium stopped before it answered")
            self._buffer += chunk
        message, _, self._buffer = self._buffer.partition(b"\0")
        value: dict[str, Any] = json.loads(message)
        return value

    def call(self, method: str, params: dict[str, Any] | None = None, *,
             in_page: bool = True) -> dict[str, Any]:
        """Send one command and return its result (events that arrive meanwhile are kept)."""
        wanted = self._send(method, params or {}, in_page=in_page)
        deadline = time.monotonic() + self.timeout
        while True:
            message = self._receive(deadline)
            if message.get("id") == wanted:
                if "error" in message:
                    error = message["error"]
                    raise PrespecError(f"Chromium refused {method}: "
                                       f"{' '.join(str(error.get('message', error)).split())}")
                result: dict[str, Any] = message.get("result", {})
                return result
            if "method" in message:
                self._events.append(message)

    def wait_for(self, event: str) -> dict[str, Any]:
        """The next event of that name of the page (one already received counts)."""
        deadline = time.monotonic() + self.timeout
        while True:
            for i, message in enumerate(self._events):
                if message.get("method") == event:
                    del self._events[i]
                    params: dict[str, Any] = message.get("params", {})
                    return params
            message = self._receive(deadline)
            if "method" in message:
                self._events.append(message)

    # -- the page ---------------------------------------------------------------------------
    def resize(self, width: int, height: int | None = None) -> None:
        """The page's viewport in CSS pixels."""
        self.width, self.height = width, height or self.height
        self.call("Emulation.setDeviceMetricsOverride",
                  {"width": self.width, "height": self.height, "deviceScaleFactor": 1,
                   "mobile": False})

    def open(self, page: Path) -> None:
        """Load a file and wait until it, its fonts and its images are ready."""
        self._events = [e for e in self._events if e.get("method") != "Page.loadEventFired"]
        navigated = self.call("Page.navigate", {"url": Path(page).resolve().as_uri()})
        if navigated.get("errorText"):
            raise PrespecError(f"{page}: Chromium could not open it: {navigated['errorText']}")
        self.wait_for("Page.loadEventFired")
        self.evaluate(_READY)

    def evaluate(self, expression: str) -> Any:
        """The value of a script run in the page (promises awaited; JSON values only)."""
        done = self.call("Runtime.evaluate", {"expression": expression, "awaitPromise": True,
                                              "returnByValue": True})
        if "exceptionDetails" in done:
            details = done["exceptionDetails"]
            text = details.get("exception", {}).get("description") or details.get("text")
            raise PrespecError(f"a script in the page failed: {' '.join(str(text).split())}")
        return done.get("result", {}).get("value")

    def add_style(self, css: str) -> None:
        """Add a style sheet to the open page."""
        self.evaluate("(() => { const s = document.createElement('style'); "
                      f"s.textContent = {json.dumps(css)}; "
                      "document.head.appendChild(s); return true; })()")

    def media(self, media: str) -> None:
        """Lay the page out for ``print`` or ``screen`` (``""``: as the browser would)."""
        self.call("Emulation.setEmulatedMedia", {"media": media})

    def screenshot(self, *, full_page: bool = True) -> bytes:
        """A PNG of the viewport, or of the whole page."""
        params: dict[str, Any] = {"format": "png"}
        if full_page:
            params["captureBeyondViewport"] = True
            size = self.evaluate("[document.documentElement.scrollWidth, "
                                 "document.documentElement.scrollHeight]")
            params["clip"] = {"x": 0, "y": 0, "width": size[0], "height": size[1], "scale": 1}
        shot = self.call("Page.captureScreenshot", params)
        return base64.b64decode(shot["data"])

    def pdf(self, *, footer: str) -> bytes:
        """The open page printed: A4, with ``footer`` and the page number on every page."""
        printed = self.call("Page.printToPDF", {
            **PAPER,
            "printBackground": True,
            "displayHeaderFooter": True,
            "headerTemplate": "<span></span>",
            "footerTemplate": footer_template(footer),
            "preferCSSPageSize": False,
        })
        return base64.b64decode(printed["data"])
