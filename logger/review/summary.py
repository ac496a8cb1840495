"""What happened in a run, in numbers: from the per-second rollups (fast) or a full-rate scan (exact).

Both paths fold the same per-second rows (a full scan just builds them from every sample again), so they agree
to rounding. Per channel: samples, min, mean, max and standard deviation (variances combined exactly from the
seconds' squared deviations), ripple over one-second windows (peak-to-peak and the RMS of the AC part about
each window's trend, typical and worst, leaving out windows an event touched or a step moved), the largest
excursion in a second, the time integral; per rail: charge (Ah) and energy (Wh) by the trapezoid rule on the
samples' own timestamps. From the event table: time below the brownout threshold and above the overvoltage one
(as the detectors timed them), gaps, and the events by kind with counts, worst depth and longest duration.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from logger.figures import channel_resolution
from logger.rig import RigError, parse_rig
from logger.store.files import StoreError, read_run_json
from logger.store.layout import EVENTS_PARQUET, parts_in
from logger.store.rollup import Pair, gap_us, last_sample, pairs_of, read_rollups
from logger.wire import DeviceHeader

GAP_KINDS = ("frame_gap", "link_lost")
FAULTS = ("brownout", "dropout", "overvoltage", "overcurrent", "flicker")


@dataclass(frozen=True)
class ChannelStats:
    name: str
    unit: str
    samples: int
    minimum: float
    mean: float
    maximum: float
    std: float
    ripple_pp: tuple[float, float]
    """Peak-to-peak within one-second windows that no event touched: (median, largest)."""
    ripple_rms: tuple[float, float]
    """RMS about each one-second window's straight-line trend, in windows no event touched: (median, largest)."""
    integral: float
    """Time integral of the value, unit x seconds."""
    below_s: float = 0.0
    """Time in brownouts and dropouts."""
    above_s: float = 0.0
    """Time in overvoltage or overcurrent."""
    resolution: float | None = None
    """One converter step in the channel's unit (the rig's scaling): what its figures are printed to."""
    excursion: float = float("nan")
    """The largest lowest-to-highest range within one second, events and steps included."""


@dataclass(frozen=True)
class RailTotals:
    rail: str
    charge_ah: float
    energy_wh: float


@dataclass(frozen=True)
class KindStats:
    kind: str
    channel: str | None
    count: int
    worst_depth_pct: float | None
    worst_value: float | None
    longest_s: float | None


@dataclass(frozen=True)
class Summary:
    folder: Path
    status: str
    stop_reason: str
    start_utc: str | None
    end_utc: str | None
    duration_s: float
    samples: int
    gaps: int
    gap_s: float
    channels: list[ChannelStats]
    rails: list[RailTotals]
    events: list[KindStats]
    calibration: dict[str, str]
    link: dict[str, Any] = field(default_factory=dict)
    source: str = "rollups"
    skipped: tuple[str, ...] = ()
    """Parts left out because they cannot be read, one line each: the figures are then incomplete."""


