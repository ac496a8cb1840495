"""Review benchmark: a day-long run summarised by railtap and by two peers, side by side in one run (not a test).

The goal measured: ``railtap review --full`` of a 24 h, 1 kHz, two-channel run within 1.5 x DuckDB's time for the
same per-channel figures over the same Parquet part files, at least 2 x faster than a chunked pyarrow + numpy peer
doing the same, and under 500 MB peak resident memory.

1. Makes (once, then reuses with ``--keep``) a 24 h, 1 kHz, two-channel run (86.4 M rows) through railtap's own
   RunWriter, so its parts, rollups and ``_run.json`` are what a real recording leaves: a 12 V rail with 100 Hz
   ripple and noise, a load stepping between 1 and 3 A, a dip every ten minutes.
2. Runs each of these in a fresh process that imports only what it uses (so its start-up, CPU and peak memory are
   its own):
   a. ``railtap review --full RUN``: the command itself, imports, event table and printed summary included;
   b. DuckDB, one SQL statement over the part files: count, min, mean, max and sample standard deviation per
      channel, and the time integral by the trapezoid rule on ``device_us`` with railtap's gap rule
      (:func:`logger.core.gaps.integrated`), the previous sample taken with ``lag()`` over the run ordered by
      ``(segment, device_us)``;
   c. DuckDB, the same statement once per part, combined in Python with the interval between parts added: the
      sort behind ``lag()`` stays one part big, which costs far less memory than (b);
   d. a chunked pyarrow + numpy peer: ``ParquetFile.iter_batches`` over the parts, numpy reductions, the last
      sample carried across batches for the integral; at pyarrow's default batch (65,536 rows) and at 1 M rows;
   e. ``railtap review RUN``: the summary from the per-second rollups, for scale (issue 6 asked at most 2 s).
3. Prints the goal figures first, then each step's wall time (the whole process, and the work alone after its
   imports), CPU time (user + sys of the whole process, every thread), peak resident memory, and the largest
   relative difference between its figures and those of ``review --full`` (the comparison is only fair if they
   compute the same thing).

railtap computes more than the peers (per-second rows: ripple, excursions, rail energy, the events), so the
goal is a bar for that whole job against the bare figures. Peak memory is the child's own ``VmHWM``: Linux carries
a process's high-water mark across ``exec``, so ``ru_maxrss`` from ``wait4`` would report the bench's own size
for a child smaller than it (measured: a 10 MB child of a 1.5 GB parent reports 1.5 GB). CPU comes from
``wait4``.

The earlier pandas-over-CSV path is gone: it needed an export of several GB first and mostly measured CSV
parsing, a file format railtap does not store; the two Parquet peers answer the question it stood for (is review
fast for what it reads) on the same files.

DuckDB is a bench-only extra: ``.venv/bin/pip install -e '.[bench]'``. Run with
``.venv/bin/python tests/bench/bench_review.py [--hours 24] [--keep DIR]``.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import os
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from itertools import pairwise
from pathlib import Path
from typing import Any

RATE_HZ = 1000
CHANNELS = ["out_v", "out_a"]
LSB_V = 3.3 / 4096 * 11.0
LSB_A = 3.3 / 4096 / (0.01 * 50.0)
FIGURES = ("min", "mean", "max", "std", "integral")
DEFAULT_BATCH = 65_536
"""pyarrow's default ``iter_batches`` size."""
BIG_BATCH = 1 << 20
AGREE = 1e-6
"""Largest relative difference from railtap's figures taken as rounding (sums of squares lose about 1e-9)."""

Figures = dict[str, dict[str, float]]
"""Per channel: count, min, mean, max, std and integral."""


def make_run(root: Path, hours: float) -> Path:
    """Write the day through RunWriter, ten minutes of samples per call."""
    import numpy as np
    import pyarrow as pa

    from logger.sim.simple import RIG_TOML
    from logger.store import new_run, sample_schema
    from logger.store.schema import UTC_TYPE

    meta = {"rig": RIG_TOML, "channels_info": [{"name": "out_v", "unit": "V"}, {"name": "out_a", "unit": "A"}],
            "power_pairs": [{"rail": "out", "volts": "out_v", "amps": "out_a"}],
            "device_header": "H fw=bench ver=1 bits=12 vref_mv=3300 rate_hz=1000 ch=a0,a1 why=boot",
            "link": {"rate_hz": RATE_HZ}}
    schema = sample_schema(CHANNELS)
    writer = new_run(root, "bench-day", schema, meta, part_seconds=3600.0, flush_seconds=3600.0)
    rng = np.random.default_rng(24)
    t0 = 1_800_000_000_000_000
    step = 600_000  # 10 minutes of samples per batch
    total = int(hours * 3600 * RATE_HZ)
    for first in range(0, total, step):
        n = np.arange(first, min(first + step, total))
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


