"""Ingest benchmark: prints figures measured side by side in one run (not a test; these machines are noisy).

1. Throughput through a real pseudo-terminal: the same recorded byte stream pushed through
   (a) railtap's decode + stamp + calibrate + journal path (the Pipeline recording a run), and
   (b) a naive peer: pyserial ``readline()``, ``split``, ``int`` and ``csv.writer``.
2. CPU share of one core while recording a 1 kHz stream in real time (the simulated rig served from another
   process on a pseudo-terminal, so only the recorder's own CPU counts).
3. Memory over a long simulated run at 1 kHz (24 h of simulated time by default, as fast as it goes, in a
   fresh process), and bytes on disk per two-channel row.

Run with ``make bench`` or ``.venv/bin/python tests/bench/bench_ingest.py [--hours 24] [--seconds 300]``.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import resource
import subprocess
import sys
import tempfile
import threading
import time
import tty
from pathlib import Path

import serial

from logger.ingest import Pipeline, Settings
from logger.sim.device import SimDevice
from logger.sim.simple import simple_rig
from logger.sources.serial_port import SerialSource
from logger.sources.simulated import SimSource

RIG = simple_rig()
CHANNELS = len(RIG.channels)


def rss_mb(field: str = "VmRSS") -> float:
    """Resident memory in MB: all of it (VmRSS), or only the process's own heap and stacks (RssAnon), which
    leaves out the pages of library code mapped from disk."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) / 1024
    return float("nan")


def cpu_s() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def recorded_stream(seconds: float) -> tuple[bytes, int]:
    device = SimDevice(seed=11)
    data = device.generate(seconds)
    return data, device.truth.frames


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


def railtap_path(data: bytes, frames: int, out: Path) -> tuple[float, float]:
    feeder = PtyFeeder(data)
    pipeline = Pipeline(SerialSource(feeder.path, 921600), RIG, Settings(record_root=out))
    c0, t0 = cpu_s(), time.perf_counter()
    pipeline.start()
    feeder.thread.start()
    while pipeline.state not in ("failed", "stopped"):
        if pipeline.recorder is not None and pipeline.recorder.durable_rows >= frames:
            break  # decoded, stamped, calibrated and fsynced in the journal
        time.sleep(0.002)
    wall, cpu = time.perf_counter() - t0, cpu_s() - c0
    final = pipeline.stop("benchmark done")
    feeder.close()
    assert final is not None and final["rows"] == frames, (final, frames)
    return wall, cpu


def naive_path(data: bytes, frames: int, out: Path) -> tuple[float, float]:
    feeder = PtyFeeder(data)
    port = serial.Serial(feeder.path, 921600, timeout=1)
    c0, t0 = cpu_s(), time.perf_counter()
    feeder.thread.start()
    rows = 0
    with open(out / "naive.csv", "w", newline="") as handle:
        writer = csv.writer(handle)
        while rows < frames:
            line = port.readline()
            fields = line.split()
            if not fields or fields[0] != b"D":
                continue
            last = fields[-1].split(b"*")[0]
            values = [int(f, 16) for f in fields[1:-1]] + [int(last, 16)]
            writer.writerow(values)
            rows += 1
    wall, cpu = time.perf_counter() - t0, cpu_s() - c0
    port.close()
    feeder.close()
    return wall, cpu


def cpu_at_1khz(seconds: float, out: Path) -> tuple[float, int]:
    server = subprocess.Popen([sys.executable, "-m", "logger", "sim", "--pty", "--seed", "3"],
                              stdout=subprocess.PIPE, text=True)
    try:
        line = server.stdout.readline()
        path = line.split(" on ", 1)[1].split(";", 1)[0]
        pipeline = Pipeline(SerialSource(path, 921600), RIG, Settings(record_root=out))
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


