"""Ingest benchmark: prints figures measured side by side in one run (not a test; these machines are noisy).

1. Throughput through a real pseudo-terminal: the same recorded byte stream pushed, each time into a fresh
   process, through
   (a) railtap's decode + stamp + calibrate + journal path (the Pipeline recording a run),
   (b) a naive peer: pyserial ``readline()`` (one byte per system call), ``split``, ``int`` and ``csv.writer``,
       checking no CRC: a floor, not a fair comparison;
   (c) a fair peer: reads of whatever the port holds (``os.read``), lines split, the wire protocol's CRC checked
       (CRC-16/IBM-3740, ``binascii.crc_hqx`` as in ``logger/wire/crc.py``), the sequence, clock and counts
       parsed, rows written with ``csv.writer``.
   Each is timed in its loop (from the port open to the last row written; for railtap, fsynced in the journal)
   and as a whole process (interpreter start-up, imports, and for railtap the sealing of its parts and rollups).
   The stream is fed from this process, so a child's CPU is its own reading and nothing else.
2. CPU share of one core while recording a 1 kHz stream in real time (the simulated rig served from another
   process on a pseudo-terminal, so only the recorder's own CPU counts).

Memory over a long run is measured by ``tests/bench/bench_memory.py``.

Run with ``make bench`` or ``.venv/bin/python tests/bench/bench_ingest.py [--seconds 600] [--cpu-seconds 20]``.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import threading
import time
import tty
from dataclasses import dataclass
from pathlib import Path

BAUD = 921600
PATHS = ("railtap", "naive peer", "fair peer")


def cpu_s() -> float:
    """CPU time of this process so far, every thread, user + sys."""
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def peak_mb() -> float:
    """This process's own high-water mark of resident memory (``VmHWM`` starts afresh at exec)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def recorded_stream(seconds: float) -> tuple[bytes, int, int]:
    """The simulated rig's bytes for ``seconds`` at 1 kHz, its data lines and its channels."""
    from logger.sim.device import SimDevice
    from logger.sim.simple import simple_rig

    device = SimDevice(seed=11)
    data = device.generate(seconds)
    return data, device.truth.frames, len(simple_rig().channels)


class PtyFeeder:
    """Writes a byte stream into a pty master as fast as the reader drains it."""

    def __init__(self, data: bytes) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        self.path = os.ttyname(self.slave)
        self.data = data
        self.thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        view = memoryview(self.data)
        while view:
            view = view[os.write(self.master, view[:65536]) :]

    def close(self) -> None:
        os.close(self.master)
        os.close(self.slave)


# -- the three readers, each run in a child process that is told the port and the number of data lines --------


def ready() -> None:
    """Tell the parent the port is open, so it starts feeding (pyserial empties the input buffer on open)."""
    print("ready", flush=True)


def railtap_path(port: str, frames: int, out: Path) -> tuple[float, float]:
    """railtap's Pipeline recording the port until every line is fsynced in the journal; then sealed."""
    from logger.ingest import Pipeline, Settings
    from logger.sim.simple import simple_rig
    from logger.sources.serial_port import SerialSource

    pipeline = Pipeline(SerialSource(port, BAUD), simple_rig(), Settings(record_root=out))
    pipeline.start()
    ready()
    c0, t0 = cpu_s(), time.perf_counter()
    while pipeline.state not in ("failed", "stopped"):
        if pipeline.recorder is not None and pipeline.recorder.durable_rows >= frames:
            break  # decoded, stamped, calibrated and fsynced in the journal
        time.sleep(0.002)
    wall, cpu = time.perf_counter() - t0, cpu_s() - c0
    final = pipeline.stop("benchmark done")
    assert final is not None and final["rows"] == frames, (final, frames)
    return wall, cpu