# -- the steps, each run in a child process ----------------------------------------------------------------


def railtap_review(run: Path, full: bool) -> Figures:
    """``railtap review [--full] RUN`` through the command-line entry point (its printout goes nowhere); the
    summary it printed is kept by wrapping ``summarize`` (which the command looks up when it runs)."""
    import logger.review.summary as summary
    from logger.cli import main as railtap

    kept = []
    original = summary.summarize

    def keep(*args: Any, **kwargs: Any) -> summary.Summary:
        kept.append(original(*args, **kwargs))
        return kept[-1]

    summary.summarize = keep
    code = railtap(["review", *(["--full"] if full else []), str(run)])
    if code != 0:
        raise SystemExit(f"railtap review exited {code}")
    return {c.name: {"count": c.samples, "min": c.minimum, "mean": c.mean, "max": c.maximum, "std": c.std,
                     "integral": c.integral} for c in kept[0].channels}


def run_facts(run: Path) -> tuple[list[Path], list[str], int]:
    """The run's part files in order, its channels and its gap rule's limit in µs, read from ``_run.json``
    (plain JSON, so the peers import nothing of railtap's)."""
    meta = json.loads((run / "_run.json").read_text())
    gap_s = meta.get("gap_s") or 0.05
    return [run / p["file"] for p in meta["parts"]], [c["name"] for c in meta["channels_info"]], round(gap_s * 1e6)


def duckdb_samples(files: list[Path], channels: list[str], numbered: bool = False) -> str:
    """Each sample beside the one before it: ``lag()`` over the files in time order (``rn`` numbering them when
    ``numbered``, so a caller can pick the first and last)."""
    listed = ", ".join(f"'{f}'" for f in files)
    values = ", ".join(f"{c}::DOUBLE AS {c}, lag({c}::DOUBLE) OVER w AS {c}_0" for c in channels)
    number = "row_number() OVER w AS rn, " if numbered else ""
    return (f"SELECT device_us, seq, segment, {number}lag(segment) OVER w AS segment_0, "
            f"lag(seq) OVER w AS seq_0, device_us - lag(device_us) OVER w AS dt, {values} "
            f"FROM read_parquet([{listed}]) WINDOW w AS (ORDER BY segment, device_us)")


def duckdb_integral(channel: str, gap_us: int) -> str:
    """The trapezoid sum over the intervals railtap's gap rule integrates, in unit x seconds."""
    ok = f"segment = segment_0 AND dt > 0 AND (seq - seq_0 = 1 OR dt <= {gap_us})"
    return f"sum(CASE WHEN {ok} THEN ({channel} + {channel}_0) * dt END) * 0.5e-6"


def duckdb_whole(run: Path) -> Figures:
    """DuckDB, one statement over every part."""
    import duckdb

    files, channels, gap_us = run_facts(run)
    figures = ", ".join(f"min({c}), avg({c}), max({c}), stddev_samp({c}), {duckdb_integral(c, gap_us)}"
                        for c in channels)
    sql = f"SELECT count(*), {figures} FROM ({duckdb_samples(files, channels)})"
    row = duckdb.connect().execute(sql).fetchone()
    return {c: {"count": row[0], **dict(zip(FIGURES, row[1 + 5 * k : 6 + 5 * k], strict=True))}
            for k, c in enumerate(channels)}


def duckdb_per_part(run: Path) -> Figures:
    """DuckDB, a statement per part giving sums and its first and last samples; combined here, with the interval
    from one part's last sample to the next part's first added by the same gap rule."""
    import duckdb

    files, channels, gap_us = run_facts(run)
    ends = "".join(f", arg_min({x}, rn), arg_max({x}, rn)" for x in ("device_us", "seq", "segment", *channels))
    sums = ", ".join(f"min({c}), max({c}), sum({c}), sum({c} * {c}), {duckdb_integral(c, gap_us)}" for c in channels)
    con = duckdb.connect()
    rows = [con.execute(f"SELECT count(*){ends}, {sums} FROM ({duckdb_samples([f], channels, True)})").fetchone()
            for f in files]
    out = {}
    for k, c in enumerate(channels):
        at, first, last = 7 + 2 * len(channels) + 5 * k, 7 + 2 * k, 8 + 2 * k
        n, total, squares = (sum(r[i] for r in rows) for i in (0, at + 2, at + 3))
        integral = sum(r[at + 4] or 0.0 for r in rows)
        for a, b in pairwise(rows):  # a part's last (device_us, seq, segment) at 2, 4, 6, the next's first at 1, 3, 5
            dt = b[1] - a[2]
            if b[5] == a[6] and dt > 0 and (b[3] - a[4] == 1 or dt <= gap_us):
                integral += (a[last] + b[first]) * dt * 0.5e-6
        out[c] = {"count": n, "min": min(r[at] for r in rows), "mean": total / n, "max": max(r[at + 1] for r in rows),
                  "std": ((squares - total * total / n) / (n - 1)) ** 0.5, "integral": integral}
    return out


