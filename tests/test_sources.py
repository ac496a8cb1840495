"""Byte sources: serial ports by URL, a real pseudo-terminal, raw capture replay and the simulated rig."""

from __future__ import annotations

import errno
import math
import queue
import sys
import threading
import time
from itertools import pairwise
from pathlib import Path

import numpy as np
import pytest
import serial

from logger.sim import LinkFaults, SimDevice
from logger.sources.base import Chunk, LinkLost, SourceError
from logger.sources.replay import PLAIN_CHUNK, ReplaySource
from logger.sources.serial_port import ReadPacer, SerialSource, no_ports_hint, open_failure
from logger.sources.simulated import SimSource
from logger.store.raw import RawCaptureWriter
from logger.wire import Answer, Decoder, DeviceHeader, FrameBatch, encode_line


def read_all(source: SimSource | ReplaySource) -> list[Chunk]:
    chunks = []
    while (chunk := source.read()) is not None:
        chunks.append(chunk)
    return chunks


# -- serial ports --------------------------------------------------------------------------------------


def test_serial_loop_reads_back_in_bulk() -> None:
    source = SerialSource("loop://", 115200)
    source.open()
    try:
        payload = SimDevice(seed=1).generate(0.1)  # loop:// holds 4096 bytes; a write beyond blocks
        source.write(payload)
        got = bytearray()
        reads = 0
        while len(got) < len(payload) and reads < 20:
            got += source.read().data
            reads += 1
        assert bytes(got) == payload
        assert reads < 5  # whatever has arrived comes in one read, not a line at a time
        assert source.read().data == b""  # a timeout is an empty chunk, not an error
    finally:
        source.close()
        source.close()


def test_missing_port_is_one_clear_line() -> None:
    with pytest.raises(SourceError) as caught:
        SerialSource("/dev/does-not-exist", 921600).open()
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith("/dev/does-not-exist: no such port")
    assert "railtap ports" in message


@pytest.mark.parametrize(
    ("code", "words"),
    [(errno.EACCES, "dialout"), (errno.EBUSY, "another program"), (errno.EIO, "cannot open")],
)
def test_open_failures_say_what_to_do(code: int, words: str) -> None:
    exc = serial.SerialException(code, f"could not open port /dev/ttyACM0: [Errno {code}] x")
    message = open_failure("/dev/ttyACM0", exc)
    assert words in message and "\n" not in message


def test_read_after_loss_is_link_lost() -> None:
    source = SerialSource("loop://")
    with pytest.raises(LinkLost):
        source.read()
    assert no_ports_hint(["/dev/ttyACM0  tap  [USB]"]) is None
    assert "no serial ports" in no_ports_hint([])


@pytest.mark.skipif(sys.platform == "win32", reason="pseudo-terminals are POSIX")
def test_end_to_end_through_a_pseudo_terminal() -> None:
    from logger.sources.pty_server import serve_on_pty

    stop = threading.Event()
    ready: queue.Queue[str] = queue.Queue()
    result: list = []
    server = threading.Thread(
        target=lambda: result.append(serve_on_pty(lambda: SimDevice(seed=3), 2.0, stop, ready.put)),
        daemon=True,
    )
    server.start()
    try:
        path = ready.get(timeout=5)
        time.sleep(0.1)  # the rig talks before anyone listens
        source = SerialSource(path, 921600)
        source.open()
        source.write(encode_line("?H") + encode_line("?P q7"))
        decoder = Decoder()
        items: list = []
        deadline = time.monotonic() + 0.6
        while time.monotonic() < deadline:
            items += decoder.feed(source.read().data)
        source.close()
    finally:
        stop.set()
        server.join(timeout=5)
    assert result and result[0].command_bytes == len(encode_line("?H") + encode_line("?P q7"))
    seq = np.concatenate([i.seq for i in items if isinstance(i, FrameBatch)]).astype(np.int64)
    assert len(seq) > 500  # 0.6 s at twice real time, 1000 Hz
    assert np.all(np.diff(seq) % (1 << 16) == 1)
    texts = [i for i in items if not isinstance(i, FrameBatch)]
    assert any(isinstance(t, DeviceHeader) and t.reason == "ask" for t in texts)
    assert Answer("pong", "q7") in texts
    assert decoder.counters.rejected <= 1  # at most the tail of a line already on its way at connect


