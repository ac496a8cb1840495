"""The lab screen in a real browser: real recorders publish to a real broker, ``railtap watch --serve`` serves the
screen, and headless Chromium shows it; the test reads what the page says and keeps a screenshot.

textual-serve draws the terminal with xterm.js on a canvas, so the page's own text is empty. xterm.js has a
screen-reader mode that mirrors every row of the terminal into the page as text (its accessibility tree); the
test turns it on, as a person using a screen reader would, and reads ``document.body.innerText``. The page keeps
its terminal object to itself, so a script that runs before the page's own catches it as the page stores it
(``this.terminal = new Terminal(...)``). The rows it mirrors can be wider than the window (a trend's block
characters in the page's font), so the mode is off while a screenshot is taken: the picture is what a person sees.
"""

from __future__ import annotations

import shutil
import signal
import socket
import subprocess
import sys
from pathlib import Path

import pytest
from browser import Chromium, stop_group
from fakes import wait_until
from mqtt_broker import Broker, free_port

BENCHES = ("bench-east", "bench-west")
SPEED = 10
"""Simulated seconds per real one: demo-bench dips within its first minute, so a brownout shows in seconds."""
LOOK_AT = Path("/tmp/railtap-watch-browser.png")
"""A copy of the lab screen's screenshot, where a person can find it after a run."""
CATCH_TERMINAL = """
Object.defineProperty(Object.prototype, "terminal", {
  configurable: true,
  set(value) {
    Object.defineProperty(this, "terminal", {value, writable: true, configurable: true, enumerable: true});
    if (value && value.options) {
      value.options.screenReaderMode = true;
      window.railtapTerminal = value;
    }
  },
});
"""


def _railtap(*args: str, log: Path) -> subprocess.Popen:
    """``railtap ARGS`` in a process group of its own, its output in ``log``."""
    with log.open("w") as out:
        return subprocess.Popen([sys.executable, "-m", "logger", *args], stdin=subprocess.DEVNULL, stdout=out,
                                stderr=subprocess.STDOUT, start_new_session=True)


def _screenshot(browser: Chromium, path: Path) -> Path:
    """What the page shows a sighted person, without the screen reader's rows."""
    browser.evaluate("window.railtapTerminal.options.screenReaderMode = false")
    browser.drawn()
    try:
        return browser.screenshot(path)
    finally:
        browser.evaluate("window.railtapTerminal.options.screenReaderMode = true")


def _listening(port: int, process: subprocess.Popen, log: Path) -> bool:
    if process.poll() is not None:
        raise RuntimeError(f"railtap watch --serve ended: {log.read_text()[-800:]}")
    try:
        socket.create_connection(("127.0.0.1", port), timeout=1).close()
        return True
    except OSError:
        return False


@pytest.fixture
def broker(tmp_path: Path):
    b = Broker(tmp_path / "broker")
    yield b
    b.stop()


@pytest.fixture
def processes():
    """Every railtap process a test starts, with the signal that stops it; each ended with its group at the end,
    newest first (the served screen before the recorders, so none of them outlives the test)."""
    started: list[tuple[subprocess.Popen, int]] = []
    yield started
    for process, sig in reversed(started):
        stop_group(process, sig)


def test_the_lab_screen_in_a_browser_shows_every_bench_and_a_brownout(tmp_path: Path, broker: Broker,
                                                                       processes) -> None:
    browser = Chromium(tmp_path / "chromium")  # skips, naming the package, before any recorder starts
    try:
        for k, bench in enumerate(BENCHES):
            recorder = _railtap("record", "--sim", "--speed", str(SPEED), "--seed", str(11 + k), "--duration", "1h",
                                "--out", str(tmp_path / f"runs-{bench}"), "--quiet",
                                "--publish", f"{broker.url}/lab", "--bench", bench, log=tmp_path / f"{bench}.log")
            processes.append((recorder, signal.SIGINT))
        port = free_port()
        log = tmp_path / "serve.log"
        server = _railtap("watch", f"{broker.url}/lab", "--serve", "--port", str(port), log=log)
        processes.append((server, signal.SIGTERM))
        wait_until(lambda: _listening(port, server, log), "the lab screen to be served", 90)

        browser.before_each_page(CATCH_TERMINAL)
        browser.open(f"http://127.0.0.1:{port}/")
        wait_until(lambda: browser.evaluate("Boolean(window.railtapTerminal)"), "the page's terminal (if this never "
                   "comes, textual-serve's page no longer stores it as `terminal`)", 90)

        def lab_shown() -> bool:
            text = browser.text()
            return all(b in text for b in BENCHES) and "brownout" in text and "connected to" in text

        wait_until(lab_shown, "both benches and a brownout on the page", 180)
        # The page tells the app when it takes the keyboard's focus; Textual shows the footer's keys only then.
        browser.evaluate("window.railtapTerminal.focus()")
        wait_until(lambda: "state filter" in browser.text(), "the footer's keys once the page has the focus", 90)
        text = browser.text()
        assert f"{broker.url}/lab".removeprefix("mqtt://") in text and "recording" in text and "q quit" in text
        shot = _screenshot(browser, tmp_path / "lab.png")
        assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and shot.stat().st_size > 10_000
        shutil.copyfile(shot, LOOK_AT)

        # Enter opens the bench under the cursor: its trends and its event list, typed through the page.
        browser.press("Enter", 13)
        wait_until(lambda: "lowest/peak" in browser.text(), "a bench's own screen after Enter", 90)
        wait_until(lambda: "brownout" in browser.text().split("lowest/peak", 1)[1], "its events listed", 90)
        shutil.copyfile(_screenshot(browser, tmp_path / "bench.png"), LOOK_AT.with_name(LOOK_AT.stem + "-bench.png"))
    finally:
        browser.close()
    for process, _ in processes:
        assert process.poll() is None, f"{process.args[2:4]} ended early"
