"""The run's time base: the device clock as the measurement axis, UTC as a label.

One owner for everything about time. Frames go in as sent (wrapping sequence and clock); out come the frames
worth keeping, on the run's axes: the unwrapped device clock (continuous across restarts, bridged by the
host's steady clock) on which every duration, window, integral and rate is measured; the boot segment; and a
UTC label for each, strictly increasing. See :mod:`logger.timebase.unwrap` and :mod:`logger.timebase.labels`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from logger.timebase.labels import MAX_DRIFT, Labeler
from logger.timebase.unwrap import BridgeTimer, UnwrapCounters, Unwrapped, Unwrapper
from logger.wire.frames import DeviceHeader, FrameBatch

__all__ = ["MAX_DRIFT", "Stamped", "TimeBase", "UnwrapCounters"]


@dataclass(frozen=True)
class Stamped:
    """One batch of kept frames on the run's axes, with their raw counts."""

    seq: np.ndarray
    device_us: np.ndarray
    utc_us: np.ndarray
    segment: np.ndarray
    """Boot segment of each row: where it steps, the device restarted."""
    counts: np.ndarray

    def __len__(self) -> int:
        return len(self.seq)


@dataclass(frozen=True)
class ClockStep:
    """The host's wall clock stepped (NTP, a user): the labels slew to it; durations never see it."""

    device_us: int
    utc_us: int
    step_s: float


class TimeBase:
    """Unwraps, checks and labels frames; the one place where time is decided."""

    def __init__(self, header: DeviceHeader, start_utc_s: float | None = None) -> None:
        self.unwrapper = Unwrapper(header.rate_hz)
        self.labels = Labeler(start_utc_s)
        self._bridge = BridgeTimer(self.labels.steady_at)
        self._held_counts: np.ndarray | None = None
        self._steps_seen = 0

    @property
    def counters(self) -> UnwrapCounters:
        return self.unwrapper.counters

    @property
    def drift_ppm(self) -> float | None:
        """The device clock against the host's steady clock, once 30 s of arrivals have measured it."""
        return self.labels.drift_ppm if self.labels.fitted and self.labels.paced else None

    @property
    def period_us(self) -> float:
        return self.unwrapper.period_us

    def on_header(self, header: DeviceHeader, first: bool = False) -> None:
        """A boot header starts a new segment at the next frame; any header may change the rate."""
        if header.reason == "boot" and not first:
            self.unwrapper.restart()
        self.unwrapper.set_rate(header.rate_hz)

    def feed(self, batch: FrameBatch, arrival: float = math.nan, wall_offset: float = 0.0) -> Stamped:
        """Frames of one batch, all of which had arrived by ``arrival`` (host steady clock, s; NaN if unknown);
        ``arrival + wall_offset`` is UTC."""
        held = self._held_counts
        u = self.unwrapper.feed(batch.seq, batch.device_us, arrival, self._bridge)
        counts = batch.counts
        if held is not None:
            counts = np.vstack((held, counts))
        rows = u.rows + (1 if held is not None else 0)
        self._held_counts = None
        if self.unwrapper.held is not None:
            self._held_counts = counts[-1:].copy()
        if u.resets:
            self.labels.restart()
        if len(u.seq):
            self.labels.observe(int(u.device_us[-1]), arrival, wall_offset)
        return self._stamp(u, counts[rows])

    def _stamp(self, u: Unwrapped, counts: np.ndarray) -> Stamped:
        return Stamped(seq=u.seq, device_us=u.device_us, utc_us=self.labels.label(u.device_us), segment=u.segment,
                       counts=counts)

    def finish(self) -> None:
        """The stream has ended: a frame held for judgement is rejected."""
        self.unwrapper.finish()
        self._held_counts = None

    def clock_steps(self) -> list[ClockStep]:
        """Wall-clock steps seen since the last call."""
        new = self.labels.steps[self._steps_seen :]
        self._steps_seen = len(self.labels.steps)
        return [ClockStep(d, int(self.labels.label_of(d)), s) for d, s in new]
