"""A minimal driver of headless Chromium through the DevTools protocol over a pipe (plain subprocess).

Chromium started with ``--remote-debugging-pipe`` reads protocol commands, JSON messages each
ended by a NUL byte, from file descriptor 3 and writes replies and events to file descriptor 4.
"""

from __future__ import annotations

import base64
import json
import os
import select
import shutil
import subprocess
import time


def chromium_path() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


class Browser:
    """One headless Chromium with one page; records console messages, exceptions and log errors."""

    def __init__(self, executable: str, profile_dir: str, width: int = 1100, height: int = 900):
        to_browser_r, self._to_browser = os.pipe()
        self._from_browser, from_browser_w = os.pipe()

        def wire():  # runs in the child: the protocol's fds are 3 (commands in) and 4 (replies out)
            a, b = os.dup(to_browser_r), os.dup(from_browser_w)  # copies first: the pipes may sit on 3 or 4
            os.dup2(a, 3)
            os.dup2(b, 4)

        self.proc = subprocess.Popen(
            [executable, "--headless", "--remote-debugging-pipe", "--no-sandbox", "--disable-gpu",
             "--no-first-run", "--no-default-browser-check", "--disable-extensions", "--mute-audio",
             f"--user-data-dir={profile_dir}", f"--window-size={width},{height}", "about:blank"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            preexec_fn=wire, pass_fds=(3, 4),  # kept open after wire() (fds are closed after it runs)
        )
        os.close(to_browser_r)
        os.close(from_browser_w)
        self._buffer = b""
        self._next_id = 0
        self.events: list[dict] = []
        self.session = None
        target = self.call("Target.createTarget", {"url": "about:blank"}, browser=True)["targetId"]
        self.session = self.call("Target.attachToTarget", {"targetId": target, "flatten": True},
                                 browser=True)["sessionId"]
        for domain in ("Page", "Runtime", "Log"):
            self.call(f"{domain}.enable")
        self.call("Emulation.setDeviceMetricsOverride",
                  {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False})

    # -------------------------------------------------------------- protocol
    def _read_message(self, deadline: float) -> dict:
        while b"\0" not in self._buffer:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("no message from Chromium in time")
            ready, _, _ = select.select([self._from_browser], [], [], left)
            if ready:
                chunk = os.read(self._from_browser, 1 << 20)
                if not chunk:
                    raise RuntimeError("Chromium closed the DevTools pipe")
                self._buffer += chunk
        raw, self._buffer = self._buffer.split(b"\0", 1)
        return json.loads(raw)

    def call(self, method: str, params: dict | None = None, *, browser: bool = False, timeout: float = 30.0):
        self._next_id += 1
        msg = {"id": self._next_id, "method": method, "params": params or {}}
        if self.session and not browser:
            msg["sessionId"] = self.session
        os.write(self._to_browser, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            if "method" in reply:
                self.events.append(reply)

    def wait_for(self, method: str, timeout: float = 30.0) -> dict:
        for i, ev in enumerate(self.events):
            if ev["method"] == method:
                return self.events.pop(i)
        deadline = time.monotonic() + timeout
        while True:
            ev = self._read_message(deadline)
            if ev.get("method") == method:
                return ev
            if "method" in ev:
                self.events.append(ev)

    # -------------------------------------------------------------- page actions
    def open(self, url: str) -> None:
        self.events = [e for e in self.events if e["method"] != "Page.loadEventFired"]
        self.call("Page.navigate", {"url": url})
        self.wait_for("Page.loadEventFired")

    def evaluate(self, expression: str, *, await_promise: bool = False):
        result = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True,
                                                "awaitPromise": await_promise})
        if "exceptionDetails" in result:
            raise RuntimeError(f"script error: {result['exceptionDetails']}")
        return result["result"].get("value")

    def press(self, key: str, code: int) -> None:
        for kind in ("keyDown", "keyUp"):
            self.call("Input.dispatchKeyEvent", {"type": kind, "key": key, "code": key,
                                                 "windowsVirtualKeyCode": code, "nativeVirtualKeyCode": code})

    def screenshot(self) -> bytes:
        return base64.b64decode(self.call("Page.captureScreenshot", {"format": "png"})["data"])

    def problems(self) -> list[str]:
        """Console errors and warnings, uncaught exceptions and browser log errors seen so far."""
        self.call("Runtime.evaluate", {"expression": "0"})  # flush pending events into self.events
        out = []
        for ev in self.events:
            p = ev.get("params", {})
            if ev["method"] == "Runtime.consoleAPICalled" and p.get("type") in ("error", "warning", "assert"):
                out.append(f"console.{p['type']}: {[a.get('value') for a in p.get('args', [])]}")
            elif ev["method"] == "Runtime.exceptionThrown":
                out.append(f"exception: {p.get('exceptionDetails', {}).get('text')}")
            elif ev["method"] == "Log.entryAdded" and p.get("entry", {}).get("level") in ("error", "warning"):
                out.append(f"log: {p['entry'].get('text')} {p['entry'].get('url', '')}")
        return out

    def close(self) -> None:
        try:
            self.call("Browser.close", browser=True, timeout=5.0)
        except (RuntimeError, TimeoutError, OSError):
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._to_browser)
        os.close(self._from_browser)
