"""Memory benchmark: a `railtap record` process over a simulated day, for each shipped scenario (not a test).

The simulated rig is served unpaced on a pseudo-terminal by `railtap sim --pty --speed 0` in a process of its
own, so what is measured is what a user's recorder holds, not the simulator. `railtap record --port` reads it
until ``--hours`` of device time; the resident memory (VmRSS) of the recorder and of the child that seals a part is read
from /proc twice a second. Printed per scenario, goal figure first: peak RSS; then the mean RSS of each
quarter of the run and the last quarter's mean against the second's (flat means within 5 %).

Goal (issue 16): at most 150 MB peak, flat, for every shipped scenario over 24 h at 1 kHz.

Run with ``.venv/bin/python tests/bench/bench_memory.py [--hours 24] [--scenario NAME ...]``.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

RAILTAP = [sys.executable, "-m", "logger"]
GOAL_MB = 150.0


def status_mb(pid: int, field: str = "VmRSS") -> float:
    """One memory figure of a process from /proc, in MB (0 when it has gone)."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith(field + ":"):
                return int(line.split()[1]) / 1024
    except (FileNotFoundError, ProcessLookupError):
        pass
    return 0.0


def pss_mb(pid: int) -> float:
    """Proportional set size in MB: shared library pages split between the processes that map them, so the
    recorder's and its sealing child's figures add up to what the two really take."""
    try:
        for line in Path(f"/proc/{pid}/smaps_rollup").read_text().splitlines():
            if line.startswith("Pss:"):
                return int(line.split()[1]) / 1024
    except (FileNotFoundError, ProcessLookupError, PermissionError):
        pass
    return 0.0


def children(pid: int) -> list[int]:
    """Child processes of any of the process's threads (the sealing child is started by the sealer thread)."""
    found: list[int] = []
    try:
        for task in Path(f"/proc/{pid}/task").iterdir():
            found += [int(c) for c in (task / "children").read_text().split()]
    except (FileNotFoundError, ProcessLookupError):
        pass
    return found


def serve(scenario: str, folder: Path) -> tuple[subprocess.Popen[bytes], Path, Path]:
    """Start the unpaced simulator; return it, its port and its rig file once the port exists."""
    port, rig = folder / "port", folder / "rig.toml"
    sim = subprocess.Popen([*RAILTAP, "sim", "--pty", "--speed", "0", "--scenario", scenario, "--seed", "16",
                            "--link", str(port), "--write-rig", str(rig)], stdout=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    while not port.exists():
        if time.monotonic() > deadline or sim.poll() is not None:
            raise SystemExit(f"the simulator for {scenario} did not start")
        time.sleep(0.1)
    return sim, port, rig


def record(scenario: str, hours: float, folder: Path) -> dict[str, float]:
    """Record ``hours`` of the scenario; RSS samples and the run's rows."""
    sim, port, rig = serve(scenario, folder)
    try:
        rec = subprocess.Popen([*RAILTAP, "record", "--port", str(port), "--rig", str(rig), "--duration",
                                f"{hours * 3600:g}", "--out", str(folder / "runs"), "--quiet"],
                               stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        own: list[float] = []
        sealer: list[float] = [0.0]
        tree: list[float] = []
        t0 = time.monotonic()
        while rec.poll() is None:
            kids = children(rec.pid)
            own.append(status_mb(rec.pid))
            sealer += [status_mb(k) for k in kids]
            tree.append(pss_mb(rec.pid) + sum(pss_mb(k) for k in kids))
            time.sleep(0.5)
        wall = time.monotonic() - t0
        out = rec.stdout.read() if rec.stdout else ""
    finally:
        sim.terminate()
        sim.wait(10)
    if rec.returncode:
        raise SystemExit(f"record of {scenario} ended with {rec.returncode}: {out.strip()[-400:]}")
    quarters = [own[len(own) * q // 4: len(own) * (q + 1) // 4] for q in range(4)]
    means = [sum(q) / len(q) if q else float("nan") for q in quarters]
    return {"peak": max(own), "q": means, "wall": wall, "sealer": max(sealer), "tree": max(tree),
            "rows": out.split(": ", 1)[-1].split(" rows")[0]}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hours", type=float, default=24.0, help="device hours recorded per scenario")
    parser.add_argument("--scenario", nargs="*", default=["demo-bench", "bench-soak", "split-15v",
                                                          "battery-discharge"])
    args = parser.parse_args()
    print(f"{os.cpu_count()} cores, load {os.getloadavg()[0]:.1f}; {args.hours:g} h of each scenario at its own rate")
    print("peak RSS is the recorder's own; a part's seal runs in a child process, whose peak RSS is shown apart,")
    print("and 'both' is the peak of their proportional set sizes added up (shared library pages counted once)")
    print(f"{'scenario':18} {'peak RSS':>9} {'goal':>6}   quarter means (MB)          Q4/Q2  sealer   both   wall")
    for name in args.scenario:
        with tempfile.TemporaryDirectory() as tmp:
            hours = min(args.hours, 1.05) if name == "battery-discharge" else args.hours  # a pack runs out
            r = record(name, hours, Path(tmp))
        q = r["q"]
        print(f"{name:18} {r['peak']:6.1f} MB {'met' if r['peak'] <= GOAL_MB else 'MISSED':>6}   "
              f"{q[0]:6.1f} {q[1]:6.1f} {q[2]:6.1f} {q[3]:6.1f}   {q[3] / q[1]:5.3f}  {r['sealer']:5.1f}  "
              f"{r['tree']:5.1f}  {r['wall']:5.0f} s  ({hours:g} h, {r['rows']} rows)", flush=True)

if __name__ == "__main__":
    main()
