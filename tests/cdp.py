"""A small Chrome DevTools Protocol client over ``--remote-debugging-pipe`` (standard library
only): the browser reads commands on its fd 3 and writes replies and events on fd 4, each
message JSON ended by a NUL byte. Used by tests/test_browser.py and docs/screenshot.py to open a
report in headless Chromium, watch its console and network, and take screenshots."""

from __future__ import annotations

import base64
import contextlib
import json
import os
import shutil
import subprocess
import tempfile
import time
from pathlib import Path
from typing import Any

CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "chrome")

FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-default-apps",
    "--disable-extensions",
    "--no-first-run",
    "--no-default-browser-check",
    "--hide-scrollbars",
    "--remote-debugging-pipe",
)


def find_browser() -> str | None:
    for name in CANDIDATES:
        path = shutil.which(name)
        if path:
            return path
    return None


class Browser:
    """One headless browser with one page; ``events`` collects every event received."""

    def __init__(self, executable: str, width: int = 1280, height: int = 900) -> None:
        self.profile = tempfile.mkdtemp(prefix="churnlife-browser-")
        to_child_r, self._to_child = os.pipe()
        self._from_child, from_child_w = os.pipe()

        def fds() -> None:  # in the child: commands on fd 3, replies on fd 4
            # (runs before the child closes other descriptors; pass_fds keeps 3 and 4 open)
            os.dup2(to_child_r, 3)
            os.dup2(from_child_w, 4)

        self.proc = subprocess.Popen(
            [
                executable,
                *FLAGS,
                f"--user-data-dir={self.profile}",
                f"--window-size={width},{height}",
                "about:blank",
            ],
            stdin=subprocess.DEVNULL,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            pass_fds=(3, 4),
            preexec_fn=fds,
        )
        os.close(to_child_r)
        os.close(from_child_w)
        self._buffer = b""
        self._next_id = 0
        self.events: list[dict[str, Any]] = []
        self.session: str | None = None
        target = self.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        self.session = self.call("Target.attachToTarget", {"targetId": target, "flatten": True})[
            "sessionId"
        ]
        self.call(
            "Emulation.setDeviceMetricsOverride",
            {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False},
        )

    # -- protocol ---------------------------------------------------------------------------------

    def _read_message(self, deadline: float) -> dict[str, Any]:
        while b"\0" not in self._buffer:
            if time.monotonic() > deadline:
                raise TimeoutError("no message from the browser in time")
            import select

            ready, _, _ = select.select([self._from_child], [], [], 0.5)
            if ready:
                chunk = os.read(self._from_child, 1 << 20)
                if not chunk:
                    raise RuntimeError("the browser closed its debugging pipe")
                self._buffer += chunk
        raw, self._buffer = self._buffer.split(b"\0", 1)
        return json.loads(raw)

    def call(self, method: str, params: dict | None = None, timeout: float = 60) -> dict:
        """Send one command (to the page once attached) and wait for its reply."""
        self._next_id += 1
        message: dict[str, Any] = {"id": self._next_id, "method": method, "params": params or {}}
        if self.session is not None:
            message["sessionId"] = self.session
        os.write(self._to_child, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            if "method" in reply:
                self.events.append(reply)

    def pump(self, seconds: float) -> None:
        """Collect events for ``seconds``."""
        deadline = time.monotonic() + seconds
        try:
            while True:
                message = self._read_message(deadline)
                if "method" in message:
                    self.events.append(message)
        except TimeoutError:
            pass

    def wait_for(self, method: str, timeout: float = 60) -> dict:
        deadline = time.monotonic() + timeout
        for e in self.events:
            if e["method"] == method:
                return e
        while True:
            message = self._read_message(deadline)
            if "method" in message:
                self.events.append(message)
                if message["method"] == method:
                    return message

    # -- page -------------------------------------------------------------------------------------

    def open(self, url: str) -> None:
        """Enable console, log and network events, then load ``url`` and wait for its load."""
        for domain in ("Page", "Runtime", "Log", "Network"):
            self.call(f"{domain}.enable")
        self.call("Page.navigate", {"url": url})
        self.wait_for("Page.loadEventFired")

    def evaluate(self, expression: str) -> Any:
        result = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True})
        if "exceptionDetails" in result:
            raise RuntimeError(f"page script failed: {result['exceptionDetails']}")
        return result["result"].get("value")

    def wait_until(self, expression: str, timeout: float = 60) -> Any:
        """Evaluate ``expression`` until it is truthy (events keep being collected meanwhile)."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            value = self.evaluate(expression)
            if value:
                return value
            self.pump(0.25)
        raise TimeoutError(f"page never satisfied: {expression}")

    def screenshot(self, path: Path, full_page: bool = False) -> bytes:
        params: dict[str, Any] = {"format": "png"}
        if full_page:
            params["captureBeyondViewport"] = True
            size = self.call("Page.getLayoutMetrics")["cssContentSize"]
            params["clip"] = {
                "x": 0,
                "y": 0,
                "width": size["width"],
                "height": size["height"],
                "scale": 1,
            }
        data = base64.b64decode(self.call("Page.captureScreenshot", params)["data"])
        Path(path).write_bytes(data)
        return data

    # -- what the page did ------------------------------------------------------------------------

    def console_errors(self) -> list[str]:
        out = []
        for e in self.events:
            p = e.get("params", {})
            if e["method"] == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append(" ".join(str(a.get("value", a.get("description"))) for a in p["args"]))
            elif e["method"] == "Runtime.exceptionThrown":
                out.append(
                    str(
                        p["exceptionDetails"].get("exception", {}).get("description")
                        or p["exceptionDetails"].get("text")
                    )
                )
            elif e["method"] == "Log.entryAdded" and p["entry"]["level"] == "error":
                out.append(p["entry"]["text"])
        return out

    def requests(self) -> list[str]:
        """URLs of every request the page started (the document itself included)."""
        return [
            e["params"]["request"]["url"]
            for e in self.events
            if e["method"] == "Network.requestWillBeSent"
        ]

    def close(self) -> None:
        try:
            self.session = None
            self.call("Browser.close", timeout=10)
        except (RuntimeError, TimeoutError, OSError):
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        for fd in (self._to_child, self._from_child):
            with contextlib.suppress(OSError):
                os.close(fd)
        shutil.rmtree(self.profile, ignore_errors=True)

    def __enter__(self) -> Browser:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