def naive_path(port: str, frames: int, out: Path) -> tuple[float, float]:
    """pyserial ``readline()``, which reads one byte per system call; no CRC checked."""
    import csv

    import serial

    handle_port = serial.Serial(port, BAUD, timeout=1, exclusive=True)
    ready()
    c0, t0 = cpu_s(), time.perf_counter()
    rows = 0
    with open(out / "naive.csv", "w", newline="") as handle:
        writer = csv.writer(handle)
        while rows < frames:
            fields = handle_port.readline().split()
            if not fields or fields[0] != b"D":
                continue
            last = fields[-1].split(b"*")[0]
            writer.writerow([int(f, 16) for f in fields[1:-1]] + [int(last, 16)])
            rows += 1
    wall, cpu = time.perf_counter() - t0, cpu_s() - c0
    handle_port.close()
    return wall, cpu


def fair_path(port: str, frames: int, out: Path) -> tuple[float, float]:
    """What a careful script would do: read whatever has arrived, split lines, check each line's CRC, parse."""
    import binascii
    import csv
    import fcntl

    fd = os.open(port, os.O_RDONLY | os.O_NOCTTY)
    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)  # the lock a recorder takes, so none shares the stream
    ready()
    c0, t0 = cpu_s(), time.perf_counter()
    rows, rest = 0, b""
    with open(out / "fair.csv", "w", newline="") as handle:
        writer = csv.writer(handle)
        while rows < frames:
            *lines, rest = (rest + os.read(fd, 65536)).split(b"\n")
            good = []
            for line in lines:
                body, _, crc = line.rstrip(b"\r").partition(b"*")
                if body[:2] == b"D " and len(crc) == 4 and binascii.crc_hqx(body, 0xFFFF) == int(crc, 16):
                    good.append([int(f, 16) for f in body[2:].split(b" ")])  # seq, clock, counts
            writer.writerows(good)
            rows += len(good)
    wall, cpu = time.perf_counter() - t0, cpu_s() - c0
    os.close(fd)
    return wall, cpu


READERS = {"railtap": railtap_path, "naive peer": naive_path, "fair peer": fair_path}


def child(path: str, port: str, frames: int, out: Path) -> None:
    """Run one reader in this (fresh) process; print its in-loop figures as one JSON line."""
    wall, cpu = READERS[path](port, frames, out)
    print(json.dumps({"wall_s": wall, "cpu_s": cpu, "peak_mb": peak_mb()}), flush=True)


# -- the parent ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Throughput:
    """One reader's figures: in its loop, and for its whole process (from ``wait4``)."""

    loop_wall_s: float
    loop_cpu_s: float
    process_wall_s: float
    process_cpu_s: float
    peak_mb: float