def long_run(hours: float, out: Path) -> dict[str, float]:
    source = SimSource(SimDevice(seed=12), speed=0, duration_s=hours * 3600.0)
    pipeline = Pipeline(source, RIG, Settings(record_root=out))
    t0 = time.perf_counter()
    pipeline.start()
    samples: list[tuple[float, float]] = []
    anon: list[float] = []
    while not pipeline.wait(2.0):
        samples.append((pipeline.decoder.counters.frames, rss_mb()))
        anon.append(rss_mb("RssAnon"))
        done = samples[-1][0] / (hours * 3600e3)
        print(f"\r   long run: {done:6.1%} simulated, RSS {samples[-1][1]:6.1f} MB", end="", file=sys.stderr)
    print(file=sys.stderr)
    wall = time.perf_counter() - t0
    final = pipeline.final
    folder = pipeline.recorder.folder
    part_bytes = sum(p.stat().st_size for p in folder.glob("part-*.parquet"))
    rss = [m for _, m in samples] or [rss_mb()]
    tenth = rss[len(rss) // 10] if len(rss) > 10 else rss[0]
    return {
        "rows": final["rows"],
        "parts": len(final["parts"]),
        "wall_s": wall,
        "rss_max_mb": max(rss),
        "rss_at_10pct_mb": tenth,
        "rss_end_mb": rss[-1],
        "anon_at_10pct_mb": anon[len(anon) // 10] if anon else float("nan"),
        "anon_max_mb": max(anon, default=float("nan")),
        "anon_end_mb": anon[-1] if anon else float("nan"),
        "bytes_per_row": part_bytes / final["rows"],
    }


def long_run_in_fresh_process(hours: float, out: Path) -> dict[str, float]:
    """The memory run in a process of its own, so nothing left over from the other measurements counts."""
    code = (
        "import json, sys; from pathlib import Path; sys.path.insert(0, sys.argv[3]); import bench_ingest as b; "
        "print(json.dumps(b.long_run(float(sys.argv[1]), Path(sys.argv[2]))))"
    )
    done = subprocess.run([sys.executable, "-c", code, str(hours), str(out), str(Path(__file__).parent)],
                          stdout=subprocess.PIPE, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=600.0, help="length of the recorded stream (1 kHz)")
    parser.add_argument("--cpu-seconds", type=float, default=20.0, help="real-time recording to measure CPU")
    parser.add_argument("--hours", type=float, default=24.0, help="simulated hours for the memory run")
    args = parser.parse_args()

    data, frames = recorded_stream(args.seconds)
    samples = frames * CHANNELS
    print(f"recorded stream: {frames} lines, {CHANNELS} channels, {len(data) / 1e6:.1f} MB")
    with tempfile.TemporaryDirectory() as tmp:
        tmp_path = Path(tmp)
        r_wall, r_cpu = railtap_path(data, frames, tmp_path / "railtap")
        n_wall, n_cpu = naive_path(data, frames, tmp_path)
        print("\n1. through a pseudo-terminal, the same bytes         railtap        naive peer")
        print(f"   wall time (s)                                  {r_wall:10.2f}    {n_wall:10.2f}")
        print(f"   CPU time (s, all threads)                      {r_cpu:10.2f}    {n_cpu:10.2f}")
        print(f"   samples/s (wall)                               {samples / r_wall:10.0f}    {samples / n_wall:10.0f}")
        print(f"   samples/s per CPU-second                       {samples / r_cpu:10.0f}    {samples / n_cpu:10.0f}")
        print(f"   ratio railtap / naive (wall)                   {n_wall / r_wall:10.1f}x")
        print(f"   (a sample is one channel's reading; rows/s is samples/s / {CHANNELS})")

        share, got = cpu_at_1khz(args.cpu_seconds, tmp_path / "cpu")
        print(f"\n2. recording 1 kHz in real time for {args.cpu_seconds:g} s ({got} rows): "
              f"{share:.1%} of one core")

        stats = long_run_in_fresh_process(args.hours, tmp_path / "long")
        print(f"\n3. {args.hours:g} h simulated at 1 kHz: {stats['rows']} rows in {stats['parts']} parts, "
              f"{stats['wall_s']:.0f} s wall ({stats['rows'] / stats['wall_s']:.0f} rows/s incl. simulation)")
        print(f"   RSS at 10 %: {stats['rss_at_10pct_mb']:.1f} MB, at end: {stats['rss_end_mb']:.1f} MB, "
              f"max: {stats['rss_max_mb']:.1f} MB")
        print(f"   of which the process's own heap (RssAnon, without library code): at 10 %: "
              f"{stats['anon_at_10pct_mb']:.1f} MB, at end: {stats['anon_end_mb']:.1f} MB, "
              f"max: {stats['anon_max_mb']:.1f} MB")
        print(f"   bytes on disk per two-channel row: {stats['bytes_per_row']:.2f}")


if __name__ == "__main__":
    main()
