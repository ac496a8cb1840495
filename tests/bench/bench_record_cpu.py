"""CPU share of one core taken by a real ``railtap record`` process recording 1 kHz in real time (not a test).

The simulated rig is served by ``railtap sim --pty`` in a process of its own, so only the recorder's CPU counts.
Each run starts a fresh ``railtap record --port PTY``, lets it settle, then reads the process's user and system
time from ``/proc/PID/stat`` (every thread) over ``--seconds`` of wall clock, and the share of each thread from
``/proc/PID/task``. Linux only.

Run with ``.venv/bin/python tests/bench/bench_record_cpu.py [--seconds 120] [--runs 3] [--scenario demo-bench]
[--tty] [--over rfc2217|socket]`` (``--tty``: status lines to a terminal, every 2 s, rather than to a log every
10 s; ``--over``: the pty served over TCP on loopback by ``tests/remote_serial.py``, in a process of its own, and
recorded through that URL).
"""

from __future__ import annotations

import argparse
import os
import signal
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

TICK_S = 1.0 / os.sysconf("SC_CLK_TCK")


def cpu_s(stat_path: Path) -> float:
    """User plus system seconds from a ``/proc/.../stat`` file (fields 14 and 15, after the command name)."""
    fields = stat_path.read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) * TICK_S


def thread_cpu(pid: int) -> dict[str, float]:
    """CPU seconds of each thread of ``pid``, keyed by thread id and name."""
    out = {}
    for task in Path(f"/proc/{pid}/task").iterdir():
        try:
            name = (task / "comm").read_text().strip()
            out[f"{task.name} {name}"] = cpu_s(task / "stat")
        except OSError:
            continue
    return out


def serve(scenario: str, rig: Path, seed: int) -> tuple[subprocess.Popen[str], str]:
    """Start the simulated rig on a pty; returns the server and the pty's path."""
    server = subprocess.Popen([sys.executable, "-m", "logger", "sim", "--pty", "--scenario", scenario, "--seed",
                               str(seed), "--write-rig", str(rig)], stdout=subprocess.PIPE, text=True)
    line = server.stdout.readline()
    return server, line.split(" on ", 1)[1].split(";", 1)[0].split()[0]


def serve_over(kind: str, path: str) -> tuple[subprocess.Popen[str], str]:
    """Serve the pty at ``path`` over TCP on loopback (``rfc2217`` or ``socket``); returns the server and its URL."""
    server = subprocess.Popen([sys.executable, str(Path(__file__).resolve().parents[1] / "remote_serial.py"), kind,
                               "0", path], stdout=subprocess.PIPE, text=True)
    return server, server.stdout.readline().split()[-1]


def terminal() -> tuple[int, int]:
    """A pseudo-terminal whose output is read and dropped, to stand in for a person's terminal (status lines
    come every 2 s on a terminal, every 10 s otherwise)."""
    master, slave = os.openpty()

    def drop() -> None:
        try:
            while os.read(master, 4096):
                pass
        except OSError:
            pass

    threading.Thread(target=drop, daemon=True).start()
    return master, slave


def one_run(scenario: str, seconds: float, settle_s: float, quiet: bool, seed: int, tty: bool, over: str | None
            ) -> tuple[float, dict[str, float]]:
    """Share of one core taken by one ``railtap record`` over ``seconds``, and each thread's share."""
    with tempfile.TemporaryDirectory() as tmp:
        rig = Path(tmp) / "rig.toml"
        server, path = serve(scenario, rig, seed)
        bridge = None
        try:
            while not rig.exists():
                time.sleep(0.05)
            if over is not None:
                bridge, path = serve_over(over, path)
            args = [sys.executable, "-m", "logger", "record", "--port", path, "--rig", str(rig), "--out",
                    str(Path(tmp) / "runs"), *(["--quiet"] if quiet else [])]
            master, slave = terminal() if tty else (None, subprocess.DEVNULL)
            record = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=slave)
            try:
                time.sleep(settle_s)
                stat = Path(f"/proc/{record.pid}/stat")
                c0, t0, threads0 = cpu_s(stat), time.monotonic(), thread_cpu(record.pid)
                time.sleep(seconds)
                c1, t1, threads1 = cpu_s(stat), time.monotonic(), thread_cpu(record.pid)
            finally:
                record.send_signal(signal.SIGINT)
                record.wait(60)
                if master is not None:
                    os.close(slave)
                    os.close(master)
        finally:
            for process in (bridge, server):
                if process is not None:
                    process.terminate()
                    process.wait(10)
    wall = t1 - t0
    threads = {k: (threads1[k] - threads0.get(k, 0.0)) / wall for k in threads1}
    return (c1 - c0) / wall, threads


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=120.0, help="wall seconds measured per run")
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--settle", type=float, default=5.0, help="seconds left out at the start of each run")
    parser.add_argument("--scenario", default="demo-bench")
    parser.add_argument("--quiet", action="store_true", help="record with --quiet (no status lines)")
    parser.add_argument("--tty", action="store_true", help="give the recorder a terminal for its status lines")
    parser.add_argument("--over", choices=("rfc2217", "socket"), help="record the pty through a server on loopback")
    args = parser.parse_args()
    shares = []
    for k in range(args.runs):
        load = os.getloadavg()
        share, threads = one_run(args.scenario, args.seconds, args.settle, args.quiet, seed=3 + k, tty=args.tty,
                                 over=args.over)
        shares.append(share)
        busy = ", ".join(f"{name} {s:.2%}" for name, s in sorted(threads.items(), key=lambda kv: -kv[1]) if s > 0.0005)
        print(f"run {k + 1}: {share:.2%} of one core over {args.seconds:g} s (load before "
              f"{load[0]:.2f} {load[1]:.2f} {load[2]:.2f}); threads: {busy}", flush=True)
    print(f"median {statistics.median(shares):.2%}, min {min(shares):.2%}, max {max(shares):.2%}")


if __name__ == "__main__":
    main()