def summarize(folder: Path, *, full: bool = False, progress: Callable[[int, int], None] | None = None) -> Summary:
    """Summarise the run in ``folder``: from its rollups, or (``full``) from every sample."""
    meta = read_run_json(folder)
    if not parts_in(folder):
        raise StoreError(f"{folder}: no sealed parts; if the run was cut short, run `railtap recover {folder}`")
    pairs = run_pairs(meta)
    rollups = read_rollups(folder, pairs, gap_us(meta), full=full, progress=progress if full else None)
    if not rollups.table.num_columns:
        raise StoreError(f"no part of {folder} can be read: " + rollups.skipped[0])
    table = rollups.table
    events = pq.read_table(folder / EVENTS_PARQUET) if (folder / EVENTS_PARQUET).exists() else None
    units = {c["name"]: c.get("unit", "") for c in meta.get("channels_info", [])}
    steps = resolutions(meta)
    channels = [n for n in units if f"{n}_int" in table.column_names] or _channels_in(table)
    utc = table["utc"]
    kinds = _kinds(events)
    gaps = [k for k in kinds if k.kind in GAP_KINDS]
    spans = [(p.get("first_utc"), p.get("last_utc")) for p in meta.get("parts", []) if p.get("first_utc")]
    first, last = (spans[0][0], spans[-1][1]) if spans else (meta.get("start_utc"), meta.get("end_utc"))
    return Summary(
        folder=folder, status=str(meta.get("status")), stop_reason=str(meta.get("stop_reason", "")),
        start_utc=first, end_utc=last, duration_s=_device_span_s(folder, first, last),
        samples=int(table["count"].to_numpy().sum()) if len(utc) else 0,
        gaps=sum(k.count for k in gaps), gap_s=sum(_total_s(events, k.kind) for k in gaps),
        channels=[replace(_channel(table, c, units.get(c, ""), events), resolution=steps.get(c)) for c in channels],
        rails=[_rail(table, p) for p in pairs],
        events=kinds,
        calibration={c: _calibration_text(meta.get("calibration", {}).get(c))
                     + _changes_text(meta.get("calibration_changes", []), c) for c in channels},
        link=meta.get("link", {}),
        source="full-rate scan" if full else "per-second rollups",
        skipped=rollups.skipped,
    )


def run_pairs(meta: dict[str, Any]) -> list[Pair]:
    """A run's volts/amps pairs: as kept in ``_run.json``, else from the rig kept there (runs recorded before
    the pairs were kept)."""
    if pairs_of(meta):
        return pairs_of(meta)
    try:
        rig = parse_rig(meta.get("rig") or "", "the rig kept in _run.json", profiles=False)
    except RigError:
        return []
    return [Pair(p.rail, rig.channels[p.volts].name, rig.channels[p.amps].name, p.sign) for p in rig.power_pairs()]


def resolutions(meta: dict[str, Any]) -> dict[str, float]:
    """Each channel's converter step in its unit, from the rig and device header kept in ``_run.json`` (none
    for a run that kept neither)."""
    try:
        rig = parse_rig(meta.get("rig") or "", "the rig kept in _run.json", profiles=False)
        header = DeviceHeader.parse(str(meta.get("device_header", "")))
    except (RigError, ValueError):
        return {}
    return {ch.name: channel_resolution(ch, header.adc_bits, header.vref_mv) for ch in rig.channels}


def _device_span_s(folder: Path, first: str | None, last: str | None) -> float:
    """From the first sample to the last on the device clock (the axis every duration is measured on); between
    the UTC labels only for a run without a readable sample at either end."""
    parts = [path for _, path in parts_in(folder)]
    try:
        head = pq.ParquetFile(parts[0]) if parts else None
        if head is not None and head.metadata.num_rows and (end := last_sample(parts[-1])) is not None:
            start = head.read_row_group(0, columns=["device_us"]).column(0)[0].as_py()
            return (end.device_us - int(start)) / 1e6
    except (OSError, pa.ArrowException):
        pass  # a damaged first or last part: the summary names it
    if not first or not last:
        return 0.0
    return (datetime.fromisoformat(last) - datetime.fromisoformat(first)).total_seconds()


def _channels_in(table: pa.Table) -> list[str]:
    return [name[: -len("_int")] for name in table.column_names if name.endswith("_int") and "_w_int" not in name]


