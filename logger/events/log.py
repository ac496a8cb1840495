"""The run's event list: numbers each event, keeps the recent ones for screens, hands every one to the
recorder, and points the dips of a flicker episode at it."""

from __future__ import annotations

from collections import Counter, deque
from collections.abc import Callable
from dataclasses import replace
from typing import Any

from logger.events.model import Event

DIPS = ("brownout", "dropout")


class EventLog:
    """Where every event goes; ``sink`` receives each as a table row (the recorder's ``add_event``), and
    ``listener`` each numbered event (the pipeline's outlets)."""

    def __init__(self, keep: int = 500, sink: Callable[[dict[str, Any]], None] | None = None) -> None:
        self.sink = sink
        self.listener: Callable[[Event], None] | None = None
        self.counts: Counter[str] = Counter()
        self._recent: deque[Event] = deque(maxlen=keep)
        self._next_id = 1

    def add(self, event: Event) -> Event:
        """Number the event, remember it and pass it on; returns it with its id."""
        event = event.with_id(self._next_id)
        self._next_id += 1
        if event.kind == "flicker":
            self._point_members_at(event)
        self._recent.appendleft(event)
        self.counts[event.kind] += 1
        if self.sink is not None:
            self.sink(event.row())
        if self.listener is not None:
            self.listener(event)
        return event

    def recent(self, count: int = 50) -> tuple[Event, ...]:
        """The newest events first."""
        return tuple(list(self._recent)[:count])

    def _point_members_at(self, episode: Event) -> None:
        """Mark the listed dips that belong to this episode (same channel, start within its span)."""
        end = episode.end_us if episode.end_us is not None else episode.start_us
        for k, e in enumerate(self._recent):
            if e.kind in DIPS and e.channel == episode.channel and episode.start_us <= e.start_us <= end:
                self._recent[k] = replace(e, episode=episode.id)