def chunked(run: Path, batch_rows: int) -> Figures:
    """pyarrow + numpy: each part's record batches in turn, running sums, the last sample carried over."""
    import numpy as np
    import pyarrow.parquet as pq

    files, channels, gap_us = run_facts(run)
    k = len(channels)
    n, lo, hi = 0, np.full(k, np.inf), np.full(k, -np.inf)
    total, squares, integral = np.zeros(k), np.zeros(k), np.zeros(k)
    last = None
    for f in files:
        for b in pq.ParquetFile(f).iter_batches(batch_size=batch_rows, columns=["device_us", "seq", "segment",
                                                                                   *channels]):
            t, seq, seg = (b.column(i).to_numpy() for i in range(3))
            x = np.vstack([b.column(c).to_numpy() for c in channels]).astype(np.float64)
            n, lo, hi = n + len(t), np.minimum(lo, x.min(axis=1)), np.maximum(hi, x.max(axis=1))
            total, squares = total + x.sum(axis=1), squares + np.einsum("ij,ij->i", x, x)
            if last is not None:
                t, seq, seg, x = np.r_[last[0], t], np.r_[last[1], seq], np.r_[last[2], seg], np.hstack([last[3], x])
            dt = np.diff(t)
            ok = (np.diff(seg) == 0) & (dt > 0) & ((np.diff(seq) == 1) | (dt <= gap_us))
            integral += (x[:, 1:] + x[:, :-1]) @ np.where(ok, dt, 0) * 0.5e-6
            last = (t[-1], seq[-1], seg[-1], x[:, -1:])
    std = np.sqrt((squares - total * total / n) / (n - 1))
    return {c: {"count": n, "min": float(lo[j]), "mean": float(total[j] / n), "max": float(hi[j]),
                "std": float(std[j]), "integral": float(integral[j])} for j, c in enumerate(channels)}


STEPS = {
    "railtap review --full": lambda run: railtap_review(run, full=True),
    "DuckDB, one query": duckdb_whole,
    "DuckDB, a query per part": duckdb_per_part,
    "chunked, 65,536-row batches": lambda run: chunked(run, DEFAULT_BATCH),
    "chunked, 1 M-row batches": lambda run: chunked(run, BIG_BATCH),
    "railtap review (rollups)": lambda run: railtap_review(run, full=False),
}
REFERENCE = "railtap review --full"
NEEDS_DUCKDB = ("DuckDB, one query", "DuckDB, a query per part")