def measure(path: str, data: bytes, frames: int, out: Path, spare: list[PtyFeeder]) -> Throughput:
    """Start a fresh process reading a new pty, feed it ``data`` once it has the port open, wait for it.

    A pty whose number another program on this machine is waiting to reopen (a recorder left reconnecting to
    ``/dev/pts/N``) may be taken before the child locks it; the child then fails, the pty is kept aside in
    ``spare`` (so the next one gets another number) and a new one is tried."""
    out.mkdir(parents=True, exist_ok=True)
    for _ in range(5):
        feeder = PtyFeeder(data)
        started = time.perf_counter()
        proc = subprocess.Popen([sys.executable, __file__, "--child", path, feeder.path, str(frames), str(out)],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        if proc.stdout.readline().strip() == "ready":
            break
        proc.wait()
        print(f"   ({path}: {feeder.path} was taken by another process; trying another pty)", file=sys.stderr)
        spare.append(feeder)
    else:
        raise SystemExit(f"{path}: the reader did not start:\n{proc.stderr.read()}")
    feeder.thread.start()
    lines = proc.stdout.read().strip().splitlines()
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    wall = time.perf_counter() - started
    feeder.close()
    if proc.returncode != 0 or not lines:
        raise SystemExit(f"{path}: the reader failed ({proc.returncode}):\n{err}")
    got = json.loads(lines[-1])
    return Throughput(got["wall_s"], got["cpu_s"], wall, usage.ru_utime + usage.ru_stime, got["peak_mb"])


def print_throughput(results: dict[str, Throughput], frames: int) -> None:
    """The three readers side by side, and railtap's ratios to each peer."""
    r = results["railtap"]

    def row(label: str, values: list[float], fmt: str) -> None:
        print(f"   {label:42}" + "".join(f"{v:{fmt}}" for v in values))

    print(f"\n{'1. through a pseudo-terminal, the same bytes':45}" + "".join(f"{p:>14}" for p in PATHS))
    row("in the loop: wall time (s)", [results[p].loop_wall_s for p in PATHS], "14.2f")
    row("in the loop: CPU time (s, all threads)", [results[p].loop_cpu_s for p in PATHS], "14.2f")
    row("in the loop: rows/s (wall)", [frames / results[p].loop_wall_s for p in PATHS], "14.0f")
    row("in the loop: rows per CPU-second", [frames / results[p].loop_cpu_s for p in PATHS], "14.0f")
    row("whole process: wall time (s)", [results[p].process_wall_s for p in PATHS], "14.2f")
    row("whole process: CPU time (s)", [results[p].process_cpu_s for p in PATHS], "14.2f")
    row("whole process: rows per CPU-second", [frames / results[p].process_cpu_s for p in PATHS], "14.0f")
    row("peak resident memory (MB)", [results[p].peak_mb for p in PATHS], "14.0f")
    for peer in PATHS[1:]:
        p = results[peer]
        print(f"   railtap / {peer}: rows/s in the loop {p.loop_wall_s / r.loop_wall_s:.2f} x, "
              f"CPU-s in the loop {r.loop_cpu_s / p.loop_cpu_s:.2f} x, "
              f"CPU-s whole process {r.process_cpu_s / p.process_cpu_s:.2f} x")
    print("   (a row is one line of all channels; the whole process includes start-up, imports and, for railtap,\n"
          "    sealing the parts and writing their rollups)")


def cpu_at_1khz(seconds: float, out: Path) -> tuple[float, int]:
    """Share of one core the Pipeline takes recording the simulated rig in real time from another process."""
    from logger.ingest import Pipeline, Settings
    from logger.sim.simple import simple_rig
    from logger.sources.serial_port import SerialSource

    server = subprocess.Popen([sys.executable, "-m", "logger", "sim", "--pty", "--seed", "3"],
                              stdout=subprocess.PIPE, text=True)
    try:
        line = server.stdout.readline()
        path = line.split(" on ", 1)[1].split(";", 1)[0]
        pipeline = Pipeline(SerialSource(path, BAUD), simple_rig(), Settings(record_root=out))
        pipeline.start()
        time.sleep(2.0)  # header, first journal flush
        c0, t0, f0 = cpu_s(), time.perf_counter(), pipeline.decoder.counters.frames
        time.sleep(seconds)
        share = (cpu_s() - c0) / (time.perf_counter() - t0)
        frames = pipeline.decoder.counters.frames - f0
        pipeline.stop("benchmark done")
        return share, frames
    finally:
        server.terminate()
        server.wait(5)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=600.0, help="length of the recorded stream (1 kHz)")
    parser.add_argument("--cpu-seconds", type=float, default=20.0, help="real-time recording to measure CPU")
    parser.add_argument("--child", nargs=4, metavar=("PATH", "PORT", "FRAMES", "OUT"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], args.child[1], int(args.child[2]), Path(args.child[3]))
        return

    data, frames, channels = recorded_stream(args.seconds)
    print(f"recorded stream: {frames} lines, {channels} channels, {len(data) / 1e6:.1f} MB")
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())} ({os.cpu_count()} cores)", flush=True)
    with tempfile.TemporaryDirectory() as tmp:
        tmp_path = Path(tmp)
        spare: list[PtyFeeder] = []
        results = {path: measure(path, data, frames, tmp_path / path.replace(" ", "-"), spare) for path in PATHS}
        for feeder in spare:
            feeder.close()
        print_throughput(results, frames)
        share, got = cpu_at_1khz(args.cpu_seconds, tmp_path / "cpu")
        print(f"\n2. recording 1 kHz in real time for {args.cpu_seconds:g} s ({got} rows): "
              f"{share:.1%} of one core")
    print(f"load average after:  {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
