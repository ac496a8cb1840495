"""End to end: simulated rig or a real pseudo-terminal, through the pipeline, into a run folder read back
with pandas; link loss, device restarts, a full disk and a kill -9 in the middle of a run."""

from __future__ import annotations

import contextlib
import errno
import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from fakes import WrongBaud, journal_rows, wait_until

from logger.ingest import Pipeline, Settings
from logger.rig import parse_rig
from logger.sim.device import LinkFaults, SimDevice
from logger.sim.simple import RIG_TOML, simple_rig
from logger.sources.pty_server import serve_on_pty
from logger.sources.serial_port import SerialSource
from logger.sources.simulated import SimSource
from logger.store import find_unfinished, recover_run

RIG = simple_rig()
ROOT = Path(__file__).resolve().parents[1]


def _run(source, tmp_path: Path, **settings) -> Pipeline:
    pipeline = Pipeline(source, RIG, Settings(record_root=tmp_path, **settings))
    pipeline.start()
    assert pipeline.wait(60), "pipeline did not finish"
    return pipeline


def _only_run(root: Path) -> Path:
    (run,) = [p for p in root.iterdir() if p.is_dir()]
    return run


def test_simulated_run_is_complete_and_calibrated(tmp_path: Path) -> None:
    device = SimDevice(seed=3, faults=LinkFaults(drop_line=0.001, corrupt_byte=0.001, drop_byte=0.001))
    p = _run(SimSource(device, speed=0, duration_s=90), tmp_path)
    assert p.error is None and p.final["status"] == "complete"
    df = pd.read_parquet(_only_run(tmp_path))
    truth = device.truth
    counters = p.decoder.counters
    assert counters.rejected == truth.lines_damaged
    assert counters.frames == truth.frames_delivered
    assert len(df) == truth.frames_delivered  # every intact line recorded, no damaged one
    assert df["seq"].is_unique and df["utc"].is_monotonic_increasing
    assert p.timebase.counters.lost == int(df["seq"].iloc[-1] - df["seq"].iloc[0] + 1 - len(df))
    # Calibrated value from counts: 12-bit LSB = 3.3 V / 4096 (Vref / 2^N; Analog Devices MT-001),
    # times the demo rig's divider of 11.
    lsb_v = 3.3 / 4096
    np.testing.assert_allclose(df["out_v"], df["out_v_counts"] * lsb_v * 11.0, rtol=1e-6)
    np.testing.assert_allclose(df["out_a"], df["out_a_counts"] * lsb_v / (0.01 * 50.0), rtol=1e-6)
    true_t = (df["device_us"] - df["device_us"].iloc[0]).to_numpy() / 1e6
    assert abs(p.timebase.drift_ppm - device.drift_ppm) < 5.0
    assert true_t[-1] == pytest.approx(90.0, abs=0.01)


def test_same_run_whatever_the_read_size(tmp_path: Path) -> None:
    frames = []
    for i, slice_s in enumerate((0.003, 0.05)):
        source = SimSource(SimDevice(seed=5), speed=1000.0, duration_s=5, slice_s=slice_s, start_utc=1.8e9)
        _run(source, tmp_path / str(i))
        frames.append(pd.read_parquet(_only_run(tmp_path / str(i))).drop(columns="utc"))
    pd.testing.assert_frame_equal(frames[0], frames[1])


def test_unplug_becomes_a_link_event_and_the_run_carries_on(tmp_path: Path) -> None:
    source = SimSource(SimDevice(seed=2), speed=20.0, duration_s=12)
    source.unplug(at_s=4.0, down_s=2.0, reset=True)
    p = _run(source, tmp_path, retry_s=0.05)
    assert p.error is None and p.reconnects == 1
    run = _only_run(tmp_path)
    events = pd.read_parquet(run / "_events.parquet")
    assert set(events["kind"]) >= {"link_lost", "device_reset"}
    samples = pd.read_parquet(run)
    assert samples["seq"].is_monotonic_increasing and samples["device_us"].is_monotonic_increasing
    assert samples["utc"].max() - samples["utc"].min() > pd.Timedelta(seconds=10)


