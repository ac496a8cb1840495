"""Sealing-stall benchmark: does a recorder keep taking samples while parts are sealed on a loaded machine?

A clean simulated link (no injected faults) at 10,000 frames per second is served, paced to the wall clock, on a
pseudo-terminal by this process; `railtap record --port` reads it in a process of its own with a new part every
``--part-minutes`` of device time (5: 3 M rows, about an hour of a two-channel 1 kHz run), so parts are sealed
(journal to Parquet, then the rollup) while a CPU hog runs on every core. The pty server drops bytes when the
recorder stops reading for longer than its buffer holds, which shows up as frames lost in the run's own link
counters: the figure printed first, to be 0. Also printed: frames recorded (all of them: seconds x rate) and parts,
and the recorder queue's headroom in seconds of data.

Run with ``.venv/bin/python tests/bench/bench_seal_stall.py [--seconds 660] [--part-minutes 5] [--hogs N]``.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import os
import queue
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from logger.ingest.pipeline import Settings
from logger.ingest.recorder import QUEUE_BATCHES
from logger.sim.device import LinkFaults, SimDevice
from logger.sim.simple import RIG_TOML
from logger.sources.pty_server import serve_on_pty

RATE_HZ = 10_000
BACKLOG_S = 2.0
"""Seconds of data the served device holds while the recorder does not read, before it drops them: long enough
that the server's own late wake-ups on a loaded machine are not counted, short beside the recorder's queue."""


def _hog(stop: multiprocessing.synchronize.Event) -> None:
    while not stop.is_set():
        sum(range(10_000))


def serve(stop: threading.Event) -> str:
    """Serve the clean 10 kHz link on a new pty; its path."""
    ready: queue.Queue[str] = queue.Queue()
    device = SimDevice(rate_hz=RATE_HZ, max_rate_hz=RATE_HZ, seed=7, faults=LinkFaults())
    threading.Thread(target=serve_on_pty, args=(device, 1.0, stop, ready.put),
                     kwargs={"backlog_limit": BACKLOG_S * RATE_HZ * 40}, daemon=True).start()
    return ready.get(timeout=30)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=660.0, help="device seconds recorded")
    parser.add_argument("--part-minutes", type=float, default=5.0, help="device minutes per part")
    parser.add_argument("--hogs", type=int, default=os.cpu_count() or 1, help="busy processes, one per core")
    args = parser.parse_args()
    stop_hogs = multiprocessing.Event()
    hogs = [multiprocessing.Process(target=_hog, args=(stop_hogs,), daemon=True) for _ in range(args.hogs)]
    for hog in hogs:
        hog.start()
    stop = threading.Event()
    try:
        with tempfile.TemporaryDirectory() as tmp:
            rig = Path(tmp) / "rig.toml"
            rig.write_text(RIG_TOML, encoding="utf-8")
            port = serve(stop)
            done = subprocess.run([sys.executable, "-m", "logger", "record", "--port", port, "--rig", str(rig),
                                   "--duration", f"{args.seconds:g}", "--part-minutes", f"{args.part_minutes:g}",
                                   "--out", str(Path(tmp) / "runs"), "--quiet"],
                                  capture_output=True, text=True, check=False)
            stop.set()
            time.sleep(0.5)
            runs = sorted((Path(tmp) / "runs").iterdir())
            meta = json.loads((runs[-1] / "_run.json").read_text()) if runs else {}
    finally:
        stop_hogs.set()
        for hog in hogs:
            hog.join(5)
    if done.returncode:
        raise SystemExit(f"record ended with {done.returncode}: {done.stderr.strip()[-500:]}")
    link = meta.get("link", {})
    print(f"{os.cpu_count()} cores, {args.hogs} CPU hogs, load {os.getloadavg()[0]:.1f}; "
          f"{RATE_HZ} frames/s for {args.seconds:g} s, a part sealed every {args.part_minutes:g} min")
    print(f"frames lost by the host: {link.get('lost', '?')} (goal 0)")
    print(f"frames recorded:         {meta.get('rows')} in {len(meta.get('parts', []))} parts")
    settings = Settings()
    quiet = max(settings.batch_s, settings.quiet_batch_s)  # record --quiet: nobody watches, so the larger batches
    peak = meta.get("recorder_queue", {}).get("peak_batches")
    print(f"recorder queue at most:  {peak} batches (the recorder was at most about {peak * quiet:.1f} s behind)")
    print(f"recorder queue headroom: {QUEUE_BATCHES} batches of {quiet:g} s = {QUEUE_BATCHES * quiet:g} s of data "
          f"({QUEUE_BATCHES * settings.batch_s:g} s while a screen watches) before ingest stops reading the port")
    print(done.stdout.strip())


if __name__ == "__main__":
    main()
