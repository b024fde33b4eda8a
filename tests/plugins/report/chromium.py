"""Open a report in headless Chromium and check it as a reader's browser would: every image decoded, nothing
logged as an error, and a screenshot of the first screenfuls.

Speaks the DevTools protocol over ``--remote-debugging-pipe`` (JSON messages ended by NUL bytes on file
descriptors 3 and 4 of the browser), so it needs no package beyond the standard library. Used by the browser
test and by the gallery script (docs/make_gallery.py), never by vzero itself: it lives with the tests, not in
the installed package.
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import select
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

BROWSERS = ("chromium", "chromium-browser", "google-chrome", "chrome")

IMAGE_CHECK = """(() => {
  const imgs = Array.from(document.images);
  return JSON.stringify({
    total: imgs.length,
    loaded: imgs.filter(i => i.complete && i.naturalWidth > 0).length,
    broken: imgs.filter(i => !(i.complete && i.naturalWidth > 0)).map(i => i.alt || i.src.slice(0, 40)),
    title: document.title,
    height: document.documentElement.scrollHeight,
    external: Array.from(document.querySelectorAll('[src],[href]'))
      .map(e => e.getAttribute('src') || e.getAttribute('href'))
      .filter(u => /^(https?:)?\\/\\//.test(u)),
  });
})()"""


@dataclass
class PageCheck:
    """What the browser saw: image counts, errors logged to the console, the page height (CSS px)."""

    total_images: int
    loaded_images: int
    broken: list[str]
    errors: list[str]
    title: str
    height: int
    external: list[str] = field(default_factory=list)
    screenshot: bytes = b""
    result: Any = None


def find_browser() -> str | None:
    """Path of a Chromium-family browser on PATH, or None."""
    for name in BROWSERS:
        path = shutil.which(name)
        if path:
            return path
    return None


class _Pipe:
    """A DevTools session over the browser's pipe file descriptors."""

    def __init__(self, to_browser: int, from_browser: int) -> None:
        self.w, self.r = to_browser, from_browser
        self.buf = b""
        self.next_id = 0
        self.events: list[dict[str, Any]] = []

    def send(self, method: str, params: dict[str, Any] | None = None, session: str | None = None,
             timeout: float = 30.0) -> dict[str, Any]:
        self.next_id += 1
        msg: dict[str, Any] = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self.w, json.dumps(msg).encode() + b"\0")
        while True:
            reply = self._read(timeout)
            if reply.get("id") == self.next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_event(self, method: str, timeout: float = 30.0) -> dict[str, Any]:
        for i, ev in enumerate(self.events):
            if ev.get("method") == method:
                return self.events.pop(i)
        deadline = time.monotonic() + timeout
        while True:
            ev = self._read(max(deadline - time.monotonic(), 0.01))
            if ev.get("method") == method:
                return ev
            self.events.append(ev)

    def _read(self, timeout: float) -> dict[str, Any]:
        deadline = time.monotonic() + timeout
        while b"\0" not in self.buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("the browser did not answer in time")
            ready, _, _ = select.select([self.r], [], [], left)
            if ready:
                chunk = os.read(self.r, 1 << 20)
                if not chunk:
                    raise RuntimeError("the browser closed the DevTools pipe (did it crash?)")
                self.buf += chunk
        raw, self.buf = self.buf.split(b"\0", 1)
        return json.loads(raw)


def _high(fd: int) -> int:
    """Duplicate ``fd`` to a number >= 10 (so moving the pipe ends to 3 and 4 cannot clash) and close it."""
    new = fcntl.fcntl(fd, fcntl.F_DUPFD, 10)
    os.close(fd)
    return new


def check_page(html: Path, browser: str, width: int = 1280, height: int = 1800, timeout: float = 60.0,
               script: str = "") -> PageCheck:
    """Load ``html`` (a file) in headless ``browser``; return what it saw and a PNG screenshot of the top
    ``width`` x ``height`` CSS pixels. ``script``, when given, is a JavaScript expression run after the
    page has loaded (a promise is awaited) before the screenshot, as a reader's clicks and keys would; its
    value (JSON-serialisable) is in :attr:`PageCheck.result` and the screenshot shows the view it leaves."""
    cmd_r, cmd_w = (_high(fd) for fd in os.pipe())
    out_r, out_w = (_high(fd) for fd in os.pipe())
    profile = tempfile.mkdtemp(prefix="vzero-chromium-")
    args = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run", "--no-default-browser-check",
            "--disable-extensions", "--hide-scrollbars", "--mute-audio", f"--user-data-dir={profile}",
            "--remote-debugging-pipe", f"--window-size={width},{height}", "about:blank"]
    # a tiny launcher puts the pipe ends on descriptors 3 and 4, where the browser expects them
    launcher = ("import os, sys; os.dup2(int(sys.argv[1]), 3); os.dup2(int(sys.argv[2]), 4); "
                "os.execv(sys.argv[3], sys.argv[3:])")
    proc = subprocess.Popen([sys.executable, "-c", launcher, str(cmd_r), str(out_w), *args],
                            pass_fds=(cmd_r, out_w), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    os.close(cmd_r)
    os.close(out_w)
    pipe = _Pipe(cmd_w, out_r)
    try:
        target = pipe.send("Target.createTarget", {"url": "about:blank"}, timeout=timeout)["targetId"]
        session = pipe.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log"):
            pipe.send(f"{domain}.enable", session=session)
        pipe.send("Emulation.setDeviceMetricsOverride",
                  {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False}, session=session)
        pipe.send("Page.navigate", {"url": html.resolve().as_uri()}, session=session)
        pipe.wait_event("Page.loadEventFired", timeout=timeout)
        result = pipe.send("Runtime.evaluate", {"expression": IMAGE_CHECK, "returnByValue": True,
                                                "awaitPromise": False}, session=session)
        seen = json.loads(result["result"]["value"])
        value: Any = None
        if script:
            done = pipe.send("Runtime.evaluate", {"expression": script, "returnByValue": True, "awaitPromise": True},
                             session=session, timeout=timeout)
            if "exceptionDetails" in done:
                raise RuntimeError(f"the page script failed: {done['exceptionDetails']}")
            value = done.get("result", {}).get("value")
        shot = pipe.send("Page.captureScreenshot", {"format": "png"}, session=session, timeout=timeout)
        errors = []
        for ev in pipe.events:
            m, p = ev.get("method"), ev.get("params", {})
            if m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                errors.append(" ".join(str(a.get("value", a.get("description", ""))) for a in p.get("args", [])))
            elif m == "Runtime.exceptionThrown":
                errors.append(str(p.get("exceptionDetails", {}).get("text", "exception")))
            elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                errors.append(str(p["entry"].get("text", "")))
        try:
            pipe.send("Browser.close", timeout=5)
        except (RuntimeError, TimeoutError):
            pass
    finally:
        os.close(cmd_w)
        os.close(out_r)
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        shutil.rmtree(profile, ignore_errors=True)
    return PageCheck(seen["total"], seen["loaded"], seen["broken"], errors, seen["title"], int(seen["height"]),
                     seen["external"], base64.b64decode(shot["data"]), value)
