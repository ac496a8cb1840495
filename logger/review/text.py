"""A run's summary and an event's samples as plain text for the terminal (Markdown tables, so the same text
reads well in a report)."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from logger.figures import to_resolution
from logger.review.chart import local_text, zone_name
from logger.review.summary import ChannelStats, Summary
from logger.review.window import Window
from logger.store.layout import EVENTS_PARQUET


def _g(value: float | None, digits: int = 4) -> str:
    return "-" if value is None or value != value else f"{value:.{digits}g}"


def _v(value: float, c: ChannelStats) -> str:
    """A channel's figure to its converter step (one more place for a spread, which averaging can resolve)."""
    return to_resolution(value, c.resolution)


def _n(count: int, noun: str) -> str:
    return f"{count:,} {noun}" + ("" if count == 1 else "s")


def _duration(seconds: float) -> str:
    whole = round(seconds)
    clock = f"{whole // 3600}:{whole // 60 % 60:02d}:{whole % 60:02d}"
    return clock + (f" ({seconds:.1f} s)" if seconds < 3600 else "")


def summary_text(s: Summary) -> str:
    """Everything a summary holds, most useful first."""
    link = s.link
    counts = (f"; link: {_n(link.get('lost', 0), 'frame')} lost, {_n(link.get('rejected', 0), 'line')} rejected, "
              f"{_n(link.get('resets', 0), 'device reset')}, {_n(link.get('reconnects', 0), 'reconnect')}")
    head = [
        f"run {s.folder.name}: {s.status}, {s.stop_reason}",
        f"from {_iso(s.start_utc)} to {_iso(s.end_utc)} ({zone_name(_moment(s.start_utc))}): "
        f"{_duration(s.duration_s)}, {s.samples:,} samples"
        + (f" at {link['rate_hz']:g} Hz" if link.get("rate_hz") else ""),
        f"gaps: {s.gaps} (frame gaps and link outages), {s.gap_s:.3f} s in all" + (counts if link else ""),
        f"device clock drift: {_g(link.get('drift_ppm'), 3)} ppm" if link.get("drift_ppm") is not None
        else "device clock drift: not measured",
        f"figures from the {s.source}",
    ]
    if s.skipped:
        head[1:1] = [f"INCOMPLETE: {len(s.skipped)} part(s) could not be read and are left out of every figure "
                     "below: " + "; ".join(s.skipped)]
    lines = [
        *(line + "  " for line in head[:-1]),  # two spaces: a line break where the text is read as Markdown
        head[-1],
        "",
        "| channel | unit | min | mean | max | std | ripple p-p (typical / worst) | ripple RMS (typical / worst) "
        "| largest excursion in a second | below threshold | above |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for c in s.channels:
        lines.append(
            f"| {c.name} | {c.unit} | {_v(c.minimum, c)} | {_v(c.mean, c)} | {_v(c.maximum, c)} | {_v(c.std, c)} "
            f"| {_v(c.ripple_pp[0], c)} / {_v(c.ripple_pp[1], c)} | {_v(c.ripple_rms[0], c)} / "
            f"{_v(c.ripple_rms[1], c)} | {_v(c.excursion, c)} | {c.below_s:.3f} s | {c.above_s:.3f} s |")
    lines += ["", "ripple: within one-second windows that no event touched (nor the second after one) and in which the "
              "level did not step, "
              "about each window's straight-line trend (a sag or a charge curve is not ripple); its peak-to-peak is "
              "only as fine as the sampling (a 100 Hz ripple sampled at 1 kHz reads about 4.8 mV for 5.0 mV: the "
              "peaks fall between samples). Steps and dips show as the largest excursion."]
    if s.rails:
        lines += ["", "| rail | charge | energy |", "|---|---|---|"]
        lines += [f"| {r.rail} | {r.charge_ah:.6g} Ah | {r.energy_wh:.6g} Wh |" for r in s.rails]
    lines += ["", "| event | channel | count | worst depth | worst value | longest |", "|---|---|---|---|---|---|"]
    lines += [f"| {k.kind} | {k.channel or '-'} | {k.count} | "
              f"{'-' if k.worst_depth_pct is None else f'{k.worst_depth_pct:.1f} %'} | {_g(k.worst_value)} | "
              f"{'-' if k.longest_s is None else f'{k.longest_s:.3f} s'} |" for k in s.events]
    if not s.events:
        lines.append("| (none) | | | | | |")
    same: dict[str, list[str]] = {}
    for channel, text in s.calibration.items():
        same.setdefault(text, []).append(channel)
    lines += ["", "calibration: " + "; ".join(f"{', '.join(chs)}: {text}" for text, chs in same.items())]
    return "\n".join(lines)


def window_text(w: Window, most_rows: int = 40) -> str:
    """An event's details and its samples, thinned evenly to at most ``most_rows`` rows (the plot and the
    export have them all)."""
    lines = []
    e = w.event
    if e is not None:
        lasted = f", {e['duration_s']:.3f} s" if e.get("duration_s") is not None else ""
        lines.append(f"event #{e['id']}: {e['kind']} on {e['channel'] or 'the link'} at {_t(e['start'])} "
                     f"({zone_name(e['start'])}){lasted}: {e['detail']}")
    table = w.samples
    lines.append(f"{table.num_rows:,} samples from {_t(w.start)} to {_t(w.end)} ({zone_name(w.start)})"
                 + (f" (one in {max(1, table.num_rows // most_rows)} shown)" if table.num_rows > most_rows else ""))
    step = max(1, table.num_rows // most_rows)
    rows = table.take(pa.array(range(0, table.num_rows, step))).to_pylist() if table.num_rows else []
    names = [n for n in table.column_names if n != "utc"]
    lines += ["", "| time | " + " | ".join(names) + " |", "|---" * (len(names) + 1) + "|"]
    lines += ["| " + _t(r["utc"]) + " | " + " | ".join(f"{r[n]:.5g}" for n in names) + " |" for r in rows]
    return "\n".join(lines)


def _moment(text: str | None) -> datetime | None:
    return datetime.fromisoformat(text) if text else None


def _iso(text: str | None) -> str:
    """A UTC label kept in _run.json, in the zone every output shows."""
    return "-" if not text else local_text(datetime.fromisoformat(text))


def _t(value: datetime) -> str:
    """A moment in the zone every output shows (local time unless ``--utc``), to the millisecond."""
    return local_text(value)


def events_text(folder: Path, kinds: list[str] | None = None, channels: list[str] | None = None,
                unfold: bool = False) -> str:
    """Every event of a run in the order they started, as a table, by the numbers the sealed table gives them
    (time order; ``review --event N`` shows the samples around one). A flicker episode is one row that counts
    its dips; the dips themselves are listed only with ``unfold``. ``kinds`` and ``channels`` keep only those."""
    path = folder / EVENTS_PARQUET
    rows = sorted(pq.read_table(path).to_pylist(), key=lambda e: (e["start"], e["id"])) if path.exists() else []
    shown = [e for e in rows if (unfold or e.get("episode") is None)
             and (not kinds or e["kind"] in kinds) and (not channels or (e["channel"] or "-") in channels)]
    lines = [f"| # | kind | channel | start ({zone_name(rows[0]['start'] if rows else None)}) | lasted | value "
             "| depth | detail |", "|---" * 8 + "|"]
    for e in shown:
        lasted = "-" if e["duration_s"] is None else f"{e['duration_s']:.3f} s"
        depth = "-" if e["depth_pct"] is None else f"{e['depth_pct']:.1f} %"
        inside = f" (in episode #{e['episode']})" if e.get("episode") is not None else ""
        lines.append(f"| {e['id']} | {e['kind']} | {e['channel'] or '-'} | {_t(e['start'])} | {lasted} | "
                     f"{_g(e['value'])} | {depth} | {e['detail']}{inside} |")
    folded = sum(1 for e in rows if e.get("episode") is not None) if not unfold else 0
    hidden = len(rows) - len(shown) - folded
    notes = ([f"{folded:,} dips inside flicker episodes are counted in their episode's row (--dips lists them)"]
             if folded else []) + ([f"{hidden:,} events of other kinds or channels not shown"] if hidden > 0 else [])
    return "\n".join(lines + (["", *notes] if notes else []))
