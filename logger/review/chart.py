"""What every chart of a run shares, whether drawn as a PNG or in the terminal: each channel's thresholds and
unit, how an event kind is shown, local time, and the folding of many rows into a fixed number of columns.

Nothing here imports matplotlib; the PNG plots, the terminal chart and the report all build on it.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta, tzinfo
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from logger.events.rules import rules_for
from logger.review.summary import run_pairs
from logger.rig import RigError, parse_rig
from logger.store.files import StoreError, read_run_json
from logger.store.layout import EVENTS_PARQUET, parts_in
from logger.store.rollup import gap_us, read_rollups

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
LINK_KINDS = ("frame_gap", "crc_burst", "link_lost", "device_reset")
"""Events of the link between device and host, as opposed to events on a rail."""
KIND_COLOURS = {
    "brownout": "#d9822b", "dropout": "#b3261e", "overvoltage": "#7b3fa0", "overcurrent": "#a8327a",
    "flicker": "#b89b00", "outside_cal": "#5f7f2a", "frame_gap": "#6b6b6b", "crc_burst": "#8a8a8a",
    "link_lost": "#3d3d3d", "device_reset": "#3d3d3d", "mark": "#1b6f8a",
}


@dataclass(frozen=True)
class Limits:
    """A channel's unit and thresholds as drawn: signed, so a negative rail's lines sit below zero."""

    unit: str
    low: float | None = None
    """Brownout threshold."""
    high: float | None = None
    """Overvoltage or overcurrent limit."""
    high_kind: str = ""
    negative: bool = False


def run_limits(folder: Path) -> dict[str, Limits]:
    """Each channel's unit and thresholds, from the rig the run recorded with (units only when that rig is
    missing or unreadable: an old run still plots)."""
    meta = read_run_json(folder)
    units = {c["name"]: c.get("unit") or "" for c in meta.get("channels_info", [])}
    try:
        rig = parse_rig(meta.get("rig", ""), f"{folder.name} rig", profiles=False)
    except (RigError, ValueError, TypeError):
        return {name: Limits(unit) for name, unit in units.items()}
    limits = {}
    for ch in rig.channels:
        rules = rules_for(ch)
        sign = -1.0 if ch.negative or (ch.nominal or 0.0) < 0 else 1.0
        high = rules.over_above if rules.over_above is not None else rules.current_above
        limits[ch.name] = Limits(
            unit=units.get(ch.name) or ch.unit or ("A" if ch.role == "amps" else "V"),
            low=None if rules.dip_below is None else sign * rules.dip_below,
            high=None if high is None else sign * high,
            high_kind="overvoltage" if rules.over_above is not None else "overcurrent" if high else "",
            negative=sign < 0)
    return limits


def run_rollups(folder: Path) -> pa.Table:
    """The run's per-second rollups, read with the rails and gap limit the summary uses, so a rollup rebuilt
    here (a missing one is written on first read) is the very one the summary would have built. A run without
    a single sample is refused."""
    meta = read_run_json(folder)
    if not parts_in(folder):
        raise StoreError(f"{folder}: no sealed parts; if the run was cut short, run `railtap recover {folder}`")
    rollups = read_rollups(folder, run_pairs(meta), gap_us(meta)).table
    if not rollups.num_rows or not pc.sum(rollups["count"]).as_py():
        raise StoreError(f"{folder}: no samples were recorded; nothing to draw")
    return rollups


def channel_names(rollups: pa.Table) -> list[str]:
    """The channels a rollup table covers, in recorded order."""
    return [name[: -len("_min")] for name in rollups.column_names if name.endswith("_min")]


def events_of(folder: Path) -> list[dict[str, Any]]:
    """The run's events as row dicts (kind, channel, start, end, duration_s, value, depth_pct, detail, id...)."""
    path = folder / EVENTS_PARQUET
    return pq.read_table(path).to_pylist() if path.exists() else []


def kind_colour(kind: str) -> str:
    return KIND_COLOURS.get(kind, "#555555")


def is_link(event: dict[str, Any]) -> bool:
    return event["kind"] in LINK_KINDS


