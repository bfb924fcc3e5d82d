"""Drive a real headless Chromium over the Chrome DevTools Protocol: open a page, collect its console errors and
outside requests, take a screenshot. Shared by the report's and the design run's browser checks.

The browser is driven on a pipe (``--remote-debugging-pipe``: the browser reads commands on fd 3 and writes replies
and events on fd 4, each a JSON message ending in a NUL byte), so no network port and no extra package are needed.
"""

from __future__ import annotations

import base64
import contextlib
import fcntl
import json
import os
import select
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

CHROMIUM = shutil.which("chromium")
SKIP_REASON = ("chromium is not installed (Debian: apt-get install chromium; .ci/run installs it when apt-get is "
               "available)")

FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-extensions", "--hide-scrollbars", "--window-size=1100,900")
TIMEOUT = 60.0  # s for any one reply: a cold start of Chromium on a loaded 2-core machine takes a few seconds
LOCAL_SCHEMES = ("file:", "data:", "about:")
# Runs in the child: put the pipe ends on fds 3 and 4 (os.dup2 makes them inheritable), then become Chromium.
PLACE_PIPES = "import os, sys; os.dup2(int(sys.argv[1]), 3); os.dup2(int(sys.argv[2]), 4); " \
              "os.execv(sys.argv[3], sys.argv[3:])"


class Browser:
    """A headless Chromium and a DevTools session on one page."""

    def __init__(self, profile: Path, log: Path) -> None:
        to_browser_r, to_browser_w = os.pipe()
        from_browser_r, from_browser_w = os.pipe()
        # Move the child's ends above fd 9 so placing them on fds 3 and 4 can never overwrite one with the other.
        child_in = fcntl.fcntl(to_browser_r, fcntl.F_DUPFD, 10)
        child_out = fcntl.fcntl(from_browser_w, fcntl.F_DUPFD, 10)
        for fd in (to_browser_r, from_browser_w):
            os.close(fd)
        command = [CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "--remote-debugging-pipe", "about:blank"]
        self.log = log
        with open(log, "wb") as err:
            self.process = subprocess.Popen(
                [sys.executable, "-c", PLACE_PIPES, str(child_in), str(child_out), *command],
                stdin=subprocess.DEVNULL, stdout=err, stderr=err, pass_fds=(child_in, child_out),
                start_new_session=True)
        os.close(child_in)
        os.close(child_out)
        self.write, self.read = to_browser_w, from_browser_r
        self.buffer = b""
        self.next_id = 0
        self.events: list[dict] = []
        self.session = ""
        target = self.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        self.session = self.call("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            self.call(f"{domain}.enable")

    def _message(self, deadline: float) -> dict:
        while b"\0" not in self.buffer:
            left = deadline - time.monotonic()
            ready, _, _ = select.select([self.read], [], [], max(left, 0.0))
            if not ready:
                raise TimeoutError(f"Chromium did not answer; its log: {self.log.read_text(errors='replace')[-800:]}")
            chunk = os.read(self.read, 1 << 20)
            if not chunk:
                raise ConnectionError(f"Chromium closed the pipe; log: {self.log.read_text(errors='replace')[-800:]}")
            self.buffer += chunk
        raw, self.buffer = self.buffer.split(b"\0", 1)
        return json.loads(raw)

    def call(self, method: str, params: dict | None = None) -> dict:
        self.next_id += 1
        message = {"id": self.next_id, "method": method, "params": params or {}}
        if self.session and not method.startswith(("Target.", "Browser.")):
            message["sessionId"] = self.session
        os.write(self.write, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + TIMEOUT
        while True:
            reply = self._message(deadline)
            if reply.get("id") == self.next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply["result"]
            self.events.append(reply)

    def open(self, path: Path) -> dict:
        """Load a page and return what it logged, requested and looks like."""
        self.events.clear()
        self.call("Page.navigate", {"url": path.resolve().as_uri()})
        deadline = time.monotonic() + TIMEOUT
        while not any(e.get("method") == "Page.loadEventFired" for e in self.events):
            self.events.append(self._message(deadline))
        # Let late console messages and requests arrive: a short settle after the load event.
        settle = time.monotonic() + 0.5
        while True:
            try:
                self.events.append(self._message(settle))
            except TimeoutError:
                break
        checks = json.loads(self.call("Runtime.evaluate", {"returnByValue": True, "expression": """
            JSON.stringify({
              images: document.images.length,
              loaded: Array.from(document.images).filter(i => i.complete && i.naturalWidth > 0).length,
              status: (document.querySelector('.verdict .status') || {}).textContent || '',
              sections: document.querySelectorAll('main > section').length,
              width: document.documentElement.scrollWidth, viewport: window.innerWidth,
              height: document.documentElement.scrollHeight})"""})["result"]["value"])
        errors = [e["params"]["args"][0].get("value", "") for e in self.events
                  if e.get("method") == "Runtime.consoleAPICalled" and e["params"]["type"] in ("error", "assert")]
        errors += [e["params"]["exceptionDetails"]["text"] for e in self.events
                   if e.get("method") == "Runtime.exceptionThrown"]
        errors += [e["params"]["entry"]["text"] for e in self.events
                   if e.get("method") == "Log.entryAdded" and e["params"]["entry"]["level"] == "error"]
        requests = [e["params"]["request"]["url"] for e in self.events
                    if e.get("method") == "Network.requestWillBeSent"]
        return {"checks": checks, "errors": errors,
                "outside": [u for u in requests if not u.startswith(LOCAL_SCHEMES)]}

    def screenshot(self, path: Path) -> None:
        size = self.call("Page.getLayoutMetrics")["cssContentSize"]
        shot = self.call("Page.captureScreenshot", {"format": "png", "captureBeyondViewport": True, "clip": {
            "x": 0, "y": 0, "width": size["width"], "height": size["height"], "scale": 1}})
        path.write_bytes(base64.b64decode(shot["data"]))

    def close(self) -> None:
        with contextlib.suppress(ConnectionError, TimeoutError, RuntimeError, OSError):
            self.call("Browser.close")  # a browser already gone is fine: it is stopped below either way
        try:
            self.process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            os.killpg(self.process.pid, signal.SIGKILL)  # the group this test started, and only it
            self.process.wait(timeout=10)
        os.close(self.write)
        os.close(self.read)
