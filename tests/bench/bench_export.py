"""Export benchmark: a day-long run written out as CSV and JSON lines, each beside a peer measured in the same
run (not a test).

1. Makes (once, then reuses) a 24 h, 1 kHz, two-channel run (86.4 M rows) with ``bench_review.make_run``, in a
   child process of its own so this parent stays small (a child's ``ru_maxrss`` starts from its parent's).
2. Runs each step in a fresh process and prints its output size, MB/s of output, rows/s, wall time, CPU time
   (user + system) and peak resident memory (the child's ``ru_maxrss``):
   a. ``railtap csv``: ``export_samples(run, out.csv)``, every sample of ``utc``, ``out_v`` and ``out_a``;
   b. ``pyarrow csv``: the peer, pyarrow's own ``CSVWriter`` over the same columns streamed from each part's
      ``ParquetFile.iter_batches``: what the library alone does with the same bytes in and out;
   b'. ``pyarrow int-utc``: the same with ``utc`` written as integer microseconds, not the same bytes: the
      writer's cost without Arrow's time text (a floor for (a), which still writes that text);
   c. ``railtap jsonl``: ``export_samples`` to JSON lines for the first ``--json-until`` of the run;
   d. ``per-row jsonl``: the peer for (c), the same lines built with a Python string per row.
3. Says whether (a) and (b), and (c) and (d), wrote the same bytes, and prints the ratios.

Goal: CSV at least 50 MB/s of output and under 300 MB peak resident memory. Run with
``.venv/bin/python tests/bench/bench_export.py [--hours 24] [--keep DIR] [--json-until 1h]``; put another
checkout's ``logger`` first on ``PYTHONPATH`` to measure it (the children print which one they import).
"""

from __future__ import annotations

import argparse
import filecmp
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
GOAL_MB_S = 50.0
GOAL_PEAK_MB = 300.0

MAKE = """
import sys; sys.path.insert(0, {here!r})
from pathlib import Path
from bench_review import make_run
print(make_run(Path({root!r}), {hours!r}))
"""

CHILD = """
import json, os, resource, sys, time
from pathlib import Path
import logger
RUN, OUT, UNTIL = Path({run!r}), Path({out!r}), {until!r}
started, cpu = time.perf_counter(), os.times()
{body}
cpu_now = os.times()
print(json.dumps({{"wall_s": time.perf_counter() - started,
       "cpu_s": cpu_now.user + cpu_now.system - cpu.user - cpu.system,
       "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
       "rows": rows, "bytes": OUT.stat().st_size, "code": os.path.dirname(logger.__file__)}}))
"""

STEPS = {
    "railtap csv": """
from logger.review.export import export_samples
rows = export_samples(RUN, OUT, channels=["out_v", "out_a"])
""",
    "pyarrow csv": """
import pyarrow.csv as pacsv, pyarrow.parquet as pq
rows = 0
with open(OUT, "wb") as sink:
    writer = None
    for part in sorted(RUN.glob("part-*.parquet")):
        for batch in pq.ParquetFile(part).iter_batches(columns=["utc", "out_v", "out_a"]):
            writer = writer or pacsv.CSVWriter(sink, batch.schema)
            writer.write_batch(batch)
            rows += batch.num_rows
    writer.close()
    sink.flush()
    os.fsync(sink.fileno())
""",
    "pyarrow int-utc": """
import pyarrow as pa, pyarrow.csv as pacsv, pyarrow.parquet as pq
rows = 0
with open(OUT, "wb") as sink:
    writer = None
    for part in sorted(RUN.glob("part-*.parquet")):
        for batch in pq.ParquetFile(part).iter_batches(columns=["utc", "out_v", "out_a"]):
            batch = pa.record_batch([batch.column(0).cast(pa.int64()), *batch.columns[1:]], names=batch.schema.names)
            writer = writer or pacsv.CSVWriter(sink, batch.schema)
            writer.write_batch(batch)
            rows += batch.num_rows
    writer.close()
    sink.flush()
    os.fsync(sink.fileno())
""",
    "railtap jsonl": """
from logger.review.export import export_samples, parse_when, run_start
rows = export_samples(RUN, OUT, channels=["out_v", "out_a"], end=parse_when(UNTIL, run_start(RUN)))
""",
    "per-row jsonl": """
import json
import pyarrow as pa, pyarrow.compute as pc, pyarrow.parquet as pq
from logger.review.export import parse_when, run_start
end = pa.scalar(parse_when(UNTIL, run_start(RUN)), pa.timestamp("us", tz="UTC"))
rows = 0
with open(OUT, "wb") as sink:
    for part in sorted(RUN.glob("part-*.parquet")):
        for batch in pq.ParquetFile(part).iter_batches(columns=["utc", "out_v", "out_a"]):
            batch = batch.filter(pc.less_equal(batch.column("utc"), end))
            if batch.num_rows == 0:
                continue
            utc = pc.strftime(batch.column("utc"), format="%Y-%m-%dT%H:%M:%SZ").to_pylist()
            keys = [json.dumps(n) for n in ("out_v", "out_a")]
            cols = [pc.cast(batch.column(n), pa.string()).to_pylist() for n in ("out_v", "out_a")]
            lines = ['{"utc": "' + t + '", ' + ", ".join(f"{k}: {v}" for k, v in zip(keys, row)) + "}"
                     for t, *row in zip(utc, *cols)]
            sink.write(("\\n".join(lines) + "\\n").encode())
            rows += batch.num_rows
    sink.flush()
    os.fsync(sink.fileno())
""",
}


