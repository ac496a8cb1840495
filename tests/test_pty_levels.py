"""The DC dip and interruption test levels through a real pseudo-terminal, paced and unpaced: the recorded events
keep their device-clock timing whether the bytes come at the device's pace or all at once."""

from __future__ import annotations

import os
import threading
import time
import tty
from pathlib import Path

import pandas as pd
import pytest
from devicestream import Device, Dip, play

from logger.ingest import Pipeline, Settings
from logger.sim.simple import simple_rig
from logger.sources.serial_port import SerialSource

# IEC 61000-4-29 DC immunity test levels, from memory: dips to 70 % and 40 % of nominal and interruptions
# (to 0 %), lasting 1 ms to 1 s; one of each here, of lengths within that range.
SCRIPT = (Dip(0.50, 0.300, 70.0), Dip(1.20, 0.100, 40.0), Dip(1.80, 0.010, 0.0), Dip(2.30, 0.001, 0.0))
KINDS = ["brownout", "brownout", "dropout", "dropout"]


def _serve(lines: tuple[bytes, ...], sent_s, paced: bool, master: int, done: threading.Event) -> None:
    """Write the device's lines to the pty: at their own times (paced: the simulated device keeps its clock,
    and stops at once when the test ends) or as fast as the pty takes them."""
    start = time.monotonic()
    for line, at in zip(lines, sent_s, strict=True):
        if paced and done.wait(max(0.0, start + at - time.monotonic())):
            return
        view = memoryview(line)
        while view:
            view = view[os.write(master, view):]


@pytest.mark.parametrize("paced", [True, False], ids=["paced", "unpaced"])
def test_iec_levels_through_a_pty(tmp_path: Path, paced: bool) -> None:
    device = Device(rate_hz=1000.0, duration_s=3.0, drift_ppm=-25.0, jitter_us=4, script=SCRIPT, seed=9)
    stream = play(device)
    master, slave = os.openpty()
    tty.setraw(slave)
    done = threading.Event()
    writer = threading.Thread(target=_serve, args=(stream.lines, stream.sent_s, paced, master, done), daemon=True)
    try:
        pipeline = Pipeline(SerialSource(os.ttyname(slave), 921600), simple_rig(),
                            Settings(record_root=tmp_path, duration_s=2.9))
        pipeline.start()
        writer.start()
        assert pipeline.wait(60), "the run did not reach its duration"
    finally:
        done.set()
        if writer.is_alive():
            writer.join(30)
        os.close(master)
        os.close(slave)
    assert pipeline.error is None, pipeline.error
    (run,) = tmp_path.iterdir()
    events = pd.read_parquet(run / "_events.parquet")
    dips = events[events.kind.isin(["brownout", "dropout"])].sort_values("device_start_us")
    assert list(dips.kind) == KINDS
    samples = pd.read_parquet(run, columns=["device_us", "utc"])
    first = samples["device_us"].iloc[0]
    assert samples["utc"].is_monotonic_increasing and samples["utc"].is_unique
    period_s = 1e-3 + 2 * 4e-6  # one sample, plus the firmware's timestamp jitter at each edge
    for (_, got), want in zip(dips.iterrows(), stream.truth.events, strict=True):
        assert got.duration_s == pytest.approx(want.duration_s, abs=period_s)
        assert (got.device_start_us - first) / 1e6 == pytest.approx(want.start_s, abs=period_s)