def test_through_a_real_pseudo_terminal(tmp_path: Path) -> None:
    stop = threading.Event()
    ready: list[str] = []
    server = threading.Thread(target=serve_on_pty, kwargs={
        "speed": 1.0, "stop_event": stop, "on_ready": ready.append, "seed": 4}, daemon=True)
    server.start()
    for _ in range(100):
        if ready:
            break
        time.sleep(0.02)
    try:
        p = _run(SerialSource(ready[0], 921600), tmp_path, duration_s=2.0)
    finally:
        stop.set()
        server.join(5)
    assert p.error is None and p.header is not None
    df = pd.read_parquet(_only_run(tmp_path))
    assert len(df) == 2000 and (np.diff(df["seq"]) == 1).all()
    assert df["out_v"].between(9.0, 13.0).mean() > 0.95


def test_disk_full_stops_with_one_line_and_keeps_the_journal(tmp_path: Path, monkeypatch) -> None:
    import logger.store.journal as journal

    real_write = journal.write_all
    calls = {"n": 0}

    def failing(fd: int, data: bytes) -> None:
        calls["n"] += 1
        if calls["n"] > 4:
            raise OSError(errno.ENOSPC, "No space left on device")
        real_write(fd, data)

    monkeypatch.setattr(journal, "write_all", failing)
    # An hour of simulated data as fast as it comes: the run must stop at the failure, not read on to the end.
    p = _run(SimSource(SimDevice(seed=1), speed=0, duration_s=3600), tmp_path)
    assert p.error is not None and "\n" not in p.error
    assert "disk full" in p.error or "space" in p.error
    assert ("are safe on disk" in p.error or "no samples had reached the disk" in p.error)
    assert p.stop_reason.startswith("failed: ")
    assert p.decoder.counters.frames < 600_000  # of 3.6 million: it stopped within moments of the failure
    run = _only_run(tmp_path)
    assert list(run.glob("_journal-*.arrows")), "journal must be kept for recovery"


def test_missing_header_falls_back_to_rig_settings(tmp_path: Path) -> None:
    rig = parse_rig(RIG_TOML.replace("# adc_bits = 12", "adc_bits = 12").replace(
        "# vref_mv = 3300", "vref_mv = 3300"), "demo")
    device = SimDevice(seed=1)
    device._pending.clear()  # a firmware that never sends a header
    device.header_period_us = float("inf")
    device.write = lambda data: None  # ignores requests too
    pipeline = Pipeline(SimSource(device, speed=10.0, duration_s=6), rig,
                        Settings(record_root=tmp_path, header_wait_s=0.3))
    pipeline.start()
    assert pipeline.wait(30)
    assert pipeline.header is not None and pipeline.header.reason == "rig"
    assert len(pd.read_parquet(_only_run(tmp_path))) == device.truth.frames_delivered


def test_kill_9_loses_at_most_about_a_second(tmp_path: Path) -> None:
    stop = threading.Event()
    ready: list[str] = []
    device = SimDevice(seed=9)
    server = threading.Thread(target=serve_on_pty, kwargs={
        "device": device, "speed": 1.0, "stop_event": stop, "on_ready": ready.append}, daemon=True)
    server.start()
    while not ready:
        time.sleep(0.01)
    out = tmp_path / "runs"
    proc = subprocess.Popen(
        [sys.executable, "-m", "logger", "record", "--port", ready[0], "--rig", str(_rig_file(tmp_path)),
         "--out", str(out), "--quiet"],
        cwd=ROOT, stderr=subprocess.PIPE,
    )
    try:
        wait_until(lambda: journal_rows(out) >= 3000, "3000 rows in the journal", 120.0)  # a busy machine is slow
        durable = journal_rows(out)
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(10)
    finally:
        stop.set()
        server.join(5)
    (run,) = find_unfinished(out)
    meta = recover_run(run)
    assert meta["status"] == "recovered"
    df = pd.read_parquet(run)
    assert (np.diff(df["seq"]) == 1).all()  # nothing invented, nothing twice
    # Nothing the journal held before the kill is lost. How fresh the journal is (flushed twice a second) is
    # a matter of time, so of a bench, not of this test.
    assert len(df) >= durable
    assert json.loads((run / "_run.json").read_text())["rows"] == len(df)


def _rig_file(tmp_path: Path) -> Path:
    path = tmp_path / "rig.toml"
    path.write_text(RIG_TOML)
    return path


