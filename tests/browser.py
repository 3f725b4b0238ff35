"""A small driver for Debian's headless Chromium, for the real-browser tests.

Chromium is started with ``--remote-debugging-pipe`` and spoken to over the
DevTools protocol on file descriptors 3 (commands in) and 4 (replies out),
NUL-separated JSON, with only the standard library. The network is made
unreachable: every request goes to a proxy that does not exist
(``--proxy-server=127.0.0.1:9``, loopback included), so anything a page tries to
fetch from outside fails, and is recorded.

Use :func:`require_chromium` (skips without Chromium, fails when ``CI=true``),
then::

    with Chromium() as browser:
        page = browser.new_page()
        page.goto(path)
        page.evaluate("document.title")
        page.screenshot(artifact_path("map.png"))

A :class:`Page` records console errors, uncaught exceptions, log errors,
JavaScript dialogs (``alert`` and friends, which are dismissed) and every
network request the page made.

Screenshots and PDFs go to :func:`artifacts_dir`: ``$GEOSOIL_TEST_ARTIFACTS``
or ``test-artifacts/`` at the repository root (git-ignored).
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import queue
import shutil
import subprocess
import tempfile
import threading
import time
from pathlib import Path
from typing import Any

import pytest

__all__ = [
    "CHROMIUM_FLAGS",
    "Chromium",
    "DevToolsError",
    "Page",
    "artifact_path",
    "artifacts_dir",
    "find_chromium",
    "require_chromium",
]

REPO_ROOT = Path(__file__).resolve().parent.parent

#: Flags for a quiet, offline, throw-away headless browser.
CHROMIUM_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--no-default-browser-check",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-extensions",
    "--disable-default-apps",
    "--disable-dev-shm-usage",
    "--mute-audio",
    "--hide-scrollbars",
    "--proxy-server=127.0.0.1:9",
    "--proxy-bypass-list=<-loopback>",
    "--allow-file-access-from-files",
    "--window-size=1280,900",
    "--remote-debugging-pipe",
)


def find_chromium() -> str | None:
    """Path of Debian's Chromium, or None."""
    for candidate in (shutil.which("chromium"), "/usr/bin/chromium"):
        if candidate and os.access(candidate, os.X_OK):
            return candidate
    return None


def require_chromium() -> str:
    """Chromium's path; skip the test without it (fail instead when ``CI=true``)."""
    path = find_chromium()
    if path is None:
        message = "headless Chromium not found (apt-get install chromium)"
        if os.environ.get("CI") == "true":
            pytest.fail(message + "; CI=true, so browser tests must run", pytrace=False)
        pytest.skip(message)
    return path


def artifacts_dir() -> Path:
    """Where tests keep screenshots and PDFs (created if needed)."""
    folder = Path(os.environ.get("GEOSOIL_TEST_ARTIFACTS") or REPO_ROOT / "test-artifacts")
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def artifact_path(name: str) -> Path:
    """A file name inside :func:`artifacts_dir`."""
    return artifacts_dir() / name


class DevToolsError(RuntimeError):
    """Chromium answered a command with an error, or did not answer in time."""


def _high_fd(fd: int) -> int:
    """A close-on-exec duplicate of ``fd`` numbered 10 or more (so 3 and 4 stay free)."""
    new = fcntl.fcntl(fd, fcntl.F_DUPFD_CLOEXEC, 10)
    os.close(fd)
    return new