@pytest.mark.skipif(sys.platform == "win32", reason="pseudo-terminals are POSIX")
def test_an_unpaced_pty_waits_for_a_slow_reader_and_drops_nothing() -> None:
    from logger.sources.pty_server import serve_on_pty

    stop = threading.Event()
    ready: queue.Queue[str] = queue.Queue()
    result: list = []
    server = threading.Thread(
        target=lambda: result.append(serve_on_pty(lambda: SimDevice(seed=3, faults=LinkFaults()), 0, stop, ready.put)),
        daemon=True,
    )
    server.start()
    decoder = Decoder()
    seq: list[np.ndarray] = []
    try:
        source = SerialSource(ready.get(timeout=5), 921600)
        source.open()
        deadline = time.monotonic() + 60
        while sum(map(len, seq)) < 20_000 and time.monotonic() < deadline:
            seq += [i.seq for i in decoder.feed(source.read().data) if isinstance(i, FrameBatch)]
            if len(seq) % 5 == 0:
                stop.wait(0.02)  # a reader that falls behind now and then
        source.close()
    finally:
        stop.set()
        server.join(timeout=5)
    frames = np.concatenate(seq).astype(np.int64)
    assert len(frames) >= 20_000
    assert np.all(np.diff(frames) % (1 << 16) == 1)  # every frame, in order: nothing dropped
    assert result and result[0].bytes_dropped == 0


class FakeClock:
    """A monotonic clock that only moves when the code under test sleeps or a test says so."""

    def __init__(self) -> None:
        self.now = 100.0
        self.slept: list[float] = []

    def __call__(self) -> float:
        return self.now

    def sleep(self, seconds: float) -> None:
        self.slept.append(seconds)
        self.now += seconds


def test_paced_reads_gather_a_tenth_of_a_second_unless_the_bytes_would_fill_half_the_kernel_buffer() -> None:
    clock = FakeClock()
    pacer = ReadPacer(gather_s=0.1, buffer_bytes=4096, clock=clock, sleep=clock.sleep)
    pacer.pause()
    assert clock.slept == []  # the first read after opening is not held back
    pacer.took(10)
    clock.now += 0.03
    pacer.pause()
    assert clock.slept == [pytest.approx(0.07)]  # due 0.1 s after the previous read
    pacer.took(3600)  # 36 kB/s: half of 4096 bytes comes in 57 ms
    assert pacer.interval_s == pytest.approx(2048 / 36000)
    pacer.took(0)  # an empty read waited for the port's timeout already
    clock.slept.clear()
    pacer.pause()
    assert clock.slept == []
    pacer.took(5)
    clock.now += 0.5
    pacer.took(50)  # a slow stream: the full tenth of a second
    assert pacer.interval_s == pytest.approx(0.1)
    pacer.restart()
    clock.slept.clear()
    pacer.pause()
    assert clock.slept == []


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads are paced on Linux device paths")
def test_a_paced_port_takes_many_small_writes_in_few_reads_and_loses_no_byte() -> None:
    import os
    import tty

    master, slave = os.openpty()
    tty.setraw(slave)
    payload = [f"{k:05d} line of a paced read\n".encode() for k in range(1500)]

    def write_like_usb_packets() -> None:
        for piece in payload:
            os.write(master, piece)
            time.sleep(0.001)

    source = SerialSource(os.ttyname(slave), 921600)
    source.open()
    writer = threading.Thread(target=write_like_usb_packets, daemon=True)
    got, reads = bytearray(), 0
    try:
        writer.start()
        deadline = time.monotonic() + 60
        while len(got) < sum(map(len, payload)) and time.monotonic() < deadline:
            got += source.read().data
            reads += 1
        writer.join(timeout=60)
    finally:
        source.close()
        os.close(master)
        os.close(slave)
    assert bytes(got) == b"".join(payload)
    assert reads < len(payload) / 4  # the kernel gathered the writes between reads



# -- raw captures ----------------------------------------------------------------------------------------


def write_capture(path: Path, chunks: list[Chunk], flush_every: int = 0) -> None:
    with RawCaptureWriter(path) as writer:
        for k, chunk in enumerate(chunks, 1):
            writer.write(chunk)
            if flush_every and k % flush_every == 0:
                writer.flush()


def sample_chunks(n: int = 60) -> list[Chunk]:
    data = SimDevice(seed=4).generate(2.0)
    cuts = np.linspace(0, len(data), n + 1).astype(int)
    chunks = [Chunk(data[a:b], 1_780_000_000.0 + 0.01 * k) for k, (a, b) in enumerate(pairwise(cuts))]
    return [*chunks, Chunk(b"no time", math.nan)]