def test_device_that_never_sends_a_header_gets_a_plain_message(tmp_path: Path) -> None:
    device = SimDevice(seed=1)
    device._pending.clear()  # a firmware that never sends a header
    device.header_period_us = float("inf")
    device.write = lambda data: None
    pipeline = Pipeline(SimSource(device, speed=10.0, duration_s=None), RIG,
                        Settings(record_root=tmp_path, header_wait_s=0.3))
    pipeline.start()
    wait_until(lambda: "no header from the device" in pipeline.snapshot().message, "the no-header message")
    pipeline.stop()
    assert pipeline.error is not None and "never a header line" in pipeline.error and "\n" not in pipeline.error
    assert not list(tmp_path.iterdir())


def test_socket_url_link_drops_and_comes_back(tmp_path: Path) -> None:
    """A pyserial URL other than a device path (socket://), whose peer hangs up mid-run and answers again."""
    import socket

    device = SimDevice(seed=6)
    listener = socket.create_server(("127.0.0.1", 0))
    port = listener.getsockname()[1]

    def serve() -> None:
        sim_s = 0.0
        for stretch_s in (1.5, 1.5):  # two connections: the first is cut after 1.5 s of data
            conn, _ = listener.accept()
            with conn:
                end = sim_s + stretch_s
                conn.settimeout(0.02)
                while sim_s < end:
                    sim_s += 0.02
                    with contextlib.suppress(TimeoutError):
                        device.write(conn.recv(256))  # host commands: pyserial drops what came before open
                    try:
                        conn.sendall(device.generate(sim_s))
                    except OSError:  # the test has stopped reading
                        return
            device.generate(sim_s + 0.5)  # half a second sent to nobody while unplugged
            sim_s += 0.5
        listener.close()

    server = threading.Thread(target=serve, daemon=True)
    server.start()
    source = SerialSource(f"socket://127.0.0.1:{port}", 921600)
    pipeline = Pipeline(source, RIG, Settings(record_root=tmp_path, retry_s=0.1))
    pipeline.start()
    wait_until(lambda: pipeline.snapshot().link.lost >= 400, "the gap across the unplug to be counted")
    final = pipeline.stop()
    server.join(5)
    assert final is not None and pipeline.reconnects == 1, pipeline.error
    run = _only_run(tmp_path)
    events = pd.read_parquet(run / "_events.parquet")
    assert "link_lost" in set(events["kind"])
    samples = pd.read_parquet(run)
    assert samples["seq"].is_unique and samples["seq"].is_monotonic_increasing
    assert pipeline.timebase.counters.lost >= 400  # the half second nobody heard, counted from the sequence gap


def test_recording_stops_and_starts_again_into_a_new_run_folder(tmp_path: Path) -> None:
    """Watch first, then record, stop (sealed while ingest goes on), record again: two complete runs whose
    samples follow each other without overlap, and ingest never stopped in between."""
    source = SimSource(SimDevice(seed=3), speed=20.0, duration_s=None)
    pipeline = Pipeline(source, RIG, Settings(record_root=tmp_path, record_at_start=False))
    pipeline.start()

    def wait_for(ready, timeout_s: float = 20.0) -> None:
        deadline = time.monotonic() + timeout_s
        while not ready():
            assert time.monotonic() < deadline, "timed out"
            time.sleep(0.02)

    wait_for(lambda: pipeline.snapshot().latest is not None)
    assert not pipeline.recording and pipeline.recorder is None and not list(tmp_path.iterdir())
    for on in (True, False, True):
        frames = pipeline.snapshot().link.frames
        pipeline.set_recording(on)
        assert pipeline.recording is on
        if on:  # the switch takes effect between batches: wait on the run's own rows, not on frames read
            wait_for(lambda: (r := pipeline.snapshot().recording) is not None and r.rows > 2000)
        else:
            wait_for(lambda start=frames: pipeline.snapshot().link.frames > start + 2000)
    pipeline.stop()
    assert pipeline.error is None
    assert len(pipeline.sealed) == 2 and pipeline.final == pipeline.sealed[-1]
    runs = sorted(Path(f["folder"]) for f in pipeline.sealed)
    first, second = (pd.read_parquet(run, columns=["seq", "utc"]) for run in runs)
    assert len(first) > 2000 and len(second) > 2000
    assert first["utc"].max() < second["utc"].min()
    notes = pd.read_parquet(runs[0] / "_events.parquet")["detail"].tolist()
    assert any(n.startswith("recording started") for n in notes)
    for run in runs:
        assert json.loads((run / "_run.json").read_text())["status"] == "complete"


