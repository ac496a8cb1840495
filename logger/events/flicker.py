"""Flicker: a meter, or a rail, going down and up again and again.

Three or more brownouts or dropouts on one channel whose starts follow each other within a sliding window
make one episode: its count, repetition rate, duty (the share of the episode spent below the threshold) and
the range of the residuals. A meter fed from the rail it watches shows this near its drop-out voltage, and it
shows up on the aux channel that taps the meter's supply node as restarts.
"""

from __future__ import annotations

from dataclasses import replace

from logger.events.model import Event
from logger.events.rules import FLICKER_MIN_COUNT


class FlickerGrouper:
    """Groups one channel's finished dips into episodes, streaming."""

    def __init__(self, channel: str, window_s: float, unit: str = "") -> None:
        self.channel = channel
        self.window_us = int(window_s * 1e6)
        self.unit = unit
        self._members: list[Event] = []

    def add(self, dip: Event) -> list[Event]:
        """Take a finished brownout or dropout; returns an episode if this dip closed one."""
        done = self.tick(_at(dip))
        self._members.append(dip)
        return done

    def tick(self, now_us: int) -> list[Event]:
        """Close the current group once the window has passed without a new dip."""
        if self._members and now_us - _at(self._members[-1]) > self.window_us:
            return self.finish()
        return []

    def finish(self) -> list[Event]:
        members, self._members = self._members, []
        if len(members) < FLICKER_MIN_COUNT:
            return []
        return [self._episode(members)]

    @property
    def pending(self) -> list[Event]:
        return list(self._members)

    def ongoing(self) -> Event | None:
        """The episode under way, once it has enough dips to be one (its end not known yet), else None."""
        if len(self._members) < FLICKER_MIN_COUNT:
            return None
        episode = self._episode(self._members)
        return replace(episode, end_us=None, device_end_us=None,
                       detail=f"going on: {len(self._members)} dips so far at {episode.rate_hz:.2f} Hz")

    def _episode(self, members: list[Event]) -> Event:
        first, last = members[0], members[-1]
        start, end = _at(first), _at(last, end=True)
        span_s = max((end - start) / 1e6, 1e-9)
        below_s = sum(m.duration_s or 0.0 for m in members)
        rate = (len(members) - 1) / max((_at(last) - _at(first)) / 1e6, 1e-9)
        residuals = [m.value for m in members if m.value is not None]
        low, high = min(residuals), max(residuals)
        depths = [m.depth_pct for m in members if m.depth_pct is not None]
        return Event(
            kind="flicker",
            start_us=first.start_us,
            end_us=last.end_us or last.start_us,
            device_start_us=first.device_start_us,
            device_end_us=None if first.device_start_us is None else end,
            channel=self.channel,
            value=low,
            peak=high,
            depth_pct=max(depths) if depths else None,
            count=len(members),
            rate_hz=rate,
            duty=below_s / span_s,
            detail=f"{len(members)} dips at {rate:.2f} Hz, {below_s / span_s:.0%} of the time below, "
            f"residual {low:.3g} to {high:.3g} {self.unit}".rstrip(),
        )


def _at(dip: Event, end: bool = False) -> int:
    """A dip's start (or end) on the device clock, where it has one; else its label."""
    if end:
        return dip.device_end_us if dip.device_end_us is not None else (dip.end_us or dip.start_us)
    return dip.device_start_us if dip.device_start_us is not None else dip.start_us
