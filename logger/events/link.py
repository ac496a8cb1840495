"""Link events: what went wrong between the device and the host, as opposed to on the rail."""

from __future__ import annotations

import numpy as np

from logger.events.model import Event

CRC_BURST_LINES = 5
"""Rejected lines within one decode batch (about 0.1 s) that make a burst rather than a stray bit error."""


class LinkWatch:
    """Frame gaps, device restarts and bursts of rejected lines."""

    def __init__(self, gap_event_s: float = 0.05) -> None:
        self.gap_event_s = gap_event_s
        self._rejected = 0
        self._burst: tuple[int, int] | None = None  # (start µs, lines)

    def frames(
        self, gaps: list[tuple[int, int]], resets: list[int], utc: np.ndarray, rate_hz: float, before_us: int | None
    ) -> list[Event]:
        """Events for sequence gaps long enough to matter, and for device restarts, in one stamped batch."""
        events = []
        for row, lost in gaps:
            if lost / rate_hz >= self.gap_event_s:
                start = int(utc[row - 1]) if row > 0 else (before_us if before_us is not None else int(utc[row]))
                events.append(Event("frame_gap", start, int(utc[row]), value=float(lost),
                                    count=lost, detail=f"{lost} frames lost"))
        for row in resets:
            events.append(Event("device_reset", int(utc[row]), detail="device restarted; its counters began again"))
        return events

    def rejects(self, rejected_total: int, now_us: int) -> list[Event]:
        """A burst of rejected lines (wrong baud rate, noise on the cable) starts when a batch brings many
        and ends at the first batch that brings none."""
        new, self._rejected = rejected_total - self._rejected, rejected_total
        if self._burst is None:
            if new >= CRC_BURST_LINES:
                self._burst = (now_us, new)
            return []
        if new:
            self._burst = (self._burst[0], self._burst[1] + new)
            return []
        start, lines = self._burst
        self._burst = None
        return [Event("crc_burst", start, now_us, count=lines, value=float(lines),
                      detail=f"{lines} lines rejected (bad CRC or garbled)")]