def peak_mb() -> float:
    """This process's own high-water mark of resident memory (``VmHWM`` starts afresh at exec)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def child(step: str, run: Path, out: Path) -> None:
    """Run one step in this (fresh) process and write what it found, its work time and peak memory to ``out``."""
    started = time.perf_counter()
    found = STEPS[step](run)
    out.write_text(json.dumps({"work_s": time.perf_counter() - started, "peak_mb": peak_mb(), "figures": found}))


# -- the parent -------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Measured:
    """One step measured from outside (wall, CPU) and inside (work time, peak memory, figures)."""

    step: str
    wall_s: float
    work_s: float
    cpu_s: float
    peak_mb: float
    figures: Figures


def measure(step: str, run: Path) -> Measured:
    """Run ``step`` in a fresh process; its whole wall time and its own CPU time (every thread) from ``wait4``."""
    with tempfile.NamedTemporaryFile(suffix=".json") as out:
        started = time.perf_counter()
        proc = subprocess.Popen([sys.executable, __file__, "--step", step, str(run), out.name],
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        err = proc.stderr.read()
        _, status, usage = os.wait4(proc.pid, 0)
        proc.returncode = os.waitstatus_to_exitcode(status)
        wall = time.perf_counter() - started
        if proc.returncode != 0:
            raise SystemExit(f"{step} failed ({proc.returncode}):\n{err.decode(errors='replace')}")
        got = json.loads(Path(out.name).read_text())
    return Measured(step, wall, got["work_s"], usage.ru_utime + usage.ru_stime, got["peak_mb"], got["figures"])


def largest_difference(figures: Figures, reference: Figures) -> tuple[float, str]:
    """The largest relative difference between two sets of figures, and which figure it is."""
    worst, where = 0.0, "all equal"
    for channel, ref in reference.items():
        for name in FIGURES:
            a, b = figures[channel][name], ref[name]
            diff = abs(a - b) / max(abs(b), 1e-300)
            if diff > worst:
                worst, where = diff, f"{channel} {name}"
        if figures[channel]["count"] != ref["count"]:
            return float("inf"), f"{channel} count {figures[channel]['count']} vs {ref['count']}"
    return worst, where


def print_goal(results: dict[str, Measured]) -> None:
    """The goal's three figures first, each beside its bar (ratios of whole-process wall times; CPU in brackets)."""
    full = results[REFERENCE]
    print("\ngoal: review --full within 1.5 x DuckDB, at least 2 x faster than the chunked peer, under 500 MB")
    ducks = [results[s] for s in NEEDS_DUCKDB if s in results]
    if ducks:
        best = min(ducks, key=lambda m: m.wall_s)
        print(f"  {'review --full / ' + best.step + ' (the faster)':56} {full.wall_s / best.wall_s:6.2f} x   "
              f"at most 1.5   (CPU {full.cpu_s / best.cpu_s:.2f} x)")
    for step in ("chunked, 65,536-row batches", "chunked, 1 M-row batches"):
        peer = results[step]
        print(f"  {step + ' / review --full':56} {peer.wall_s / full.wall_s:6.2f} x   "
              f"at least 2    (CPU {peer.cpu_s / full.cpu_s:.2f} x)")
    print(f"  {'review --full peak resident memory':56} {full.peak_mb:6.0f} MB  under 500")


def print_table(results: dict[str, Measured]) -> None:
    """Every step's figures, and how far its answers are from those of ``review --full``."""
    reference = results[REFERENCE].figures
    print(f"\n  {'step':30} {'wall s':>7} {'work s':>7} {'CPU s':>7} {'peak MB':>8}   largest difference from --full")
    for m in results.values():
        diff, where = largest_difference(m.figures, reference)
        agree = "(the reference)" if m.step == REFERENCE else f"{diff:.1e} ({where})"
        if diff > AGREE:
            agree += f"  DISAGREES (more than {AGREE:g}): the comparison is not of the same figures"
        print(f"  {m.step:30} {m.wall_s:7.2f} {m.work_s:7.2f} {m.cpu_s:7.2f} {m.peak_mb:8.0f}   {agree}")
    print("  (wall: the whole process; work: after its imports; CPU: user + sys of the whole process, all threads)")


def the_run(root: Path, hours: float) -> Path:
    """The run kept in ``root``, made first if there is none."""
    runs = sorted(p for p in root.iterdir() if p.is_dir() and (p / "_run.json").exists())
    started = time.perf_counter()
    run = runs[-1] if runs else make_run(root, hours)
    rows = json.loads((run / "_run.json").read_text())["rows"]
    print(f"run: {run} ({rows:,} rows, {sum(f.stat().st_size for f in run.iterdir()) / 1e6:.0f} MB; "
          f"{'reused' if runs else f'written in {time.perf_counter() - started:.0f} s'})")
    return run


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hours", type=float, default=24.0)
    parser.add_argument("--keep", type=Path, help="folder to make the run in and keep (reused when there)")
    parser.add_argument("--step", nargs=3, metavar=("STEP", "RUN", "OUT"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.step:
        child(args.step[0], Path(args.step[1]), Path(args.step[2]))
        return
    root = args.keep or Path(tempfile.mkdtemp(prefix="railtap-bench-review-"))
    root.mkdir(parents=True, exist_ok=True)
    run = the_run(root, args.hours)
    steps = list(STEPS)
    if importlib.util.find_spec("duckdb") is None:
        print("DuckDB is not installed, so its steps are left out: .venv/bin/pip install -e '.[bench]'")
        steps = [s for s in steps if s not in NEEDS_DUCKDB]
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())} ({os.cpu_count()} cores)", flush=True)
    results = {}
    for step in steps:
        results[step] = measure(step, run)
        print(f"  measured {step}: {results[step].wall_s:.1f} s", file=sys.stderr, flush=True)
    print(f"load average after:  {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print_goal(results)
    print_table(results)


if __name__ == "__main__":
    main()