def test_wrong_baud_rate_gets_a_plain_message(tmp_path: Path) -> None:
    pipeline = Pipeline(WrongBaud(), RIG, Settings(record_root=tmp_path))
    pipeline.start()
    deadline = time.monotonic() + 10
    while "baud rate" not in pipeline.snapshot().message and time.monotonic() < deadline:
        time.sleep(0.05)
    snap = pipeline.snapshot()
    pipeline.stop()
    assert "most likely the baud rate is wrong" in snap.message and "\n" not in snap.message
    assert "/dev/ttyFAKE @ 9600" in snap.message and snap.link.rejected > 0 and snap.link.frames == 0
    assert not list(tmp_path.iterdir())


class _Stalls(SimSource):
    """The simulated rig, whose reads come back empty for a while when asked (a stuck device)."""

    quiet_until = 0.0

    def read(self):
        from logger.sources.base import Chunk

        if time.monotonic() < self.quiet_until:
            time.sleep(0.05)
            return Chunk(b"", time.time())
        return super().read()

    def pause(self, seconds: float) -> None:
        self.quiet_until = time.monotonic() + seconds


def test_a_device_that_falls_silent_is_named_and_flow_resumes(tmp_path: Path) -> None:
    """The device sends nothing for 3 s, then carries on: the state goes silent, then running again."""
    source = _Stalls(SimDevice(seed=4), speed=1.0, duration_s=None)
    pipeline = Pipeline(source, RIG, Settings(record_root=tmp_path))
    pipeline.start()
    deadline = time.monotonic() + 10
    while pipeline.state != "running" and time.monotonic() < deadline:
        time.sleep(0.05)
    source.pause(3.0)
    states = set()
    while time.monotonic() < deadline + 5 and not ("silent" in states and pipeline.state == "running"):
        states.add(pipeline.state)
        if pipeline.state == "silent":
            assert "nothing from simulated rig" in pipeline.message and "port" in pipeline.message
        time.sleep(0.05)
    pipeline.stop()
    assert "silent" in states and pipeline.error is None


def test_duration_ends_cleanly_when_a_drain_runs_past_it(tmp_path: Path) -> None:
    """As fast as it goes, one drain holds seconds of frames: those past --duration are dropped, the run says
    why it ended, and nothing is left unstamped."""
    p = _run(SimSource(SimDevice(seed=8), speed=0.0), tmp_path, duration_s=20.0)
    assert p.error is None and p.stop_reason == "duration of 20 s reached"
    assert p.final is not None and 19_990 <= p.final["rows"] <= 20_000


def test_the_frame_rate_is_the_devices_even_when_reads_run_ahead(tmp_path: Path) -> None:
    """A 1 kHz device read 20 times faster than real time (as a backlog is read after start-up): the link
    panel's rate is measured on the device clock, so it says 1000 frames/s, not 20,000."""
    pipeline = Pipeline(SimSource(SimDevice(seed=4), speed=20.0, duration_s=120.0), RIG,
                        Settings(record_root=tmp_path))
    pipeline.start()
    rates: list[float] = []
    while not pipeline.wait(0.05):
        rate = pipeline.snapshot().link.rate_hz
        if rate:
            rates.append(rate)
    assert len(rates) > 5
    assert all(900.0 < r < 1100.0 for r in rates), (min(rates), max(rates))  # 1 kHz less the link's few losses



def _batch_sizes(pipeline: Pipeline) -> list[int]:
    """Frames in each batch the ingest thread decodes from now on."""
    sizes: list[int] = []
    emit = pipeline.stream.emit
    pipeline.stream.emit = lambda batch, arrival, offset: sizes.append(len(batch)) or emit(batch, arrival, offset)
    return sizes


