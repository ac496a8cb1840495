"""Readings outside the calibrated span: one event per excursion, per channel that has a profile.

Outside the span its points cover, a calibration curve is extrapolated, so the reading is less certain than
the profile says. Excursions less than ``merge_s`` apart are one event, so a reading that hovers at the edge
of the span makes one row, not hundreds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from logger.events.model import Event


@dataclass
class _Open:
    start_us: int
    last_us: int
    extreme: float
    start_label: int
    last_label: int


class OutsideWatch:
    """Streams (frames, channels) outside-span masks and values into ``outside_cal`` events."""

    def __init__(self, names: tuple[str, ...], spans: dict[int, tuple[float, float]], unit: tuple[str, ...],
                 merge_s: float = 1.0) -> None:
        """``spans``: per profiled channel (by position), the calibrated span in the channel's unit."""
        self.names = names
        self.spans = spans
        self.units = unit
        self.merge_us = round(merge_s * 1e6)
        self._open: dict[int, _Open] = {}

    def feed(self, t_us: np.ndarray, labels: np.ndarray, outside: np.ndarray, values: np.ndarray) -> list[Event]:
        """Fold one batch: device times, their UTC labels, which readings are outside, the values."""
        events: list[Event] = []
        for k in self.spans:
            rows = np.flatnonzero(outside[:, k])
            if len(rows):
                events += self._extend(k, t_us[rows], labels[rows], values[rows, k])
            held = self._open.get(k)
            if held is not None and len(t_us) and int(t_us[-1]) - held.last_us > self.merge_us:
                events.append(self._close(k))
        return events

    def finish(self) -> list[Event]:
        return [self._close(k) for k in list(self._open)]

    def _extend(self, k: int, t: np.ndarray, labels: np.ndarray, v: np.ndarray) -> list[Event]:
        """Fold the outside rows of one batch into excursions, closing those followed by a long gap."""
        events = []
        breaks = np.flatnonzero(np.diff(t) > self.merge_us)
        for first, last in zip(np.r_[0, breaks + 1], np.r_[breaks, len(t) - 1], strict=True):
            held = self._open.get(k)
            if held is not None and int(t[first]) - held.last_us > self.merge_us:
                events.append(self._close(k))
                held = None
            extreme = self._farthest(k, v[first : last + 1])
            if held is None:
                self._open[k] = _Open(int(t[first]), int(t[last]), extreme, int(labels[first]), int(labels[last]))
            else:
                held.last_us, held.last_label = int(t[last]), int(labels[last])
                held.extreme = self._farthest(k, np.array([held.extreme, extreme]))
        return events

    def _farthest(self, k: int, v: np.ndarray) -> float:
        lo, hi = self.spans[k]
        beyond = np.maximum(lo - v, v - hi)
        return float(v[int(np.argmax(beyond))])

    def _close(self, k: int) -> Event:
        held = self._open.pop(k)
        lo, hi = self.spans[k]
        unit = self.units[k]
        return Event("outside_cal", held.start_label, held.last_label, channel=self.names[k], value=held.extreme,
                     device_start_us=held.start_us, device_end_us=held.last_us,
                     detail=f"read {held.extreme:.4g} {unit}, outside the calibrated {lo:.4g} to {hi:.4g} {unit}: "
                            "extrapolated, less certain")
