"""The lab as a watcher knows it: every bench heard under a prefix, from the messages of ``logger.publish.topics``.

One writer: the screen's thread applies messages in arrival order and reads rows back; the broker client's
thread only queues what it hears. Times in here are the watcher's own wall clock (``now``) for "when heard",
and the messages' UTC labels for what happened when.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from logger.publish.topics import EVENT, SECOND, STATE, STATS, Message

MINUTE_S = 60
TREND_S = 3600
"""Per-second figures kept per bench for its trend: an hour."""
EVENTS_KEPT = 500
QUIET_S = 10.0
"""A bench that says it records but has sent no figures for this long shows as ``no data``."""
ATTENTION = {"offline": 0, "failed": 1, "disconnected": 2, "no data": 3, "event": 4, "recording": 5,
             "watching": 6, "stopped": 7}
"""Benches needing attention first: lower comes first; ``event`` is a bench with an event going on."""
ALERT_KINDS = ("brownout", "dropout")


@dataclass
class Bench:
    """What is known of one bench: its latest state message, figures and events."""

    name: str
    state: dict[str, Any] = field(default_factory=dict)
    seconds: deque[tuple[float, dict[str, list[float | None]]]] = field(default_factory=lambda: deque(maxlen=TREND_S))
    """(UTC seconds, {channel: [min, mean, max, sd]}), oldest first."""
    events: deque[dict[str, Any]] = field(default_factory=lambda: deque(maxlen=EVENTS_KEPT))
    """Ended events and those going on, newest first (an event going on is replaced by its end)."""
    going_on: dict[str, dict[str, Any]] = field(default_factory=dict)
    heard_at: float = 0.0
    """When a figure was last heard (the watcher's clock)."""

    @property
    def word(self) -> str:
        return str(self.state.get("state", "no data"))

    def units(self) -> dict[str, str]:
        return {c.get("name"): c.get("unit", "") for c in self.state.get("channels", []) if isinstance(c, dict)}


@dataclass(frozen=True)
class Row:
    """One bench as a line of the lab's table."""

    name: str
    shown_state: str
    """The state word shown: the bench's own, ``no data`` when a recording bench has gone quiet, or ``event``
    while a brownout or dropout goes on."""
    channels: tuple[tuple[str, float | None, float | None, float | None, str], ...]
    """(name, latest mean, lowest and highest over the last minute, unit)."""
    last_event: dict[str, Any] | None
    today: int
    today_kinds: dict[str, int]
    elapsed_s: float | None
    rank: int


class Lab:
    """Every bench heard so far, by name."""

    def __init__(self) -> None:
        self.benches: dict[str, Bench] = {}
        self.ignored = 0
        """Messages under the prefix that were not ours (another schema, a stray publisher)."""
        self.lags_s: deque[float] = deque(maxlen=100_000)
        """How long after the device time it describes each figure and each beginning was taken in: the end of a
        figure's second, an event's start (for the load bench's latency)."""

    def apply(self, message: Message | None, now: float) -> list[dict[str, Any]]:
        """Take one message; returns the events that began with it (for the bell and for actions)."""
        if message is None:
            self.ignored += 1
            return []
        bench = self.benches.setdefault(message.bench, Bench(message.bench))
        doc = message.doc
        if message.leaf == STATE:
            # The broker's "offline" (the recorder's last will) says only that: what was known of the bench stays.
            bench.state = {**bench.state, **doc} if doc.get("state") == "offline" else doc
            if doc.get("state") in ("offline", "stopped", "failed"):
                bench.going_on.clear()
        elif message.leaf == SECOND:
            t = _utc_s(doc.get("utc"))
            if bench.seconds and t <= bench.seconds[-1][0]:
                return []  # a repeat (QoS 1 may deliver twice), or out of order after a reconnect
            bench.seconds.append((t, doc["ch"]))
            bench.heard_at = now
            self.lags_s.append(now - t - 1.0)  # the second ends about 1 s after its first sample
        elif message.leaf == EVENT:
            begun = self._event(bench, doc)
            self.lags_s.extend(now - _utc_s(d.get("start")) for d in begun)
            return begun
        return []

    def _event(self, bench: Bench, doc: dict[str, Any]) -> list[dict[str, Any]]:
        key = doc["key"]
        if doc["phase"] == "begin":
            if key in bench.going_on or any(e.get("key") == key for e in bench.events):
                return []  # a repeat (QoS 1 may deliver twice)
            bench.going_on[key] = doc
            bench.events.appendleft(doc)
            return [doc]
        bench.going_on.pop(key, None)
        for k, e in enumerate(bench.events):
            if e.get("key") == key:
                bench.events[k] = doc
                return []
        bench.events.appendleft(doc)
        return []

    def rows(self, now: float) -> list[Row]:
        """Every bench, those needing attention first, then by name."""
        rows = [self._row(b, now) for b in self.benches.values()]
        return sorted(rows, key=lambda r: (r.rank, r.name))

    def _row(self, bench: Bench, now: float) -> Row:
        word = bench.word
        if word == "recording" and bench.heard_at and now - bench.heard_at > QUIET_S:
            word = "no data"
        elif word in ("recording", "watching") and bench.going_on:
            word = "event"
        events = bench.state.get("events") or {}
        today = events.get("today") if events.get("day") == datetime.now().date().isoformat() else {}
        today = today if isinstance(today, dict) else {}
        last = bench.events[0] if bench.events else events.get("last")
        return Row(bench.name, word, _channels(bench), last, sum(today.values()), today,
                   bench.state.get("elapsed_s"), ATTENTION.get(word, 8))


def _channels(bench: Bench) -> tuple[tuple[str, float | None, float | None, float | None, str], ...]:
    """Each channel's latest mean and its range over the last minute of figures."""
    units = bench.units()
    if not bench.seconds:
        return tuple((name, None, None, None, unit) for name, unit in units.items())
    newest_t, newest = bench.seconds[-1]
    lo_k, hi_k, mean_k = STATS.index("min"), STATS.index("max"), STATS.index("mean")
    out = []
    minute = []
    for t, ch in reversed(bench.seconds):
        if newest_t - t >= MINUTE_S:
            break
        minute.append(ch)
    for name, figures in newest.items():
        minute_of = [ch[name] for ch in minute if name in ch]
        lows = [f[lo_k] for f in minute_of if f[lo_k] is not None]
        highs = [f[hi_k] for f in minute_of if f[hi_k] is not None]
        out.append((name, figures[mean_k], min(lows, default=None), max(highs, default=None), units.get(name, "")))
    return tuple(out)


def _utc_s(text: Any) -> float:
    try:
        return datetime.fromisoformat(str(text).replace("Z", "+00:00")).timestamp()
    except ValueError:
        return 0.0
