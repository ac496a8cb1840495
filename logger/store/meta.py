"""Shape of ``_run.json``: what a run knows at start, and what is added when it ends.

A run's metadata is one flat JSON object: the caller's start fields (rig, device header, host, sources,
calibration, software version, start time) plus a few the store owns. The start part is also stored in every
Parquet file under the key ``railtap.run``, so a part copied away from its folder still says where it came
from.
"""

from __future__ import annotations

import json
from typing import Any

import pyarrow as pa

from logger.store.files import to_json
from logger.store.schema import describe_columns

FORMAT = "railtap-run/2"
"""2: the sample table has ``segment``, events ``device_start_us``/``device_end_us``, rollups ``device_s``."""
START_KEYS = ("format", "columns", "part_seconds")
END_KEYS = ("status", "stop_reason", "end_utc", "last_sample_utc", "rows", "parts", "events", "error")
STORE_KEYS = START_KEYS + END_KEYS
STATUSES = ("recording", "complete", "recovered", "failed")


def start_metadata(metadata: dict[str, Any], schema: pa.Schema, part_seconds: float) -> dict[str, Any]:
    """The start part of ``_run.json``: the caller's fields (as plain JSON values) plus format and columns."""
    plain = json.loads(to_json(metadata))
    return {**plain, "format": FORMAT, "columns": describe_columns(schema), "part_seconds": part_seconds}


def start_part(metadata: dict[str, Any]) -> dict[str, Any]:
    """The start part of a full ``_run.json`` (the fields that go into Parquet as ``railtap.run``)."""
    return {key: value for key, value in metadata.items() if key not in END_KEYS}


def finished_metadata(
    start: dict[str, Any],
    status: str,
    reason: str,
    end_utc: str | None,
    last_sample_utc: str | None,
    parts: list[dict[str, Any]],
    events: int,
) -> dict[str, Any]:
    """Full ``_run.json`` of a finished run (complete or recovered)."""
    if status not in STATUSES:
        raise ValueError(f"unknown run status {status!r}")
    return {
        **start,
        "status": status,
        "stop_reason": reason,
        "end_utc": end_utc,
        "last_sample_utc": last_sample_utc,
        "rows": sum(int(part["rows"]) for part in parts),
        "parts": parts,
        "events": events,
    }