def _channel(table: pa.Table, name: str, unit: str, events: pa.Table | None) -> ChannelStats:
    n = table["count"].to_numpy().astype(np.float64)
    have = n > 0
    n = n[have]
    mean_s = table[f"{name}_mean"].to_numpy()[have]
    m2_s = table[f"{name}_m2"].to_numpy()[have]
    lo, hi = table[f"{name}_min"].to_numpy()[have], table[f"{name}_max"].to_numpy()[have]
    total = n.sum()
    mean = float((mean_s * n).sum() / total) if total else float("nan")
    m2 = float(m2_s.sum() + (n * (mean_s - mean) ** 2).sum())  # variances of parts combined exactly
    pp = hi - lo
    device_s = table["device_s"].to_numpy()[have]
    slope, t_m2 = _slopes(table, name, have)
    rms = np.sqrt(np.maximum(m2_s - slope**2 * t_m2, 0.0) / n)  # the spread about each second's trend
    # How far each second's trend rises across its samples (|slope| T, T = sqrt(12 t_m2 / n) for evenly spaced
    # samples). Taken from the peak-to-peak it leaves the ripple's, to within the slope times two ripple cycles
    # (the highest sample may sit up to a cycle from the end, the lowest a cycle from the start). A tenth of the
    # peak-to-peak or less is what a line fitted to whole cycles of a 10 Hz or faster ripple rises by itself
    # (12 A / (2 pi f T) for amplitude A): no trend to take out.
    rise = np.abs(slope) * np.sqrt(12.0 * t_m2 / n)
    ripple_pp = np.where(rise > 0.1 * pp, np.maximum(pp - rise, 0.0), pp)
    same = device_s[1:] == device_s[:-1]  # a second split between two parts: each row holds only some of it
    split = np.r_[same, False] | np.r_[False, same]
    quiet = ~_in_events(device_s, events) & ~_stepped(mean_s, slope, device_s, pp, rise) & ~split
    return ChannelStats(
        name=name, unit=unit, samples=int(total),
        minimum=float(lo.min()) if total else float("nan"), mean=mean,
        maximum=float(hi.max()) if total else float("nan"),
        std=float(np.sqrt(m2 / (total - 1))) if total > 1 else float("nan"),
        ripple_pp=_typical_worst(ripple_pp[quiet]), ripple_rms=_typical_worst(rms[quiet]),
        integral=float(table[f"{name}_int"].to_numpy().sum()),
        below_s=_total_s(events, ("brownout", "dropout"), name),
        above_s=_total_s(events, ("overvoltage", "overcurrent"), name),
        excursion=float(pp.max()) if total else float("nan"),
    )


def _typical_worst(values: np.ndarray) -> tuple[float, float]:
    return (float(np.median(values)), float(values.max())) if len(values) else (float("nan"),) * 2