def find_or_make_run(root: Path, hours: float) -> Path:
    """The newest run under ``root``, or a new one made by ``bench_review.make_run`` in a child process."""
    runs = sorted(p for p in root.iterdir() if p.is_dir() and (p / "_run.json").exists())
    if runs:
        return runs[-1]
    code = MAKE.format(here=str(HERE), root=str(root), hours=hours)
    out = subprocess.run([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, check=True).stdout
    return Path(out.strip().splitlines()[-1])


def measure(step: str, run: Path, out: Path, until: str) -> dict[str, float]:
    """Run one step in a fresh process; its figures as it printed them."""
    code = CHILD.format(run=str(run), out=str(out), until=until, body=STEPS[step])
    text = subprocess.run([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, check=True).stdout
    return json.loads(text.strip().splitlines()[-1])


def line(step: str, got: dict[str, float]) -> str:
    """One step's figures on one line."""
    return (f"  {step:16} {got['bytes'] / 1e6:8.0f} MB  {got['bytes'] / 1e6 / got['wall_s']:6.1f} MB/s  "
            f"{got['rows'] / got['wall_s'] / 1e6:5.2f} M rows/s  wall {got['wall_s']:6.1f} s  "
            f"cpu {got['cpu_s']:6.1f} s  peak {got['peak_mb']:5.0f} MB")


def pair(first: str, peer: str, suffix: str, run: Path, scratch: Path, until: str) -> dict[str, dict[str, float]]:
    """Measure a step and its peer one after the other, print both, whether they wrote the same bytes, and the
    ratios; the files are deleted afterwards."""
    results, outs = {}, []
    for step in (first, peer):
        outs.append(scratch / f"{step.replace(' ', '-')}{suffix}")
        results[step] = measure(step, run, outs[-1], until)
        print(line(step, results[step]), flush=True)
    same = filecmp.cmp(outs[0], outs[1], shallow=False)
    a, b = results[first], results[peer]
    print(f"  {first} / {peer}: wall {a['wall_s'] / b['wall_s']:.2f} x, cpu {a['cpu_s'] / b['cpu_s']:.2f} x, "
          f"peak {a['peak_mb'] / b['peak_mb']:.2f} x; same bytes: {same}")
    for out in outs:
        out.unlink()
    return results


def load() -> str:
    """The load averages over 1, 5 and 15 minutes."""
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hours", type=float, default=24.0)
    parser.add_argument("--keep", type=Path, help="folder to make the run in and keep (reused when there)")
    parser.add_argument("--json-until", default="1h", help="JSON lines up to this offset (default 1h)")
    args = parser.parse_args()
    root = args.keep or Path(tempfile.mkdtemp(prefix="railtap-bench-export-"))
    root.mkdir(parents=True, exist_ok=True)
    run = find_or_make_run(root, args.hours)
    print(f"run: {run}")
    print(f"goal: railtap csv at least {GOAL_MB_S:.0f} MB/s of output and under {GOAL_PEAK_MB:.0f} MB peak RSS")
    print(f"load before: {load()} on {os.cpu_count()} cores")
    with tempfile.TemporaryDirectory(prefix="railtap-bench-export-out-", dir=root) as scratch:
        csv = pair("railtap csv", "pyarrow csv", ".csv", run, Path(scratch), args.json_until)["railtap csv"]
        floor = measure("pyarrow int-utc", run, Path(scratch) / "int-utc.csv", args.json_until)
        (Path(scratch) / "int-utc.csv").unlink()
        print(line("pyarrow int-utc", floor))
        print(f"  railtap csv / pyarrow int-utc (not the same bytes): wall {csv['wall_s'] / floor['wall_s']:.2f} x, "
              f"cpu {csv['cpu_s'] / floor['cpu_s']:.2f} x", flush=True)
        pair("railtap jsonl", "per-row jsonl", ".jsonl", run, Path(scratch), args.json_until)
    rate = csv["bytes"] / 1e6 / csv["wall_s"]
    print(f"goal: {rate:.1f} MB/s (at least {GOAL_MB_S:.0f}: {'met' if rate >= GOAL_MB_S else 'NOT met'}), "
          f"peak {csv['peak_mb']:.0f} MB (under {GOAL_PEAK_MB:.0f}: "
          f"{'met' if csv['peak_mb'] < GOAL_PEAK_MB else 'NOT met'})")
    print(f"code: {csv['code']}; load after: {load()}")


if __name__ == "__main__":
    main()
