"""A lab end to end: three simulated rigs on pseudo-terminals, three `railtap record --publish` processes, one
real broker, and the watcher under Textual's pilot. Each bench's brownout reaches the watcher; a recorder
killed with SIGKILL shows offline; a broker restart loses no event."""

from __future__ import annotations

import asyncio
import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest
from fakes import wait_until
from mqtt_broker import Broker

from logger.publish import parse_broker
from logger.watch import WatchApp
from logger.watch.feed import Feed

BENCHES = ("bench-1", "bench-2", "bench-3")
SPEED = "4"  # the demo bench's first brownout comes about 20 s into its device time


def _start(args: list[str], log: Path) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "logger", *args], stdout=log.open("w"), stderr=subprocess.STDOUT,
                            start_new_session=True)


def _end(process: subprocess.Popen, how: int = signal.SIGINT) -> None:
    if process.poll() is None:
        os.killpg(process.pid, how)
        process.wait(60)


@pytest.fixture
def lab(tmp_path: Path):
    broker = Broker(tmp_path / "broker")
    sims, recorders = [], {}
    try:
        for k, bench in enumerate(BENCHES, start=1):
            link = tmp_path / f"{bench}.tty"
            sims.append(_start(["sim", "--pty", "--scenario", "demo-bench", "--speed", SPEED, "--seed", str(k),
                                "--link", str(link), "--write-rig", str(tmp_path / "rig.toml")],
                               tmp_path / f"{bench}-sim.log"))
            wait_until(link.exists, f"the simulated rig of {bench}")
            recorders[bench] = _start(["record", "--port", str(link), "--rig", str(tmp_path / "rig.toml"), "--out",
                                       str(tmp_path / bench), "--publish", f"{broker.url}/lab", "--bench", bench,
                                       "--quiet"], tmp_path / f"{bench}-record.log")
        yield broker, recorders, tmp_path
    finally:
        for process in [*recorders.values(), *sims]:
            _end(process)
        broker.stop()


async def _until(pilot, ready: Callable[[], bool], what: str, deadline_s: float = 90.0) -> float:
    """Let the app run until ``ready``; returns how long it took (printed, never asserted)."""
    start = time.monotonic()
    while not ready():
        assert time.monotonic() - start < deadline_s, f"timed out waiting for {what}"
        await pilot.pause(0.1)
    return time.monotonic() - start


def _ended_ids(app: WatchApp, bench: str) -> set[int]:
    b = app.lab.benches.get(bench)
    return {e["id"] for e in b.events if e.get("phase") == "end"} if b else set()


def test_a_lab_of_three_benches_on_one_watcher(lab) -> None:
    broker, recorders, folder = lab
    address = parse_broker(f"{broker.url}/lab", {})
    app = WatchApp(Feed(address), "lab", address.url)
    figures: dict[str, float] = {}

    async def drive() -> None:
        async with app.run_test(size=(120, 30)) as pilot:
            def brownouts(bench: str) -> list[dict]:
                b = app.lab.benches.get(bench)
                return [e for e in b.events if e.get("kind") == "brownout"] if b else []

            await _until(pilot, lambda: all(brownouts(b) for b in BENCHES), "a brownout on every bench")
            rows = [r.name for r in app.lab.rows(time.time())]
            assert set(rows) == set(BENCHES)
            app.save_screenshot("lab-120x30.svg", str(folder))

            _end(recorders["bench-1"], signal.SIGKILL)
            figures["offline_after_s"] = await _until(
                pilot, lambda: app.lab.benches["bench-1"].word == "offline", "bench-1 shown offline")
            assert app.lab.rows(time.time())[0].name == "bench-1"  # needing attention: first

            before = {b: len(_ended_ids(app, b)) for b in BENCHES[1:]}
            broker.stop()
            await _until(pilot, lambda: "lost" in app.link_text or "cannot" in app.link_text, "the watcher to notice")
            for bench in BENCHES[1:]:  # a few seconds of events while the broker is away
                wait_until(lambda b=bench: _run_events(folder / b) > before[b], f"{bench} to log an event meanwhile")
            broker.start()
            back = time.time()
            for bench in BENCHES[1:]:
                await _until(pilot, lambda b=bench: app.lab.benches[b].heard_at > back, f"{bench} heard again")
                _end(recorders[bench])  # a clean stop: its parts sealed, its events all in _events.parquet
                run = _only_run(folder / bench)
                ids = set(pd.read_parquet(run / "_events.parquet")["id"])
                await _until(pilot, lambda b=bench, i=ids: _ended_ids(app, b) == i, f"every event of {bench}")
                account = json.loads((run / "_run.json").read_text())["publish"]
                assert account["dropped"]["events"] == 0 and account["connects"] >= 2, account
                await _until(pilot, lambda b=bench: app.lab.benches[b].word == "stopped", f"{bench} stopped")

    asyncio.run(drive())
    print(f"watcher figures: {figures}")


def _only_run(root: Path) -> Path:
    (run,) = [p for p in root.iterdir() if p.is_dir()]
    return run


def _run_events(root: Path) -> int:
    """Events a running recorder has ended so far: the rows of its event journal that can be read yet."""
    import pyarrow as pa

    total = 0
    for path in root.glob("*/_events.arrows"):
        try:
            with pa.ipc.open_stream(path) as reader:
                for batch in reader:
                    total += batch.num_rows
        except (pa.ArrowInvalid, OSError):  # the journal's last batch is being written: count what came before
            pass
    return total
