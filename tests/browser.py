"""Headless Chromium for the tests, driven over its DevTools protocol: open a page, read its text, press a key,
take a screenshot.

The browser runs in a process group of its own with a fresh profile, and with its background traffic turned off
(updates, sync, QUIC, first-run pages): a test machine may have no network at all. The protocol is JSON over a
websocket (the Chrome DevTools Protocol, ``Runtime.evaluate``, ``Page.captureScreenshot``, ``Input.dispatchKeyEvent``).
"""

from __future__ import annotations

import base64
import contextlib
import json
import os
import shutil
import signal
import subprocess
import urllib.request
from pathlib import Path
from typing import Any

import pytest
from fakes import wait_until

CHROMIUM = next((p for p in (shutil.which("chromium"), shutil.which("chromium-browser"), "/usr/bin/chromium")
                 if p and Path(p).exists()), None)
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-default-apps", "--mute-audio", "--disable-dev-shm-usage")


class Chromium:
    """One headless browser with one page; :meth:`close` ends its whole process group."""

    def __init__(self, folder: Path, width: int = 1280, height: int = 800) -> None:
        if CHROMIUM is None:
            pytest.skip("no chromium: apt-get install chromium (.ci/run does)")
        import websocket  # websocket-client, a test extra

        self.profile = folder / "profile"
        self.profile.mkdir(parents=True)
        self.log = folder / "chromium.log"
        with self.log.open("w") as log:
            self.process = subprocess.Popen(
                [CHROMIUM, *FLAGS, f"--user-data-dir={self.profile}", "--remote-debugging-port=0",
                 f"--window-size={width},{height}", "about:blank"],
                stdin=subprocess.DEVNULL, stdout=log, stderr=log, start_new_session=True)
        self._ids = 0
        try:
            port = self._debugging_port()
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=30) as answer:
                page = next(t for t in json.load(answer) if t["type"] == "page")
            # No Origin header: Chromium refuses debugging connections from web origins it was not told to allow.
            self.socket = websocket.create_connection(page["webSocketDebuggerUrl"], timeout=60, suppress_origin=True)
            self.call("Page.enable")
            self.call("Emulation.setDeviceMetricsOverride", width=width, height=height, deviceScaleFactor=1,
                      mobile=False)
            # A headless page never has the window's focus; a Textual app without it hides its footer's keys.
            self.call("Emulation.setFocusEmulationEnabled", enabled=True)
        except BaseException:
            self.close()
            raise

    def _debugging_port(self) -> int:
        """The port Chromium chose, from the file it writes into its profile once it listens."""
        active = self.profile / "DevToolsActivePort"

        def written() -> bool:
            if self.process.poll() is not None:
                raise RuntimeError(f"chromium ended: {self.log.read_text()[-800:]}")
            return active.exists() and bool(active.read_text().strip())

        wait_until(written, "chromium to open its debugging port", 90)
        return int(active.read_text().split()[0])

    def call(self, method: str, **params: Any) -> dict[str, Any]:
        """Send one protocol command and return its result (events that arrive meanwhile are passed over)."""
        self._ids += 1
        self.socket.send(json.dumps({"id": self._ids, "method": method, "params": params}))
        while True:
            answer = json.loads(self.socket.recv())
            if answer.get("id") == self._ids:
                if "error" in answer:
                    raise RuntimeError(f"{method}: {answer['error']}")
                return answer.get("result", {})

    def before_each_page(self, script: str) -> None:
        """Run ``script`` in every page this tab loads, before the page's own scripts."""
        self.call("Page.addScriptToEvaluateOnNewDocument", source=script)

    def open(self, url: str) -> None:
        self.call("Page.navigate", url=url)

    def evaluate(self, expression: str, wait: bool = False) -> Any:
        """The value of a JavaScript expression in the page (an exception in it is raised here); with ``wait``,
        the value the promise it makes comes to."""
        result = self.call("Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=wait)
        if "exceptionDetails" in result:
            raise RuntimeError(f"{expression!r}: {result['exceptionDetails'].get('text')}")
        return result["result"].get("value")

    def text(self) -> str:
        """The page's text as a person would copy it."""
        return self.evaluate("document.body ? document.body.innerText : ''") or ""

    def press(self, key: str, code: int) -> None:
        """A key pressed and released (``key`` as the DOM names it, ``code`` its Windows virtual key code)."""
        for kind in ("rawKeyDown", "keyUp"):
            self.call("Input.dispatchKeyEvent", type=kind, key=key, code=key, windowsVirtualKeyCode=code,
                      nativeVirtualKeyCode=code)
        if key == "Enter":
            self.call("Input.dispatchKeyEvent", type="char", text="\r", key=key, unmodifiedText="\r")

    def drawn(self) -> None:
        """Return once the page has drawn what it holds now (two animation frames)."""
        self.evaluate("new Promise(done => requestAnimationFrame(() => requestAnimationFrame(() => done(true))))",
                      wait=True)

    def screenshot(self, path: Path) -> Path:
        path.write_bytes(base64.b64decode(self.call("Page.captureScreenshot", format="png")["data"]))
        return path

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self.socket.close()
        stop_group(self.process)


def stop_group(process: subprocess.Popen, sig: int = signal.SIGTERM) -> None:
    """End a process started with ``start_new_session=True`` and everything it started: ``sig`` to its group,
    then SIGKILL to whatever is left after 30 s."""
    with contextlib.suppress(ProcessLookupError):
        os.killpg(process.pid, sig)
    with contextlib.suppress(subprocess.TimeoutExpired):
        process.wait(30)
    with contextlib.suppress(ProcessLookupError):
        os.killpg(process.pid, signal.SIGKILL)
    process.wait(30)
