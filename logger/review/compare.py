"""Two runs side by side: did the change between them (a new supply, a firmware fix, another load) help?

Both runs are summarised the same way (from their rollups, or both from every sample) and every figure they
share is shown for A, for B and as B - A: duration, samples and gaps; per channel both runs have, the lowest,
mean and highest value, the standard deviation and the ripple; per rail, charge and energy; and the number of
events of each kind. A channel, rail or unit that only one run has is named in a note rather than compared.
"""

from __future__ import annotations

import math
from pathlib import Path

from logger.figures import to_resolution
from logger.review.summary import ChannelStats, Summary, summarize

FIGURES: tuple[tuple[str, str], ...] = (
    ("min", "minimum"), ("mean", "mean"), ("max", "maximum"), ("std", "std"),
    ("ripple p-p, typical", "ripple_pp[0]"), ("ripple p-p, worst", "ripple_pp[1]"),
    ("ripple RMS, typical", "ripple_rms[0]"), ("ripple RMS, worst", "ripple_rms[1]"),
    ("largest excursion in a second", "excursion"),
    ("below threshold (s)", "below_s"), ("above (s)", "above_s"),
)
"""Rows of the channel table: the label and the :class:`ChannelStats` field (``[k]``: an item of a pair)."""


def compare_text(folder_a: Path, folder_b: Path, full: bool = False) -> str:
    """Markdown tables comparing run A (``folder_a``) with run B (``folder_b``), B - A in the last column;
    ``full`` summarises both from every sample instead of their rollups."""
    return summaries_text(summarize(folder_a, full=full), summarize(folder_b, full=full))


def summaries_text(a: Summary, b: Summary) -> str:
    """The comparison of two summaries (a run that left out a damaged part says so in the notes)."""
    lines = [f"A: {a.folder.name} ({a.status}, from {a.start_utc})",
             f"B: {b.folder.name} ({b.status}, from {b.start_utc})",
             f"figures from the {a.source}; the last column is B - A", ""]
    lines += _run_rows(a, b)
    lines += _channel_rows(a, b)
    lines += _rail_rows(a, b)
    lines += _event_rows(a, b)
    notes = [f"INCOMPLETE: {which} leaves out a part that cannot be read: {line}"
             for which, s in (("A", a), ("B", b)) for line in s.skipped] + _notes(a, b)
    if notes:
        lines += ["", *notes]
    return "\n".join(lines)


def number(value: float | None, step: float | None = None) -> str:
    """A figure as the comparison prints it: to ``step`` (a channel's converter step) when given, else six
    significant digits; ``-`` when there is none, ``0`` for zero."""
    return to_resolution(value, step, fallback=6)


def difference(a: float | None, b: float | None, step: float | None = None) -> str:
    """B - A with its sign, to ``step`` like :func:`number`; ``-`` when either is missing, ``0`` when equal."""
    if a is None or b is None or math.isnan(a) or math.isnan(b):
        return "-"
    if abs(b - a) <= 1e-9 * max(abs(a), abs(b)):  # the same figure but for float rounding
        return "0"
    return to_resolution(b - a, step, signed=True, fallback=6)


def _count(a: int, b: int) -> list[str]:
    return [f"{a:,}", f"{b:,}", f"{b - a:+,}"]


def _run_rows(a: Summary, b: Summary) -> list[str]:
    rows = [["duration (s)", number(a.duration_s), number(b.duration_s), difference(a.duration_s, b.duration_s)],
            ["samples", *_count(a.samples, b.samples)],
            ["gaps", *_count(a.gaps, b.gaps)],
            ["time in gaps (s)", number(a.gap_s), number(b.gap_s), difference(a.gap_s, b.gap_s)]]
    return _table(["run", "A", "B", "B - A"], rows)


def _channel_rows(a: Summary, b: Summary) -> list[str]:
    theirs = {c.name: c for c in b.channels}
    rows = []
    for mine in a.channels:
        other = theirs.get(mine.name)
        if other is None:
            continue
        for label, field in FIGURES:
            x, y = _figure(mine, field), _figure(other, field)
            unit = f" ({mine.unit})" if mine.unit and "(s)" not in label else ""
            step = None if "(s)" in label or "integral" in label else min(
                r for r in (mine.resolution, other.resolution, float("inf")) if r is not None)
            rows.append([mine.name, label + unit, number(x, step), number(y, step), difference(x, y, step)])
    return ["", *_table(["channel", "figure", "A", "B", "B - A"], rows)] if rows else []


def _figure(stats: ChannelStats, field: str) -> float:
    if field.endswith("]"):
        name, index = field[:-1].split("[")
        return float(getattr(stats, name)[int(index)])
    return float(getattr(stats, field))


def _rail_rows(a: Summary, b: Summary) -> list[str]:
    theirs = {r.rail: r for r in b.rails}
    rows = []
    for mine in a.rails:
        other = theirs.get(mine.rail)
        if other is not None:
            rows.append([mine.rail, "charge (Ah)", number(mine.charge_ah), number(other.charge_ah),
                         difference(mine.charge_ah, other.charge_ah)])
            rows.append([mine.rail, "energy (Wh)", number(mine.energy_wh), number(other.energy_wh),
                         difference(mine.energy_wh, other.energy_wh)])
    return ["", *_table(["rail", "figure", "A", "B", "B - A"], rows)] if rows else []


def _event_rows(a: Summary, b: Summary) -> list[str]:
    """Counts of each kind of event on each channel (``-`` for the link), zero where a run had none."""
    counts_a = {(k.kind, k.channel or "-"): k.count for k in a.events}
    counts_b = {(k.kind, k.channel or "-"): k.count for k in b.events}
    keys = sorted(set(counts_a) | set(counts_b))
    rows = [[kind, channel, *_count(counts_a.get((kind, channel), 0), counts_b.get((kind, channel), 0))]
            for kind, channel in keys]
    return ["", *_table(["event", "channel", "A", "B", "B - A"], rows or [["(none)", "", "0", "0", "+0"]])]


def _notes(a: Summary, b: Summary) -> list[str]:
    """What cannot be compared: channels and rails only one run has, and channels whose units differ."""
    notes = []
    names_a, names_b = [c.name for c in a.channels], [c.name for c in b.channels]
    rails_a, rails_b = [r.rail for r in a.rails], [r.rail for r in b.rails]
    for what, mine, theirs, run in (("channels", names_a, names_b, "A"), ("channels", names_b, names_a, "B"),
                                    ("rails", rails_a, rails_b, "A"), ("rails", rails_b, rails_a, "B")):
        alone = [n for n in mine if n not in theirs]
        if alone:
            notes.append(f"note: {what} only run {run} has (not compared): {', '.join(alone)}")
    units_b = {c.name: c.unit for c in b.channels}
    for c in a.channels:
        if c.name in units_b and c.unit != units_b[c.name]:
            notes.append(f"note: {c.name} is in {c.unit or 'no unit'} in A and in {units_b[c.name] or 'no unit'} "
                         "in B; its figures are compared as numbers")
    return notes


def _table(head: list[str], rows: list[list[str]]) -> list[str]:
    return ["| " + " | ".join(head) + " |", "|---" * len(head) + "|", *["| " + " | ".join(r) + " |" for r in rows]]
