"""A folder of runs (a lab with many benches) as one dataset, and a one-line summary of each run.

Every run folder holds plain Parquet parts, so a folder of run folders is already a dataset: pyarrow reads it
with the run folder's name as a ``run`` column (directory partitioning) and skips the ``_`` files. Runs with
different channels are read under the union of their schemas; a channel a run does not have is null there.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq

from logger.review.summary import Summary, summarize
from logger.store.check import parts_dataset
from logger.store.files import StoreError
from logger.store.layout import parts_in


def run_folders(root: Path) -> list[Path]:
    """Folders directly under ``root`` that are runs with sealed parts, oldest first (by name: start time)."""
    root = Path(root)
    if not root.is_dir():
        raise StoreError(f"{root}: no such folder")
    return sorted(p for p in root.iterdir() if p.is_dir() and (p / "_run.json").exists() and parts_in(p))


def open_runs(root: Path) -> ds.Dataset:
    """All runs under ``root`` as one pyarrow dataset with a ``run`` column."""
    root = Path(root)
    runs = run_folders(root)
    if not runs:
        raise StoreError(f"{root}: no run folders with sealed parts here")
    files = [str(path) for run in runs for _, path in parts_in(run)]
    run_field = pa.schema([("run", pa.string())])
    schema = pa.unify_schemas([pq.read_schema(parts_in(run)[0][1]).remove_metadata() for run in runs] + [run_field])
    partitioning = ds.partitioning(run_field)
    return parts_dataset(files, schema=schema, partitioning=partitioning,
                      partition_base_dir=str(root))


@dataclass(frozen=True)
class RunLine:
    folder: Path
    summary: Summary | None
    problem: str = ""


def summarize_runs(root: Path) -> list[RunLine]:
    """Each run's summary from its rollups; a run that cannot be read gets its problem instead."""
    lines = []
    for run in run_folders(root):
        try:
            lines.append(RunLine(run, summarize(run)))
        except (StoreError, OSError, ValueError, pa.ArrowException) as exc:
            lines.append(RunLine(run, None, str(exc)))
    return lines


def runs_text(lines: list[RunLine]) -> str:
    """One row per run: when, how long, samples, events that matter, and each rail's charge and energy."""
    out = ["| run | duration | samples | brownouts | dropouts | gaps | rails |", "|---|---|---|---|---|---|---|"]
    for line in lines:
        s = line.summary
        if s is None:
            out.append(f"| {line.folder.name} | {line.problem} | | | | | |")
            continue
        count = {k: sum(e.count for e in s.events if e.kind == k) for k in ("brownout", "dropout")}
        rails = ", ".join(f"{r.rail} {r.charge_ah:.4g} Ah {r.energy_wh:.4g} Wh" for r in s.rails) or "-"
        name = line.folder.name + (f" (INCOMPLETE: {len(s.skipped)} damaged part(s) left out)" if s.skipped else "")
        out.append(f"| {name} | {s.duration_s / 3600:.2f} h | {s.samples:,} | {count['brownout']} "
                   f"| {count['dropout']} | {s.gaps} | {rails} |")
    return "\n".join(out)
