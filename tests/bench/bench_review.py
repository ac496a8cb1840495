"""Review benchmark: a day-long run summarised three ways, measured side by side in one run (not a test).

1. Makes (once, then reuses) a 24 h, 1 kHz, two-channel run (86.4 M rows) through railtap's own RunWriter,
   so its parts, rollups and ``_run.json`` are what a real recording leaves: a 12 V rail with 100 Hz ripple and
   noise, a load stepping between 1 and 3 A, a dip every ten minutes.
2. Times, each in a fresh process (so peak memory is that step's own):
   a. ``summarize(run)``: the summary from the per-second rollups;
   b. ``summarize(run, full=True)``: the same summary from every sample;
   c. the same figures (min, mean, max, std per channel, charge and energy) with ``pandas.read_csv`` over the
      run exported as CSV, read in chunks of a million rows (all at once would not fit a small machine).
3. Prints wall time, peak resident memory, and the ratios.

Targets (issue 6): rollups at most 2 s; full scan at most 15 s and under 1 GB; rollups at least 20 x faster
than the CSV path. Run with ``.venv/bin/python tests/bench/bench_review.py [--hours 24] [--keep DIR]``.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa

from logger.sim.simple import RIG_TOML
from logger.store import new_run, sample_schema
from logger.store.schema import UTC_TYPE

RATE_HZ = 1000
CHANNELS = ["out_v", "out_a"]
LSB_V = 3.3 / 4096 * 11.0
LSB_A = 3.3 / 4096 / (0.01 * 50.0)


def make_run(root: Path, hours: float) -> Path:
    """Write the day through RunWriter, an hour's worth of samples per call."""
    meta = {"rig": RIG_TOML, "channels_info": [{"name": "out_v", "unit": "V"}, {"name": "out_a", "unit": "A"}],
            "power_pairs": [{"rail": "out", "volts": "out_v", "amps": "out_a"}],
            "device_header": "H fw=bench ver=1 bits=12 vref_mv=3300 rate_hz=1000 ch=a0,a1 why=boot",
            "link": {"rate_hz": RATE_HZ}}
    schema = sample_schema(CHANNELS)
    writer = new_run(root, "bench-day", schema, meta, part_seconds=3600.0, flush_seconds=3600.0)
    rng = np.random.default_rng(24)
    t0 = 1_800_000_000_000_000
    step = 600_000  # 10 minutes of samples per batch
    for first in range(0, int(hours * 3600 * RATE_HZ), step):
        n = np.arange(first, min(first + step, int(hours * 3600 * RATE_HZ)))
        t = n / RATE_HZ
        amps = np.where((t % 120) < 60, 1.0, 3.0)
        volts = 12.0 - 0.2 * amps + 0.03 * np.sin(2 * np.pi * 100 * t) + rng.normal(0, 0.01, len(t))
        volts = np.where((t % 600 > 300) & (t % 600 < 300.2), 8.5, volts)
        vc = np.clip(np.rint(volts / LSB_V), 0, 4095).astype(np.uint16)
        ac = np.clip(np.rint(amps / LSB_A + rng.normal(0, 1.0, len(t))), 0, 4095).astype(np.uint16)
        utc = t0 + n * 1000
        writer.append(pa.record_batch([
            pa.array(utc, pa.int64()).cast(UTC_TYPE), pa.array(utc - t0, pa.int64()), pa.array(n, pa.int64()),
            pa.array(np.zeros(len(n), np.int32)),
            pa.array((vc * LSB_V).astype(np.float32)), pa.array(vc),
            pa.array((ac * LSB_A).astype(np.float32)), pa.array(ac),
        ], schema=schema))
    writer.close("benchmark data written")
    return writer.folder


