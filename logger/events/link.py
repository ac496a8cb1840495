"""Link events: what went wrong between the device and the host, as opposed to on the rail."""

from __future__ import annotations

from logger.events.model import Event

CRC_BURST_LINES = 5
"""Rejected lines within one decode batch (about 0.1 s) that make a burst rather than a stray bit error."""


class LinkWatch:
    """Bursts of rejected lines (frame gaps and restarts come from the processing core, by the gap rule)."""

    def __init__(self) -> None:
        self._rejected = 0
        self._burst: tuple[int, int] | None = None  # (start µs, lines)

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
