"""Drive Debian's headless Chromium over its DevTools pipe (--remote-debugging-pipe: JSON messages separated by NUL
on file descriptors 3 and 4), with no dependency beyond the standard library."""
from __future__ import annotations

import base64
import json
import os
import select
import shutil
import subprocess
import tempfile
import time

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--disable-dev-shm-usage", "--remote-debugging-pipe"]


def find_chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


class Browser:
    def __init__(self, executable: str, timeout: float = 60.0):
        self.timeout = timeout
        self.profile = tempfile.mkdtemp(prefix="chromium-profile-")
        to_child_r, self._to_child_w = os.pipe()
        self._from_child_r, from_child_w = os.pipe()

        def fds():
            os.dup2(to_child_r, 100)
            os.dup2(from_child_w, 101)
            os.dup2(100, 3)
            os.dup2(101, 4)

        self.proc = subprocess.Popen([executable, *FLAGS, f"--user-data-dir={self.profile}", "about:blank"],
                                     stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                     preexec_fn=fds, pass_fds=(3, 4))
        os.close(to_child_r)
        os.close(from_child_w)
        self._buf = b""
        self._id = 0
        self.events: list[dict] = []

    def _read_message(self, deadline: float) -> dict:
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("no answer from chromium")
            ready, _, _ = select.select([self._from_child_r], [], [], left)
            if ready:
                chunk = os.read(self._from_child_r, 1 << 20)
                if not chunk:
                    raise RuntimeError("chromium closed the pipe")
                self._buf += chunk
        msg, self._buf = self._buf.split(b"\0", 1)
        return json.loads(msg)

    def send(self, method: str, params: dict | None = None, session: str | None = None) -> dict:
        self._id += 1
        msg = {"id": self._id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self._to_child_w, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + self.timeout
        while True:
            m = self._read_message(deadline)
            if m.get("id") == self._id:
                if "error" in m:
                    raise RuntimeError(f"{method}: {m['error']}")
                return m.get("result", {})
            self.events.append(m)

    def wait_event(self, method: str, session: str) -> dict:
        deadline = time.monotonic() + self.timeout
        for m in self.events:
            if m.get("method") == method and m.get("sessionId") == session:
                return m
        while True:
            m = self._read_message(deadline)
            self.events.append(m)
            if m.get("method") == method and m.get("sessionId") == session:
                return m

    def close(self) -> None:
        try:
            self.send("Browser.close")
        except Exception:
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
        shutil.rmtree(self.profile, ignore_errors=True)


def render(url: str, screenshot: str, width: int = 1100, height: int = 1400, js: str = "null") -> dict:
    """Open a page, wait for load, evaluate ``js``; return {"value": ..., "errors": [...]} and save a screenshot."""
    exe = find_chromium()
    if exe is None:
        raise FileNotFoundError("chromium")
    b = Browser(exe)
    try:
        target = b.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = b.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for m in ("Runtime.enable", "Log.enable", "Page.enable"):
            b.send(m, session=session)
        b.send("Emulation.setDeviceMetricsOverride", {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False},
               session=session)
        b.send("Page.navigate", {"url": url}, session=session)
        b.wait_event("Page.loadEventFired", session)
        value = b.send("Runtime.evaluate", {"expression": js, "returnByValue": True}, session=session)["result"].get("value")
        shot = b.send("Page.captureScreenshot", {"format": "png", "captureBeyondViewport": True}, session=session)
        with open(screenshot, "wb") as f:
            f.write(base64.b64decode(shot["data"]))
        errors = []
        for e in b.events:
            method, p = e.get("method"), e.get("params", {})
            if method == "Runtime.exceptionThrown":
                errors.append(p.get("exceptionDetails", {}).get("text", "exception"))
            elif method == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                errors.append(str(p.get("args")))
            elif method == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                errors.append(p["entry"].get("text", ""))
        return {"value": value, "errors": errors}
    finally:
        b.close()