@pytest.mark.parametrize("watched", [False, True])
def test_batches_span_a_tenth_of_a_second_while_watched_and_half_a_second_otherwise(tmp_path: Path,
                                                                                     watched: bool) -> None:
    """A screen asks for snapshots ten times a second and gets a batch as often; a headless run is decoded
    in half-second batches (less fixed work per sample). The rig is read in 10 ms slices on a clock of its
    own that runs ahead as fast as it goes, so the batches follow the reads' arrival times: at 1 kHz, 100
    and 500 frames."""
    clock = [0.0]

    def sleep(seconds: float) -> None:
        clock[0] += seconds

    source = SimSource(SimDevice(seed=6), speed=1.0, duration_s=20, slice_s=0.01, sleep=sleep,
                       clock=lambda: clock[0])
    pipeline = Pipeline(source, RIG, Settings(record_root=tmp_path))
    sizes = _batch_sizes(pipeline)
    done = threading.Event()

    def watch() -> None:
        while not done.wait(0.01):
            pipeline.snapshot()

    if watched:
        pipeline.snapshot(), pipeline.snapshot()
        threading.Thread(target=watch, daemon=True).start()
    pipeline.start()
    assert pipeline.wait(120)
    done.set()
    assert pipeline.error is None and pipeline.final["rows"] > 19_000
    median = sorted(sizes)[len(sizes) // 2]
    assert (90 <= median <= 110) if watched else (450 <= median <= 550), (median, sizes[:20])


def test_a_status_line_every_few_seconds_is_not_watching(monkeypatch) -> None:
    import logger.ingest.pipeline as module

    clock = [1000.0]
    monkeypatch.setattr(module, "time", type("Clock", (), {"monotonic": staticmethod(lambda: clock[0])}))
    pipeline = Pipeline(SimSource(SimDevice(seed=1), speed=0, duration_s=1), RIG, Settings(record_root=None))
    quiet, live = pipeline.settings.quiet_batch_s, pipeline.settings.batch_s
    assert pipeline._batch_s(clock[0]) == quiet  # nobody has asked yet
    for _ in range(3):
        pipeline.snapshot()
        clock[0] += 2.0  # the console's status line on a terminal
        assert pipeline._batch_s(clock[0]) == quiet
    for _ in range(3):
        pipeline.snapshot()
        clock[0] += 0.1  # a screen
    assert pipeline._batch_s(clock[0]) == live
    clock[0] += module.WATCHED_S
    assert pipeline._batch_s(clock[0]) == quiet  # the screen has gone


def test_unwatched_batches_still_reach_the_journal_while_the_run_goes_on(tmp_path: Path) -> None:
    """Half-second batches are not held back from the journal: it keeps growing in real time with nobody
    asking for a snapshot, and a batch is never longer than the journal's own flush interval."""
    import inspect

    from logger.store.writer import RunWriter

    flush_s = inspect.signature(RunWriter).parameters["flush_seconds"].default
    assert Settings().batch_s <= Settings().quiet_batch_s <= flush_s
    pipeline = Pipeline(SimSource(SimDevice(seed=7), speed=1.0, duration_s=600), RIG,
                        Settings(record_root=tmp_path))
    pipeline.start()
    try:
        wait_until(lambda: journal_rows(tmp_path) >= 500, "the first rows in the journal")
        first = journal_rows(tmp_path)
        wait_until(lambda: journal_rows(tmp_path) >= first + 1000, "more rows in the journal")
        assert pipeline.state == "running"
    finally:
        pipeline.stop()
    assert pipeline.error is None

def test_recording_a_port_loads_no_analysis_libraries(tmp_path: Path) -> None:
    """Recording, sealing and the live screen's code need none of pandas, scipy or matplotlib: each costs tens
    of megabytes and a CPU-second of start-up that a recorder on a small board cannot spare (issue figures:
    pandas ~45 MB, scipy.stats ~60 MB). Only review, calibration and the simulated meter load them."""
    script = f"""
import sys
import logger.cli, logger.tui
from logger.ingest import Pipeline, Settings
from logger.sim.device import SimDevice
from logger.sim.simple import simple_rig
from logger.sources.simulated import SimSource
pipeline = Pipeline(SimSource(SimDevice(seed=1), speed=0, duration_s=3.0), simple_rig(),
                    Settings(record_root={str(tmp_path)!r}))
pipeline.start()
assert pipeline.wait(120) and pipeline.final["status"] == "complete"
print(sorted(m for m in ("pandas", "scipy", "matplotlib") if m in sys.modules))
"""
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300, check=True)
    assert out.stdout.strip() == "[]"