SUMMARY = """
from logger.review.summary import summarize
m = summarize(RUN, full=FULL)
c = {x.name: x for x in m.channels}
s = (m.samples, {k: round(c[k].minimum, 6) for k in c}, {k: round(c[k].maximum, 6) for k in c},
     round(m.rails[0].charge_ah, 6), round(m.rails[0].energy_wh, 6))
"""
STEPS = {
    "rollups": "FULL = False" + SUMMARY,
    "full": "FULL = True" + SUMMARY,
    "csv": """
import numpy as np, pandas as pd
n = 0; lo = {}; hi = {}; tot = {}; sq = {}; charge = energy = 0.0; prev = None; base = None
for chunk in pd.read_csv(CSV, chunksize=1_000_000):
    us = pd.to_datetime(chunk["utc"], utc=True).dt.as_unit("us").astype("int64").to_numpy()
    base = us[0] if base is None else base
    t = (us - base) / 1e6
    v, a = chunk["out_v"].to_numpy(), chunk["out_a"].to_numpy()
    if prev is not None:
        t, v, a = np.r_[prev[0], t], np.r_[prev[1], v], np.r_[prev[2], a]
    charge += np.trapezoid(a, t); energy += np.trapezoid(v * a, t)
    for name in ("out_v", "out_a"):
        x = chunk[name].to_numpy()
        lo[name] = min(lo.get(name, np.inf), x.min()); hi[name] = max(hi.get(name, -np.inf), x.max())
        tot[name] = tot.get(name, 0.0) + x.sum(); sq[name] = sq.get(name, 0.0) + (x * x).sum()
    n += len(chunk); prev = (t[-1], v[-1], a[-1])
s = (n, {k: round(float(x), 6) for k, x in lo.items()}, {k: round(float(x), 6) for k, x in hi.items()},
     round(charge / 3600, 6), round(energy / 3600, 6))
""",
}


PEAK_CODE = """
def PEAK():
    # The child's own high-water mark of resident memory (VmHWM starts afresh at exec; the rusage figure
    # would include the parent's memory copied at fork).
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
"""


def measure(step: str, run: Path, csv_path: Path) -> tuple[float, float, str]:
    """Wall time and peak resident memory (MB) of one step in a fresh process, and what it found."""
    code = (f"import time; from pathlib import Path; RUN = Path({str(run)!r}); CSV = {str(csv_path)!r}\n{PEAK_CODE}"
            f"t_start = time.perf_counter()\n{STEPS[step]}\nprint(time.perf_counter() - t_start)\n"
            "print(repr(s)[:300])\nprint(PEAK())")
    out = subprocess.run([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, check=True).stdout
    lines = out.strip().splitlines()
    return float(lines[0]), float(lines[2]), lines[1]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hours", type=float, default=24.0)
    parser.add_argument("--keep", type=Path, help="folder to make the run in and keep (reused when there)")
    args = parser.parse_args()
    root = args.keep or Path(tempfile.mkdtemp(prefix="railtap-bench-review-"))
    root.mkdir(parents=True, exist_ok=True)
    runs = sorted(p for p in root.iterdir() if p.is_dir() and (p / "_run.json").exists())
    started = time.perf_counter()
    run = runs[-1] if runs else make_run(root, args.hours)
    rows = json.loads((run / "_run.json").read_text())["rows"]
    print(f"run: {run} ({rows:,} rows, {sum(f.stat().st_size for f in run.iterdir()) / 1e6:.0f} MB; "
          f"{'reused' if runs else f'written in {time.perf_counter() - started:.0f} s'})")
    csv_path = root / "run.csv"
    if not csv_path.exists():
        from logger.review.export import export_samples

        started = time.perf_counter()
        export_samples(run, csv_path)
        print(f"exported as CSV for the pandas path: {csv_path.stat().st_size / 1e9:.2f} GB in "
              f"{time.perf_counter() - started:.0f} s")
    results = {}
    for step in ("rollups", "full", "csv"):
        results[step] = measure(step, run, csv_path)
        wall, peak, found = results[step]
        print(f"  {step:8} {wall:8.2f} s  peak {peak:7.0f} MB   found (rows, min, max, Ah, Wh): {found}")
    print(f"full scan / rollups:   {results['full'][0] / results['rollups'][0]:8.1f} x")
    print(f"pandas CSV / rollups:  {results['csv'][0] / results['rollups'][0]:8.1f} x  (target: at least 20 x)")
    print(f"pandas CSV / full scan: {results['csv'][0] / results['full'][0]:7.1f} x")


if __name__ == "__main__":
    main()
