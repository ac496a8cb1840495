"""All event detectors of a rig, fed batch by batch with calibrated values.

Streaming and chunk-invariant: any split of the same samples into batches yields the same events. Each
channel has a short sliding mean, then hysteresis comparators for dips (brownout, or dropout when the residual
is below the dropout level), overvoltage and overcurrent, then the flicker grouper over its dips.
"""

from __future__ import annotations

import numpy as np

from logger.events.flicker import FlickerGrouper
from logger.events.levels import Comparator, SlidingMean, Span
from logger.events.model import Event
from logger.events.rules import ChannelRules, rules_for
from logger.rig import Channel, Rig


class ChannelWatch:
    """The detectors of one channel."""

    def __init__(self, channel: Channel) -> None:
        self.rules = r = rules_for(channel)
        self.channel = channel
        self.sign = -1.0 if (channel.nominal or 0) < 0 or channel.negative else 1.0
        self.mean = SlidingMean(round(r.mean_window_s * 1e6))
        self.dip = Comparator(r.dip_below, r.dip_release, below=True) if r.dip_below is not None else None
        self.over = Comparator(r.over_above, r.over_release, below=False) if r.over_above is not None else None
        self.current = (
            Comparator(r.current_above, r.current_release, below=False) if r.current_above is not None else None
        )
        self.flicker = FlickerGrouper(channel.name, r.flicker_window_s, channel.unit)

    def feed(self, t_us: np.ndarray, values: np.ndarray, labels: np.ndarray) -> list[Event]:
        x = self.mean.feed(t_us, values * self.sign)
        events: list[Event] = []
        if self.dip is not None:
            for span in self.dip.feed(t_us, x, labels):
                dip = self._dip(span)
                if dip is not None:
                    events += self.flicker.add(dip)
                    events.append(dip)
        if self.over is not None:
            events += [self._over(s) for s in self.over.feed(t_us, x, labels) if self._long_enough(s)]
        if self.current is not None:
            events += [self._overcurrent(s) for s in self.current.feed(t_us, x, labels)
                       if self._long_enough(s, True)]
        events += self.flicker.tick(self._horizon(int(t_us[-1])))
        return events

    def _horizon(self, last_us: int) -> int:
        """Time up to which no new dip can start: the start of a dip still going on (it may yet join the
        current flicker group when it ends), else the last sample."""
        going_on = self.dip.current() if self.dip is not None else None
        return going_on.start_us if going_on is not None else last_us

    def active(self) -> list[Event]:
        """Excursions going on now (their end is not known yet)."""
        now = []
        for comparator, kind in ((self.dip, "brownout"), (self.over, "overvoltage"), (self.current, "overcurrent")):
            span = comparator.current() if comparator is not None else None
            if span is not None:
                now.append(Event(kind=kind, start_us=span.start_label, channel=self.channel.name,
                                 value=self.sign * span.extreme, detail="going on",
                                 device_start_us=span.start_us))
        episode = self.flicker.ongoing()
        return now if episode is None else [*now, episode]

    def finish(self, last_us: int, last_label: int) -> list[Event]:
        """At the end of a run: close what is still open at the last sample, and the last flicker group."""
        events = []
        if self.dip is not None and (span := self.dip.current()) is not None:
            dip = self._dip(Span(span.start_us, last_us, span.extreme, span.start_label, last_label),
                            note="; still below when the run ended")
            if dip is not None:
                events += self.flicker.add(dip)
                events.append(dip)
        return events + self.flicker.finish()

    def _long_enough(self, span: Span, current: bool = False) -> bool:
        least = self.rules.current_min_s if current else self.rules.min_event_s
        return (span.duration_s or 0.0) >= least

    def _dip(self, span: Span, note: str = "") -> Event | None:
        r = self.rules
        if not self._long_enough(span):
            return None
        dropout = r.dropout_below is not None and span.extreme < r.dropout_below
        level = r.level_pct(span.extreme)
        # Signed like the value and every picture of it: a negative rail sags towards zero, to -5.95 V.
        what = (f"down to {span.extreme:.3g} {self.channel.unit}" if self.sign > 0 else
                f"sagged towards zero, to {-span.extreme:.3g} {self.channel.unit}")
        what += f" ({level:.0f} % of nominal)" if level is not None else ""
        return Event(
            kind="dropout" if dropout else "brownout",
            start_us=span.start_label,
            end_us=span.end_label,
            device_start_us=span.start_us,
            device_end_us=span.end_us,
            channel=self.channel.name,
            value=self.sign * span.extreme,
            depth_pct=r.depth_pct(span.extreme),
            detail=what + note,
        )

    def _over(self, span: Span) -> Event:
        level = self.rules.level_pct(span.extreme)
        return self._above("overvoltage", span, None if level is None else level - 100.0, "")

    def _overcurrent(self, span: Span) -> Event:
        return self._above("overcurrent", span, None, f", limit {self.rules.current_above:g}")

    def _above(self, kind: str, span: Span, depth_pct: float | None, note: str) -> Event:
        return Event(
            kind=kind,
            start_us=span.start_label,
            end_us=span.end_label,
            device_start_us=span.start_us,
            device_end_us=span.end_us,
            channel=self.channel.name,
            value=self.sign * span.extreme,
            depth_pct=depth_pct,
            detail=f"up to {span.extreme:.3g} {self.channel.unit}{note}",
        )


class EventDetector:
    """Every channel's detectors; values arrive as (rows, channels) in the rig's channel order, timed on the
    device clock, each sample with its UTC label."""

    def __init__(self, rig: Rig) -> None:
        self.watches = [ChannelWatch(ch) for ch in rig.channels]
        self._last: tuple[int, int] | None = None

    @property
    def rules(self) -> list[ChannelRules]:
        return [w.rules for w in self.watches]

    def feed(self, t_us: np.ndarray, values: np.ndarray, labels: np.ndarray | None = None) -> list[Event]:
        """Events that finished in this batch, in order of start. ``t_us`` is the device clock (unwrapped);
        ``labels`` the samples' UTC labels (``t_us`` itself when None, as in tests on one clock)."""
        if len(t_us) == 0:
            return []
        labels = t_us if labels is None else labels
        self._last = (int(t_us[-1]), int(labels[-1]))
        events = []
        for k, watch in enumerate(self.watches):
            events += watch.feed(t_us, values[:, k], labels)
        return sorted(events, key=_order)

    def active(self) -> list[Event]:
        return [e for w in self.watches for e in w.active()]

    def finish(self) -> list[Event]:
        """Close everything at the end of a run."""
        if self._last is None:
            return []
        return sorted((e for w in self.watches for e in w.finish(*self._last)), key=_order)


def _order(event: Event) -> tuple[int, str, str]:
    return event.device_start_us or event.start_us, event.channel or "", event.kind
