"""Device counters made monotonic, and device time turned into UTC.

The device sends a 16-bit sequence number and a 32-bit microsecond clock; both wrap (the clock every
2**32 us = 71.6 min). :class:`Unwrapper` turns them into 64-bit counts that never go back, finds lost frames
from sequence gaps, and notices a device reset (sequence and clock restart together, out of step with each
other). :class:`ClockFit` relates device time to host time from the arrival times of reads, so each sample is
stamped from the device's own clock rather than from when a read happened to return; it reports the device
clock's drift in parts per million.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

import numpy as np

from logger.wire.frames import CLOCK_MODULUS, SEQ_MODULUS


@dataclass(frozen=True)
class Unwrapped:
    """One batch after unwrapping. Rows that repeat an earlier frame are left out (``keep``)."""

    seq: np.ndarray
    device_us: np.ndarray
    keep: np.ndarray
    lost: int
    """Frames missing from the sequence inside and before this batch."""
    gaps: list[tuple[int, int]] = field(default_factory=list)
    """(row in the kept rows, frames lost just before it), for every gap."""
    resets: list[int] = field(default_factory=list)
    """Rows (in the kept rows) at which the device had restarted."""


class Unwrapper:
    """Streaming unwrap of sequence and device clock.

    A restart is known for sure from the device's boot header (:meth:`restart`); without it, a frame whose
    clock step is far from what its sequence step implies, and which host time cannot explain as a long
    silence, is taken as a restart too.
    """

    def __init__(self, rate_hz: float | None = None) -> None:
        self.period_us: float | None = 1e6 / rate_hz if rate_hz else None
        self._raw: tuple[int, int] | None = None  # last (seq, us) as sent
        self._last: tuple[int, int] | None = None  # last unwrapped (seq, us)
        self._last_host = math.nan
        self._restart_pending = False
        self.lost = 0
        self.resets = 0

    def set_rate(self, rate_hz: float) -> None:
        self.period_us = 1e6 / rate_hz

    def restart(self) -> None:
        """The device says it has just booted: its next frame starts a new count."""
        self._restart_pending = self._raw is not None

    def feed(self, seq: np.ndarray, device_us: np.ndarray, host_time: float = math.nan) -> Unwrapped:
        """Unwrap one batch of frames in arrival order; ``host_time`` is when the batch arrived."""
        seq = seq.astype(np.int64)
        dev = device_us.astype(np.int64)
        if self._raw is None:
            self._raw = (int(seq[0]) - 1, int(dev[0]))
            self._last = (int(seq[0]) - 1, int(dev[0]))
        prev_seq = np.concatenate(([self._raw[0]], seq[:-1]))
        prev_dev = np.concatenate(([self._raw[1]], dev[:-1]))
        dseq = (seq - prev_seq) % SEQ_MODULUS
        ddev = (dev - prev_dev) % CLOCK_MODULUS
        period = self.period_us or self._estimate_period(dseq, ddev)
        reset = self._out_of_step(dseq, ddev, period) if period else np.zeros(len(seq), dtype=bool)
        if reset[0] and self._long_silence(dseq, ddev, period, host_time):
            reset[0] = False
        if self._restart_pending:
            reset[0], self._restart_pending = True, False
        return self._finish(seq, dev, dseq, ddev, reset, period, host_time)

    @staticmethod
    def _estimate_period(dseq: np.ndarray, ddev: np.ndarray) -> float | None:
        step = (dseq == 1) & (ddev > 0)
        return float(np.median(ddev[step])) if step.sum() >= 8 else None

    @staticmethod
    def _out_of_step(dseq: np.ndarray, ddev: np.ndarray, period: float) -> np.ndarray:
        """Clock step more than four times off what the sequence step implies (one step is never flagged,
        so a rate change whose header was lost does not look like a restart)."""
        expected = dseq * period
        return (dseq != 1) & ((ddev > 4 * expected + period) | (ddev < expected / 4))

    def _long_silence(self, dseq: np.ndarray, ddev: np.ndarray, period: float, host_time: float) -> bool:
        """Explain a first-row mismatch as a silence long enough to wrap the counters, if host time agrees.

        Adjusts ``dseq[0]`` and ``ddev[0]`` in place by the whole wraps that fit the host's elapsed time.
        """
        if math.isnan(host_time) or math.isnan(self._last_host):
            return False
        elapsed_us = (host_time - self._last_host) * 1e6
        clock_wraps = max(round((elapsed_us - ddev[0]) / CLOCK_MODULUS), 0)
        step_us = ddev[0] + clock_wraps * CLOCK_MODULUS
        if abs(step_us - elapsed_us) > max(2e6, 0.1 * elapsed_us):
            return False
        seq_wraps = max(round((step_us / period - dseq[0]) / SEQ_MODULUS), 0)
        ddev[0], dseq[0] = step_us, dseq[0] + seq_wraps * SEQ_MODULUS
        return True

    def _finish(
        self,
        seq: np.ndarray,
        dev: np.ndarray,
        dseq: np.ndarray,
        ddev: np.ndarray,
        reset: np.ndarray,
        period: float | None,
        host_time: float,
    ) -> Unwrapped:
        reset_rows = np.flatnonzero(reset)
        if len(reset_rows):
            # Across a restart nothing on the device side bridges the gap; the host clock does.
            since = 0.0 if math.isnan(host_time) or math.isnan(self._last_host) else host_time - self._last_host
            bridge_us = max(int(since * 1e6), int(period or 1))
            dseq[reset_rows] = max(1, round(bridge_us / (period or bridge_us)))
            ddev[reset_rows] = bridge_us
        keep = dseq > 0
        lost_each = np.where(keep & ~reset, dseq - 1, 0)
        assert self._last is not None
        useq = self._last[0] + np.cumsum(dseq)
        udev = self._last[1] + np.cumsum(ddev)
        self._raw = (int(seq[-1]), int(dev[-1]))
        self._last = (int(useq[-1]), int(udev[-1]))
        if not math.isnan(host_time):
            self._last_host = host_time
        kept_index = np.cumsum(keep) - 1
        gaps = [(int(kept_index[i]), int(lost_each[i])) for i in np.flatnonzero(lost_each)]
        lost = int(lost_each.sum())
        self.lost += lost
        self.resets += len(reset_rows)
        return Unwrapped(
            seq=useq[keep],
            device_us=udev[keep],
            keep=keep,
            lost=lost,
            gaps=gaps,
            resets=[int(kept_index[i]) for i in reset_rows],
        )


class ClockFit:
    """Host time as a straight line of device time, fitted to the least-delayed arrivals.

    Every read gives a pair (device time of its last frame, host time of arrival); transport only ever
    delays, so the lower edge of the cloud of pairs is the clock relation. Each window of device time keeps
    its least-delayed pair, and a line through those gives offset and drift.
    """

    def __init__(self, window_s: float = 5.0, max_windows: int = 2000, start_utc: float | None = None) -> None:
        self.window_us = int(window_s * 1e6)
        self._minima: deque[tuple[float, float]] = deque(maxlen=max_windows)
        self._current: tuple[int, float, float] | None = None  # (window index, device s, host - device s)
        self._origin_us: int | None = None
        self._slope = 1.0
        self._intercept: float | None = None
        self._start_utc = start_utc
        self._last_utc_us = -(2**62)

    @property
    def fitted(self) -> bool:
        """Whether drift has been measured yet (it needs at least 30 s of device time)."""
        return self._slope != 1.0

    @property
    def drift_ppm(self) -> float:
        """How fast the device clock runs against the host's, in parts per million (positive: fast)."""
        return (1.0 / self._slope - 1.0) * 1e6

    def restart(self) -> None:
        """The device has restarted: its clock is a new one, related to the host by a new offset. The drift
        measured so far is kept (same crystal) until 30 s of the new clock measure it again."""
        self._minima.clear()
        self._current = None
        self._origin_us = None
        self._intercept = None

    def observe(self, device_us: int, host_time: float) -> None:
        """Note that a frame stamped ``device_us`` (unwrapped) had arrived by ``host_time``."""
        if self._origin_us is None:
            self._origin_us = device_us
        if math.isnan(host_time):
            return
        d = (device_us - self._origin_us) * 1e-6
        lag = host_time - d
        window = (device_us - self._origin_us) // self.window_us
        if self._current is None or window != self._current[0]:
            if self._current is not None:
                self._minima.append(self._current[1:])
                self._refit()
            self._current = (window, d, lag)
        elif lag < self._current[2]:
            self._current = (window, d, lag)
        if self._intercept is None or len(self._minima) < 2:
            best = min([lag, *(m[1] for m in self._minima)])
            self._intercept = best if self._intercept is None else min(self._intercept, best)

    def _refit(self) -> None:
        if len(self._minima) < 3:
            return
        pts = np.array(self._minima)
        d, lag = pts[:, 0], pts[:, 1]
        if d[-1] - d[0] < 30.0:
            return
        slope_minus_one, intercept = np.polyfit(d, lag, 1)
        self._slope = 1.0 + float(slope_minus_one)
        self._intercept = float(intercept)

    def to_utc_us(self, device_us: np.ndarray) -> np.ndarray:
        """UTC in integer microseconds for unwrapped device times; never goes backwards."""
        if self._origin_us is None:
            self._origin_us = int(device_us[0])
        if self._intercept is None:
            self._intercept = self._start_utc if self._start_utc is not None else 0.0
        d = (device_us - self._origin_us) * 1e-6
        utc = np.round((self._intercept + d * self._slope) * 1e6).astype(np.int64)
        utc = np.maximum.accumulate(np.maximum(utc, self._last_utc_us))
        self._last_utc_us = int(utc[-1])
        return utc
