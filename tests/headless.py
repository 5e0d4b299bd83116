"""A headless Chromium driven over the DevTools protocol on a pipe, with the standard library only.

Chromium started with ``--remote-debugging-pipe`` reads protocol commands from its file
descriptor 3 and writes answers and events to descriptor 4, one JSON message per NUL-terminated
record (Chrome DevTools Protocol, "remote-debugging-pipe").  No WebSocket, no package: a test can
open a page, listen to its console and its network requests, evaluate an expression in it and
take a screenshot.

`find` names the browser; the tests skip (outside CI) or fail (``CI=true``) without one.
"""

from __future__ import annotations

import base64
import json
import os
import shutil
import subprocess
import tempfile
import time
from pathlib import Path
from typing import Any

NAMES = ("chromium", "chromium-browser")
FLAGS = (
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--disable-extensions", "--disable-default-apps", "--mute-audio", "--hide-scrollbars",
    "--remote-debugging-pipe",
)


def find() -> str | None:
    """The Chromium executable: ``$CHROMIUM`` if set, else the first of `NAMES` on the PATH."""
    named = os.environ.get("CHROMIUM")
    if named:
        return named
    for name in NAMES:
        found = shutil.which(name)
        if found:
            return found
    return None


class Browser:
    """One headless Chromium; use as a context manager (the process and its folder go away)."""

    def __init__(self, executable: str, *, width: int = 1200, height: int = 900) -> None:
        self.width, self.height = width, height
        self._folder = tempfile.TemporaryDirectory(prefix="directional-chromium-")
        self._log = open(Path(self._folder.name) / "stderr.txt", "w+b")  # noqa: SIM115
        commands_read, self._commands = os.pipe()
        self._answers, answers_write = os.pipe()
        # bash (dash takes no descriptor above 9) puts the two pipe ends on 3 and 4 for Chromium
        script = f'exec "$0" "$@" 3<&{commands_read} 4>&{answers_write}'
        self._process = subprocess.Popen(
            ["bash", "-c", script, executable, *FLAGS, f"--user-data-dir={self._folder.name}",
             f"--window-size={width},{height}", "about:blank"],
            pass_fds=(commands_read, answers_write), stdin=subprocess.DEVNULL,
            stdout=subprocess.DEVNULL, stderr=self._log,
        )
        os.close(commands_read)
        os.close(answers_write)
        self._buffer = b""
        self._next = 0
        self.events: list[dict[str, Any]] = []
        self._session: str | None = None

    def __enter__(self) -> Browser:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        try:
            self.send("Browser.close", session=False, timeout=10)
        except Exception:  # already gone: the process is ended below all the same
            pass
        try:
            self._process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self._process.kill()
            self._process.wait(timeout=10)
        self._log.close()
        for fd in (self._commands, self._answers):
            try:
                os.close(fd)
            except OSError:
                pass
        self._folder.cleanup()

    def log(self) -> str:
        """The end of what Chromium wrote on its standard error (its own diagnostics)."""
        self._log.flush()
        self._log.seek(0)
        lines = self._log.read().decode(errors="replace").splitlines()
        return "\n".join(line for line in lines if "dbus" not in line)[-3000:]

    # ------------------------------------------------------------------ the protocol

    def send(self, method: str, params: dict | None = None, *, session: bool = True,
             timeout: float = 60) -> dict[str, Any]:
        """Send one command; return its result (events that arrive meanwhile are kept)."""
        self._next += 1
        message: dict[str, Any] = {"id": self._next, "method": method, "params": params or {}}
        if session and self._session is not None:
            message["sessionId"] = self._session
        try:
            os.write(self._commands, json.dumps(message).encode() + b"\0")
        except BrokenPipeError:
            raise ConnectionError(f"Chromium has gone ({self._process.poll()}): {self.log()}") from None
        deadline = time.monotonic() + timeout
        while True:
            answer = self._receive(deadline)
            if answer.get("id") == self._next:
                if "error" in answer:
                    raise RuntimeError(f"{method}: {answer['error']}")
                return answer.get("result", {})
            self.events.append(answer)

    def wait_for(self, method: str, timeout: float = 60) -> dict[str, Any]:
        """The first event ``method`` not yet consumed, waiting for it if need be."""
        deadline = time.monotonic() + timeout
        for event in self.events:
            if event.get("method") == method and not event.get("_seen"):
                event["_seen"] = True
                return event
        while True:
            event = self._receive(deadline)
            self.events.append(event)
            if event.get("method") == method:
                event["_seen"] = True
                return event

    def _receive(self, deadline: float) -> dict[str, Any]:
        import select

        while b"\0" not in self._buffer:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("Chromium did not answer in time")
            ready, _, _ = select.select([self._answers], [], [], left)
            if ready:
                chunk = os.read(self._answers, 1 << 20)
                if not chunk:
                    raise ConnectionError(f"Chromium closed its pipe: {self.log()}")
                self._buffer += chunk
        record, _, self._buffer = self._buffer.partition(b"\0")
        return json.loads(record)

    # ------------------------------------------------------------------ a page

    def open(self, path: Path, *, scripts: bool = True) -> None:
        """Load the file at ``path`` in a new tab, listening to its console and network."""
        target = self.send("Target.createTarget", {"url": "about:blank"}, session=False)
        attached = self.send("Target.attachToTarget",
                             {"targetId": target["targetId"], "flatten": True}, session=False)
        self._session = attached["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            self.send(f"{domain}.enable")
        self.send("Emulation.setDeviceMetricsOverride",
                  {"width": self.width, "height": self.height, "deviceScaleFactor": 1,
                   "mobile": False})
        if not scripts:
            self.send("Emulation.setScriptExecutionDisabled", {"value": True})
        self.send("Page.navigate", {"url": path.resolve().as_uri()})
        self.wait_for("Page.loadEventFired")

    def evaluate(self, expression: str) -> Any:
        """The value of a JavaScript ``expression`` in the page (promises awaited)."""
        result = self.send("Runtime.evaluate", {"expression": expression, "returnByValue": True,
                                                "awaitPromise": True})
        if "exceptionDetails" in result:
            raise RuntimeError(f"evaluation failed: {result['exceptionDetails']}")
        return result["result"].get("value")

    def screenshot(self) -> bytes:
        """A PNG of the first screen (the viewport)."""
        return base64.b64decode(self.send("Page.captureScreenshot", {"format": "png"})["data"])

    def errors(self) -> list[str]:
        """Console errors, uncaught exceptions and log entries of level error, as texts."""
        found = []
        for event in self.events:
            method, params = event.get("method"), event.get("params", {})
            if method == "Runtime.exceptionThrown":
                found.append(json.dumps(params.get("exceptionDetails", {}))[:500])
            elif method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
                found.append(json.dumps(params.get("args", []))[:500])
            elif method == "Log.entryAdded" and params.get("entry", {}).get("level") == "error":
                found.append(params["entry"].get("text", ""))
        return found

    def requests(self) -> list[str]:
        """Every URL the page asked for."""
        return [e["params"]["request"]["url"] for e in self.events
                if e.get("method") == "Network.requestWillBeSent"]