class Chromium:
    """One headless Chromium process driven over the DevTools pipe."""

    def __init__(self, executable: str | None = None, *, timeout: float = 30.0) -> None:
        self.executable = executable or require_chromium()
        self.timeout = timeout
        self._profile = tempfile.mkdtemp(prefix="geosoil-chromium-")
        self._next_id = 0
        self._messages: queue.Queue[dict[str, Any] | None] = queue.Queue()
        self._pages: dict[str, Page] = {}
        self._lock = threading.Lock()
        to_child_r, to_child_w = (_high_fd(fd) for fd in os.pipe())
        from_child_r, from_child_w = (_high_fd(fd) for fd in os.pipe())

        # Hand the pipe ends to Chromium as fds 3 and 4 (what --remote-debugging-pipe reads and
        # writes) with a bash redirection, so no Python code runs between fork and exec.
        wire = f'exec "$0" "$@" 3<&{to_child_r} 4>&{from_child_w} {to_child_r}<&- {from_child_w}>&-'
        self._log = open(Path(self._profile) / "chromium.log", "wb")  # noqa: SIM115
        self.process = subprocess.Popen(
            [
                shutil.which("bash") or "/bin/bash",
                "-c",
                wire,
                self.executable,
                *CHROMIUM_FLAGS,
                f"--user-data-dir={self._profile}",
                "about:blank",
            ],
            stdin=subprocess.DEVNULL,
            stdout=self._log,
            stderr=subprocess.STDOUT,
            pass_fds=(to_child_r, from_child_w),
        )
        os.close(to_child_r)
        os.close(from_child_w)
        self._out = os.fdopen(to_child_w, "wb", buffering=0)
        self._in = from_child_r
        self._reader = threading.Thread(target=self._read_loop, daemon=True)
        self._reader.start()
        self.call("Target.setDiscoverTargets", {"discover": False})

    # -- plumbing -------------------------------------------------------------------------

    def _read_loop(self) -> None:
        buffer = b""
        while True:
            try:
                chunk = os.read(self._in, 1 << 20)
            except OSError:
                break
            if not chunk:
                break
            buffer += chunk
            while b"\0" in buffer:
                raw, buffer = buffer.split(b"\0", 1)
                try:
                    self._messages.put(json.loads(raw))
                except json.JSONDecodeError:
                    continue
        self._messages.put(None)

    def _send(self, method: str, params: dict[str, Any] | None, session_id: str | None) -> int:
        with self._lock:
            self._next_id += 1
            msg_id = self._next_id
        message: dict[str, Any] = {"id": msg_id, "method": method, "params": params or {}}
        if session_id:
            message["sessionId"] = session_id
        self._out.write(json.dumps(message).encode() + b"\0")
        return msg_id

    def _dispatch(self, message: dict[str, Any]) -> None:
        page = self._pages.get(message.get("sessionId", ""))
        if page is not None and "method" in message:
            page._on_event(message["method"], message.get("params", {}))

    def _pump(self, until: Any, timeout: float, what: str) -> dict[str, Any]:
        """Handle messages until ``until(message)`` is true; return that message."""
        deadline = time.monotonic() + timeout
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                raise DevToolsError(f"no answer from Chromium within {timeout:.0f} s ({what})")
            try:
                message = self._messages.get(timeout=min(left, 0.5))
            except queue.Empty:
                if self.process.poll() is not None:
                    raise DevToolsError(f"Chromium exited ({what})") from None
                continue
            if message is None:
                raise DevToolsError(f"Chromium closed the DevTools pipe ({what})")
            self._dispatch(message)
            if until(message):
                return message

    def call(
        self,
        method: str,
        params: dict[str, Any] | None = None,
        *,
        session_id: str | None = None,
        timeout: float | None = None,
    ) -> dict[str, Any]:
        """Send one DevTools command and wait for its result."""
        msg_id = self._send(method, params, session_id)
        reply = self._pump(lambda m: m.get("id") == msg_id, timeout or self.timeout, method)
        if "error" in reply:
            raise DevToolsError(f"{method}: {reply['error']}")
        return reply.get("result", {})

    def drain(self, seconds: float) -> None:
        """Handle events for ``seconds`` (lets late console messages arrive)."""
        deadline = time.monotonic() + seconds
        while (left := deadline - time.monotonic()) > 0:
            try:
                message = self._messages.get(timeout=left)
            except queue.Empty:
                return
            if message is None:
                return
            self._dispatch(message)

    # -- pages ------------------------------------------------------------------------------

    def new_page(self, *, width: int = 1280, height: int = 900) -> Page:
        """A fresh tab with its console, dialogs and network watched."""
        target = self.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = self.call("Target.attachToTarget", {"targetId": target, "flatten": True})[
            "sessionId"
        ]
        page = Page(self, target, session)
        self._pages[session] = page
        for method in ("Page.enable", "Runtime.enable", "Log.enable", "Network.enable"):
            self.call(method, session_id=session)
        self.call(
            "Emulation.setDeviceMetricsOverride",
            {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False},
            session_id=session,
        )
        return page

    def close(self) -> None:
        """End the browser and remove its throw-away profile."""
        try:
            if self.process.poll() is None:
                try:
                    self._send("Browser.close", None, None)
                    self.process.wait(timeout=5)
                except (OSError, subprocess.TimeoutExpired):
                    self.process.kill()
                    self.process.wait(timeout=5)
        finally:
            for closer in (self._out.close, lambda: os.close(self._in), self._log.close):
                try:
                    closer()
                except OSError:
                    pass
            shutil.rmtree(self._profile, ignore_errors=True)

    def __enter__(self) -> Chromium:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class Page:
    """One tab. ``console_errors``, ``dialogs`` and ``requests`` fill as events arrive."""

    def __init__(self, browser: Chromium, target_id: str, session_id: str) -> None:
        self.browser = browser
        self.target_id = target_id
        self.session_id = session_id
        self.console_errors: list[str] = []
        self.dialogs: list[str] = []
        self.requests: list[str] = []
        self._loaded = False

    def _on_event(self, method: str, params: dict[str, Any]) -> None:
        if method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
            text = " ".join(
                str(a.get("value", a.get("description", ""))) for a in params.get("args", [])
            )
            self.console_errors.append(f"console.{params['type']}: {text}")
        elif method == "Runtime.exceptionThrown":
            details = params.get("exceptionDetails", {})
            exc = details.get("exception", {})
            self.console_errors.append(
                f"exception: {exc.get('description') or details.get('text')}"
            )
        elif method == "Log.entryAdded" and params.get("entry", {}).get("level") == "error":
            entry = params["entry"]
            self.console_errors.append(f"log: {entry.get('text')} {entry.get('url', '')}".strip())
        elif method == "Page.javascriptDialogOpening":
            self.dialogs.append(f"{params.get('type')}: {params.get('message')}")
            self.browser._send("Page.handleJavaScriptDialog", {"accept": True}, self.session_id)
        elif method == "Network.requestWillBeSent":
            self.requests.append(params.get("request", {}).get("url", ""))
        elif method == "Page.loadEventFired":
            self._loaded = True

    def call(self, method: str, params: dict[str, Any] | None = None, **kw: Any) -> dict[str, Any]:
        """A DevTools command for this tab."""
        return self.browser.call(method, params, session_id=self.session_id, **kw)

    def goto(self, target: str | os.PathLike[str], *, timeout: float = 20.0) -> None:
        """Open a file or URL and wait for its load event and two animation frames."""
        url = (
            target
            if isinstance(target, str) and "://" in target
            else Path(target).resolve().as_uri()
        )
        self._loaded = False
        result = self.call("Page.navigate", {"url": url})
        if result.get("errorText"):
            raise DevToolsError(f"could not open {url}: {result['errorText']}")
        if not self._loaded:
            self.browser._pump(
                lambda m: (
                    m.get("sessionId") == self.session_id
                    and m.get("method") == "Page.loadEventFired"
                ),
                timeout,
                f"loading {url}",
            )
        self._loaded = True
        self.evaluate("new Promise(r => requestAnimationFrame(() => requestAnimationFrame(r)))")
        self.browser.drain(0.1)

    def evaluate(self, expression: str, *, timeout: float | None = None) -> Any:
        """Run JavaScript in the page; return its (JSON-able) value. Promises are awaited."""
        result = self.call(
            "Runtime.evaluate",
            {"expression": expression, "returnByValue": True, "awaitPromise": True},
            timeout=timeout,
        )
        if "exceptionDetails" in result:
            details = result["exceptionDetails"]
            text = details.get("exception", {}).get("description") or details.get("text")
            raise DevToolsError(f"JavaScript error: {text}")
        return result.get("result", {}).get("value")

    def screenshot(self, path: str | os.PathLike[str], *, full_page: bool = False) -> Path:
        """Save a PNG screenshot; return its path."""
        params: dict[str, Any] = {"format": "png"}
        if full_page:
            params["captureBeyondViewport"] = True
            size = self.evaluate(
                "[document.documentElement.scrollWidth, document.documentElement.scrollHeight]"
            )
            params["clip"] = {
                "x": 0,
                "y": 0,
                "width": size[0],
                "height": min(size[1], 16000),
                "scale": 1,
            }
        data = self.call("Page.captureScreenshot", params)["data"]
        out = Path(path)
        out.write_bytes(base64.b64decode(data))
        return out

    def pdf(self, path: str | os.PathLike[str]) -> bytes:
        """Print the page to PDF as a person would (print CSS, backgrounds); save and return it."""
        data = self.call(
            "Page.printToPDF",
            {"printBackground": True, "preferCSSPageSize": True},
            timeout=60,
        )["data"]
        pdf = base64.b64decode(data)
        Path(path).write_bytes(pdf)
        return pdf

    def close(self) -> None:
        """Close the tab."""
        self.browser._pages.pop(self.session_id, None)
        self.browser.call("Target.closeTarget", {"targetId": self.target_id})