_SHOW_UTC = [False]
"""Whether review outputs show UTC instead of this computer's local time (set once by ``--utc``)."""


def show_utc(on: bool) -> None:
    """Show every time of the review outputs (text, pictures, reports) in UTC instead of local time."""
    _SHOW_UTC[0] = on


def local_zone(at: datetime | None = None) -> tzinfo:
    """The zone times are shown in: UTC with ``--utc``, else this computer's time zone as the fixed offset in
    force at ``at`` (a run's own date, so summer time is right for data from another season), or now."""
    if _SHOW_UTC[0]:
        return UTC
    zone = (at or datetime.now(UTC)).astimezone().tzinfo
    return zone if zone is not None else UTC


def zone_text(zone: tzinfo) -> str:
    offset = datetime.now(zone).strftime("%z")
    return f"UTC{offset[:3]}:{offset[3:]}"


def zone_name(at: datetime | None = None) -> str:
    """What every output says its times are in: ``UTC``, or ``local time, UTC+01:00``."""
    return "UTC" if _SHOW_UTC[0] else f"local time, {zone_text(local_zone(at))}"


def local_text(moment: datetime, digits: int = 3) -> str:
    """A UTC moment in the shown zone (local time unless ``--utc``) with ``digits`` decimals of a second."""
    aware = moment if moment.tzinfo is not None else moment.replace(tzinfo=UTC)
    text = aware.astimezone(local_zone(aware)).strftime("%Y-%m-%d %H:%M:%S.%f")
    return text[: len(text) - 6 + digits] if digits else text[:-7]


def to_us(moment: datetime) -> int:
    """Microseconds since the epoch of a UTC moment."""
    aware = moment if moment.tzinfo is not None else moment.replace(tzinfo=UTC)
    return (aware - _EPOCH) // timedelta(microseconds=1)


def from_us(us: int) -> datetime:
    """The UTC moment ``us`` microseconds after the epoch."""
    return _EPOCH + timedelta(microseconds=int(us))


def utc_us(column: pa.ChunkedArray | pa.Array) -> np.ndarray:
    """A timestamp[us] column as int64 microseconds since the epoch."""
    return np.asarray(column.cast(pa.int64()).to_numpy(), dtype=np.int64)


def event_label(event: dict[str, Any]) -> str:
    """One line naming an event: ``#3 brownout on out_v at 2026-12-02 01:10:52.196 local time, 0.400 s: ...``."""
    lasted = f", {event['duration_s']:.3f} s" if event.get("duration_s") is not None else ""
    detail = f": {event['detail']}" if event.get("detail") else ""
    where = event["channel"] or "the link"
    return f"#{event['id']} {event['kind']} on {where} at {local_text(event['start'])} local time{lasted}{detail}"


def fold(t_us: np.ndarray, lo: np.ndarray, hi: np.ndarray, start_us: int, stop_us: int,
         columns: int) -> tuple[np.ndarray, np.ndarray]:
    """The lowest and highest value in each of ``columns`` equal slices of time from ``start_us`` to
    ``stop_us``; a slice holding no rows is NaN (a gap, drawn as one)."""
    width = max(stop_us - start_us, 1) / columns
    index = np.clip(((t_us - start_us) / width).astype(np.int64), 0, columns - 1)
    low, high = np.full(columns, np.nan), np.full(columns, np.nan)
    np.fmin.at(low, index, lo)
    np.fmax.at(high, index, hi)
    return low, high


def fold_mean(t_us: np.ndarray, mean: np.ndarray, count: np.ndarray, start_us: int, stop_us: int,
              columns: int) -> np.ndarray:
    """The count-weighted mean of each of ``columns`` equal slices of time (NaN where empty)."""
    width = max(stop_us - start_us, 1) / columns
    index = np.clip(((t_us - start_us) / width).astype(np.int64), 0, columns - 1)
    have = count > 0
    total = np.bincount(index[have], weights=(mean * count)[have], minlength=columns)
    weight = np.bincount(index[have], weights=count[have], minlength=columns)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(weight > 0, total / weight, np.nan)