def test_capture_round_trip(tmp_path: Path) -> None:
    chunks = sample_chunks()
    write_capture(tmp_path / "raw.arrows", [*chunks[:3], Chunk(b"", 1.0), *chunks[3:]])
    replay = ReplaySource(tmp_path / "raw.arrows")
    replay.open()
    got = read_all(replay)
    assert replay.kind == "capture" and not replay.torn
    assert [c.data for c in got] == [c.data for c in chunks]  # empty reads are not kept
    times = np.array([c.host_time for c in got])
    assert np.allclose(times[:-1], [c.host_time for c in chunks[:-1]], rtol=0, atol=1e-6)
    assert math.isnan(times[-1])
    with pytest.raises(FileExistsError):
        RawCaptureWriter(tmp_path / "raw.arrows")


def test_torn_capture_keeps_complete_batches(tmp_path: Path) -> None:
    chunks = sample_chunks()
    write_capture(tmp_path / "raw.arrows", chunks, flush_every=10)
    whole = (tmp_path / "raw.arrows").read_bytes()
    (tmp_path / "torn.arrows").write_bytes(whole[: len(whole) * 2 // 3])
    replay = ReplaySource(tmp_path / "torn.arrows")
    replay.open()
    got = read_all(replay)
    assert replay.torn
    assert len(got) % 10 == 0 and 0 < len(got) < len(chunks)
    assert [c.data for c in got] == [c.data for c in chunks[: len(got)]]


def test_capture_flushes_at_most_every_half_second(tmp_path: Path) -> None:
    now = [0.0]
    writer = RawCaptureWriter(tmp_path / "raw.arrows", clock=lambda: now[0])
    writer.write(Chunk(b"D first\n", 1.0))
    early = ReplaySource(tmp_path / "raw.arrows")
    early.open()
    assert read_all(early) == []  # buffered, not yet written
    now[0] = 0.5
    writer.write(Chunk(b"D second\n", 1.5))
    size = (tmp_path / "raw.arrows").stat().st_size
    assert size > 0  # both chunks are on disk without closing
    replay = ReplaySource(tmp_path / "raw.arrows")
    replay.open()
    assert [c.data for c in read_all(replay)] == [b"D first\n", b"D second\n"]
    writer.close()


def test_paced_replay_follows_arrival_times(tmp_path: Path) -> None:
    chunks = [Chunk(b"D x\n", 1000.0 + 0.05 * k) for k in range(5)]
    write_capture(tmp_path / "raw.arrows", chunks)
    replay = ReplaySource(tmp_path / "raw.arrows", speed=1.0)
    replay.open()
    start = time.monotonic()
    got = [c for c in read_all(replay) if c.data]
    assert len(got) == 5
    assert time.monotonic() - start > 0.18  # paced: the chunks' own 0.2 s, never faster (no upper bound: busy CI)


def test_plain_byte_file_replays_in_blocks(tmp_path: Path) -> None:
    data = SimDevice(seed=5).generate(5.0)
    (tmp_path / "capture.bin").write_bytes(b"\x00\xff" + data)  # noise from plugging in
    replay = ReplaySource(tmp_path / "capture.bin", speed=1.0)
    replay.open()
    got = read_all(replay)
    assert replay.kind == "plain"
    assert b"".join(c.data for c in got) == b"\x00\xff" + data
    assert all(len(c.data) <= PLAIN_CHUNK for c in got) and len(got) > 1
    assert all(math.isnan(c.host_time) for c in got)


@pytest.mark.parametrize("content", [bytes(range(256)) * 100, b"PAR1" + bytes(1000), b""])
def test_unknown_file_is_one_line_error(tmp_path: Path, content: bytes) -> None:
    (tmp_path / "x.bin").write_bytes(content)
    with pytest.raises(SourceError) as caught:
        ReplaySource(tmp_path / "x.bin").open()
    assert "\n" not in str(caught.value) and str(tmp_path / "x.bin") in str(caught.value)
    with pytest.raises(SourceError):
        ReplaySource(tmp_path / "missing.bin").open()


# -- simulated rig ---------------------------------------------------------------------------------------


def test_sim_source_fast_gives_the_device_bytes_with_simulated_times() -> None:
    faults = LinkFaults(drop_line=0.01, corrupt_byte=0.01)
    source = SimSource(SimDevice(seed=6, faults=faults), speed=0, duration_s=30.0, start_utc=5000.0)
    source.open()
    chunks = read_all(source)
    assert b"".join(c.data for c in chunks) == SimDevice(seed=6, faults=faults).generate(30.0)
    assert max(len(c.data) for c in chunks) <= 65536 + 200
    times = np.array([c.host_time for c in chunks])
    assert np.all(np.diff(times) > 0) and times[-1] == pytest.approx(5030.0, abs=0.01)
    assert source.read() is None


def test_sim_source_paces_real_time_in_small_slices() -> None:
    source = SimSource(SimDevice(seed=7), speed=1.0, duration_s=0.3)
    source.open()
    start = time.monotonic()
    chunks = read_all(source)
    elapsed = time.monotonic() - start
    assert 0.28 < elapsed < 0.6
    assert np.median([len(c.data) for c in chunks]) < 31 * 20  # about 10 ms of 31-byte lines
    source.write(encode_line("?P z"))  # accepted, answered in the next slice


def test_sim_source_unplug_and_reconnect() -> None:
    source = SimSource(SimDevice(seed=8), speed=0, start_utc=0.0)
    source.unplug(at_s=4.0, down_s=0.15)
    source.open()
    decoder = Decoder()
    with pytest.raises(LinkLost):
        while True:
            decoder.feed(source.read().data)
    assert source.device.now_s == 4.0
    with pytest.raises(SourceError):
        source.open()
    with pytest.raises(LinkLost):
        source.read()
    time.sleep(0.2)
    source.open()
    chunk = source.read()
    items = decoder.feed(chunk.data)
    assert isinstance(items[0], DeviceHeader) and items[0].reason == "boot"
    assert items[1].seq[0] == 0
    assert chunk.host_time > 4.15


def test_a_port_is_recorded_by_one_process_at_a_time() -> None:
    """The second opener of a device path gets one line saying it is busy, and the first keeps the stream."""
    import os
    import tty

    from logger.sources.base import SourceError
    from logger.sources.serial_port import SerialSource

    master, slave = os.openpty()
    tty.setraw(slave)
    first, second = SerialSource(os.ttyname(slave)), SerialSource(os.ttyname(slave))
    try:
        first.open()
        with pytest.raises(SourceError, match="port is busy; another program has it open"):
            second.open()
        os.write(master, b"D 0000*0000\n")
        got = b""
        for _ in range(50):  # reads return within their 0.1 s timeout
            chunk = first.read()
            got += chunk.data
            if got:
                break
        assert got.startswith(b"D 0000")
    finally:
        first.close()
        second.close()
        os.close(master)
        os.close(slave)


def test_a_busy_port_names_the_process_that_holds_it() -> None:
    """Another process records the port (an exclusive open, as railtap's own): the refusal names its pid and
    command line, read from /proc (Linux), so the user knows which one to close."""
    import os
    import subprocess
    import sys
    import tty

    from logger.sources.base import SourceError
    from logger.sources.serial_port import SerialSource

    if not os.path.isdir("/proc/self/fd"):
        pytest.skip("needs /proc")
    master, slave = os.openpty()
    tty.setraw(slave)
    path = os.ttyname(slave)
    holder = subprocess.Popen([sys.executable, "-c", "import serial, sys; port = serial.Serial(sys.argv[1], "
                               "exclusive=True); print('open', flush=True); sys.stdin.read()", path],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)  # holds it until told
    try:
        assert holder.stdout.readline().strip() == "open"
        with pytest.raises(SourceError) as info:
            SerialSource(path).open()
        assert f"port is busy; it is open in pid {holder.pid} (" in str(info.value)
        assert "-c import serial, sys; port = serial.Serial" in str(info.value)
    finally:
        holder.kill()
        holder.wait(10)
        os.close(master)
        os.close(slave)


def test_ports_table_says_what_each_column_is_and_which_port_looks_like_a_tap(monkeypatch) -> None:
    from serial.tools.list_ports_common import ListPortInfo

    import logger.sources.serial_port as sp

    usb = ListPortInfo("/dev/ttyACM0")
    usb.vid, usb.pid, usb.description, usb.hwid = 0x2341, 0x0043, "Uno R3", "USB VID:PID=2341:0043"
    uart = ListPortInfo("/dev/ttyS0")
    monkeypatch.setattr(sp.serial.tools.list_ports, "comports", lambda: [uart, usb])
    header, first, second = sp.list_ports()
    assert header.split() == ["PORT", "KIND", "DESCRIPTION", "HARDWARE", "ID"]
    assert first.startswith("/dev/ttyACM0") and "USB 2341:0043, likely a tap" in first and "Uno R3" in first
    assert second.startswith("/dev/ttyS0") and "unlikely a tap" in second
    assert first.index("USB") == header.index("KIND") == second.index("built-in")  # aligned columns
