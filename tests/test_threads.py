"""One writer per piece of state: other threads read snapshots and send commands while the ingest thread runs a
fast stream; nothing they do may break it, and every command takes effect once."""

from __future__ import annotations

import sys
import threading
from pathlib import Path

from logger.ingest import Pipeline, Settings
from logger.sim.device import SimDevice
from logger.sim.simple import simple_rig
from logger.sources.simulated import SimSource

MARKS = 400


def test_screen_rate_snapshots_and_a_flood_of_commands_against_a_fast_stream(tmp_path: Path) -> None:
    """50,000 sample sets a second of simulated time, as fast as the ingest thread takes them, with a thread
    taking snapshots without pause and another sending marks, resets and zeros; Python switches threads every
    microsecond meanwhile, so any unguarded sharing would show. The run is stopped once every command is sent."""
    source = SimSource(SimDevice(rate_hz=50_000.0, max_rate_hz=50_000, seed=5), speed=0)
    pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path, live_seconds=1.0))
    errors: list[BaseException] = []
    done = threading.Event()

    def watch() -> None:
        try:
            while not done.is_set():
                snap = pipeline.snapshot()
                _ = (snap.events[:10], snap.link.rate_hz, snap.minimum, snap.charge_ah, snap.recording, snap.active)
        except BaseException as exc:  # the test reports whatever broke
            errors.append(exc)

    def command() -> None:
        try:
            for k in range(MARKS):
                pipeline.mark(f"note {k}")
                pipeline.reset_minmax()
                if k % 50 == 0:
                    pipeline.zero("out_a")
        except BaseException as exc:
            errors.append(exc)

    old = sys.getswitchinterval()
    sys.setswitchinterval(1e-6)
    try:
        pipeline.start()
        threads = [threading.Thread(target=watch), threading.Thread(target=command)]
        for t in threads:
            t.start()
        threads[1].join(120)
        pipeline.stop("test done")
        done.set()
        threads[0].join(120)
    finally:
        sys.setswitchinterval(old)
        done.set()
    assert errors == [] and pipeline.error is None
    marks = [e for e in pipeline.events.recent(10_000) if e.kind == "mark" and e.detail.startswith("note ")]
    assert sorted(int(e.detail.split()[1]) for e in marks) == list(range(MARKS))  # each once, none lost
    assert pipeline.final is not None and pipeline.final["status"] == "complete"