def _slopes(table: pa.Table, name: str, have: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each second's straight-line trend, units per second, and the spread of its sample times (``t_m2``);
    zeros for rollups written before the trend was kept (their figures are then about the mean)."""
    if "t_m2" not in table.column_names or f"{name}_mtx" not in table.column_names:
        zeros = np.zeros(int(have.sum()))
        return zeros, zeros
    t_m2 = table["t_m2"].to_numpy()[have]
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(t_m2 > 0, table[f"{name}_mtx"].to_numpy()[have] / t_m2, 0.0)
    return slope, t_m2


def _stepped(mean: np.ndarray, slope: np.ndarray, device_s: np.ndarray, pp: np.ndarray,
             rise: np.ndarray) -> np.ndarray:
    """Which seconds held a step (a load switched, a range changed). The level moved between the seconds on
    either side by more than the second's own straight-line trend explains (by over a quarter of its
    peak-to-peak), or, for a step near the second's edge that the line happens to explain, by over half its
    peak-to-peak while the neighbours themselves stayed level (their trends rise less than half the move). A
    straight line through a step leaves the step in the residual, so such a second is not ripple; the step shows
    as the largest excursion instead. A ramp or a charge curve moves as its trend says and stays in."""
    stepped = np.zeros(len(device_s), dtype=bool)
    if len(device_s) < 3:
        return stepped
    inner = slice(1, -1)
    neighbours = (device_s[2:] - device_s[:-2]) == 2  # both neighbours there, no gap between: 2 s apart
    moved = mean[2:] - mean[:-2]
    unexplained = np.abs(moved - 2.0 * slope[inner]) > 0.25 * pp[inner]
    level_around = (np.abs(moved) > 0.5 * pp[inner]) & (np.abs(moved) > 2.0 * (rise[2:] + rise[:-2]))
    stepped[inner] = neighbours & (unexplained | level_around)
    return stepped


def _in_events(device_s: np.ndarray, events: pa.Table | None) -> np.ndarray:
    """Which seconds an excursion (a dip, an over-limit, a flicker) on any channel touched: left out of the
    ripple, which describes the rails between events. Any channel's: a dip on a rail shows in its current, and
    in the supply of a meter it feeds, without being an event there. The second after an event's end goes too:
    a rail or a meter's capacitor is still recovering in it."""
    inside = np.zeros(len(device_s), dtype=bool)
    if events is None or events.num_rows == 0 or "device_start_us" not in events.column_names:
        return inside
    for row in events.select(["kind", "device_start_us", "device_end_us"]).to_pylist():
        if row["kind"] not in FAULTS or row["device_start_us"] is None:
            continue
        end = row["device_end_us"] if row["device_end_us"] is not None else row["device_start_us"]
        inside |= (device_s >= row["device_start_us"] // 1_000_000) & (device_s <= end // 1_000_000 + 1)
    return inside


def _rail(table: pa.Table, pair: Pair) -> RailTotals:
    charge_as = float(table[f"{pair.amps}_int"].to_numpy().sum())
    energy_j = float(table[f"{pair.rail}_w_int"].to_numpy().sum())
    return RailTotals(pair.rail, charge_as / 3600.0, energy_j / 3600.0)


def _kinds(events: pa.Table | None) -> list[KindStats]:
    if events is None or events.num_rows == 0:
        return []
    rows = events.select(["kind", "channel", "depth_pct", "value", "duration_s"]).to_pylist()
    out = []
    for kind, channel in sorted({(r["kind"], r["channel"]) for r in rows}, key=lambda k: (k[0], k[1] or "")):
        mine = [r for r in rows if r["kind"] == kind and r["channel"] == channel]
        depths = [r["depth_pct"] for r in mine if r["depth_pct"] is not None]
        durations = [r["duration_s"] for r in mine if r["duration_s"] is not None]
        worst = max(mine, key=lambda r: r["depth_pct"] if r["depth_pct"] is not None else -np.inf)
        out.append(KindStats(kind, channel, len(mine), max(depths) if depths else None,
                             worst["value"] if depths else None, max(durations) if durations else None))
    return out


def _total_s(events: pa.Table | None, kinds: str | tuple[str, ...], channel: str | None = None) -> float:
    if events is None or events.num_rows == 0:
        return 0.0
    kinds = (kinds,) if isinstance(kinds, str) else kinds
    total = 0.0
    for row in events.select(["kind", "channel", "duration_s"]).to_pylist():
        if row["kind"] in kinds and (channel is None or row["channel"] == channel) and row["duration_s"]:
            total += row["duration_s"]
    return total


def _changes_text(changes: list[dict[str, Any]], channel: str) -> str:
    """What was changed while running (a zero, a profile from the screen), with when."""
    out = []
    for change in changes:
        if change.get("channel") != channel:
            continue
        when = str(change.get("utc", ""))[11:23]
        if change.get("change") == "zero":
            out.append(f"; zeroed at {when} UTC ({change.get('counts')} counts taken as 0)")
        else:
            profile = change.get("profile") or {}
            out.append(f"; from {when} UTC a {profile.get('model')} profile of {len(profile.get('points', []))} "
                       "points, applied on the live screen")
    return "".join(out)


def _calibration_text(entry: dict[str, Any] | None) -> str:
    if not entry:
        return "not recorded"
    profile = entry.get("profile")
    if profile is None:
        return "the rig file's scaling"
    where = entry.get("profile_path") or (f"applied by {entry['by']}" if entry.get("by") else "")
    return (f"{profile.get('model')} profile{' ' + where if where else ''}, {len(profile.get('points', []))} "
            f"points, made {str(profile.get('created', ''))[:10]}")
