"""Min, max and mean of every shown channel in fixed time buckets, kept by the screen from the live ring.

The live ring holds only the last minute of raw samples; the trend wants up to an hour. Each poll the screen
copies the samples that are new since the last one and folds them into tiers of buckets (lowest and highest
value of each channel per bucket, and its sum and count for the mean): 10 ms buckets for the last ten
minutes, 1 s buckets for the last hour and more, 1 min buckets for the whole run (up to two weeks). A
brownout of one sample therefore still shows as a spike at any span. Memory is fixed (about 84,000 buckets,
under 5 MB) whatever the sample rate and however long the run.
"""

from __future__ import annotations

import math

import numpy as np

from logger.ingest.state import Ring
from logger.tui.channels import Shown


class Buckets:
    """Lowest, highest and mean value per column in buckets of ``bucket_s``, for the last ``span_s`` or more.

    A ring row holds each channel's lowest, then highest, then sum, then the bucket's sample count.
    """

    def __init__(self, width: int, bucket_s: float, span_s: float) -> None:
        self.width = width
        self.span_s = span_s
        self.bucket_us = round(bucket_s * 1e6)
        self.ring = Ring(math.ceil(span_s / bucket_s) + 8, 3 * width + 1)
        self._pending: tuple[int, np.ndarray] | None = None
        """The newest bucket, still filling: kept out of the ring until a later one starts."""

    def add(self, utc_us: np.ndarray, full: np.ndarray) -> None:
        """Fold a batch of values (oldest first, one column per shown channel) into the buckets."""
        idx = utc_us // self.bucket_us
        starts = np.flatnonzero(np.r_[True, idx[1:] != idx[:-1]])
        counts = np.diff(np.r_[starts, len(idx)]).astype(np.float64)
        rows = np.hstack([np.minimum.reduceat(full, starts, axis=0), np.maximum.reduceat(full, starts, axis=0),
                          np.add.reduceat(full.astype(np.float64), starts, axis=0), counts[:, None]])
        keys = idx[starts]
        if self._pending is not None:
            key, row = self._pending
            if key == keys[0]:
                rows[0] = _merge(row, rows[0], self.width)
            else:
                self.ring.extend(np.array([key * self.bucket_us]), row[None, :])
        if len(keys) > 1:
            self.ring.extend(keys[:-1] * self.bucket_us, rows[:-1])
        self._pending = (int(keys[-1]), rows[-1].copy())

    def columns(self, channel: int, end_us: int, span_s: float,
                count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Lowest, highest and mean value of ``channel`` in each of ``count`` equal slices of ``span_s`` up to
        ``end_us``; NaN where a slice has no data."""
        lo, hi = np.full(count, np.nan), np.full(count, np.nan)
        total, samples = np.zeros(count), np.zeros(count)
        span_us = round(span_s * 1e6)
        want = min(self.ring.written, math.ceil(span_us / self.bucket_us) + 1)
        t, rows = self.ring.latest(want)
        if self._pending is not None:
            t = np.r_[t, self._pending[0] * self.bucket_us]
            rows = np.vstack([rows, self._pending[1][None, :]])
        start = end_us - span_us
        keep = t >= start
        t, rows = t[keep], rows[keep]
        if len(t):
            col = np.clip((t - start) * count // span_us, 0, count - 1)
            w = self.width
            np.fmin.at(lo, col, rows[:, channel].astype(np.float64))
            np.fmax.at(hi, col, rows[:, w + channel].astype(np.float64))
            np.add.at(total, col, rows[:, 2 * w + channel].astype(np.float64))
            np.add.at(samples, col, rows[:, 3 * w].astype(np.float64))
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(samples > 0, total / samples, np.nan)
        return lo, hi, np.clip(mean, lo, hi)  # a float32 sum must not put the mean outside its column


def _merge(a: np.ndarray, b: np.ndarray, width: int) -> np.ndarray:
    """Two rows of the same bucket as one: lower of the lows, higher of the highs, sums and counts added."""
    return np.concatenate([np.minimum(a[:width], b[:width]), np.maximum(a[width : 2 * width], b[width : 2 * width]),
                           a[2 * width :] + b[2 * width :]])


class TrendHistory:
    """Bucketed min/max of every shown channel, plus the min/max since reset of the power columns."""

    def __init__(self, shown: Shown, fine_s: float = 0.01, fine_span_s: float = 600.0,
                 coarse_s: float = 1.0, coarse_span_s: float = 4200.0, run_s: float = 60.0,
                 run_span_s: float = 14 * 86400.0) -> None:
        self.shown = shown
        self.width = len(shown.names)
        self.tiers = (Buckets(self.width, fine_s, fine_span_s), Buckets(self.width, coarse_s, coarse_span_s),
                      Buckets(self.width, run_s, run_span_s))
        self.first_utc_us: int | None = None
        self.last_utc_us: int | None = None
        self.power_min: np.ndarray | None = None
        self.power_max: np.ndarray | None = None
        self._seen = 0

    def pull(self, ring: Ring | None) -> int:
        """Take the samples that came since the last pull; returns how many (those older than the ring's
        capacity are gone: a screen that falls that far behind shows a gap, the recording has them all)."""
        if ring is None:
            return 0
        written = ring.written
        fresh = written - self._seen
        if fresh <= 0:
            return 0
        utc, values = ring.latest(min(fresh, ring.capacity))
        self._seen = written
        if self.last_utc_us is not None:
            keep = utc > self.last_utc_us
            utc, values = utc[keep], values[keep]
        if len(utc):
            self.add(utc, values)
        return len(utc)

    def add(self, utc_us: np.ndarray, values: np.ndarray) -> None:
        """Fold a batch of rig values (oldest first) into every tier."""
        full = self.shown.with_power(values)
        self._track_power(full)
        for tier in self.tiers:
            tier.add(utc_us, full)
        if self.first_utc_us is None:
            self.first_utc_us = int(utc_us[0])
        self.last_utc_us = int(utc_us[-1])

    @property
    def run_s(self) -> float:
        """From the first sample the screen saw to the newest, in seconds (0 before any)."""
        if self.first_utc_us is None or self.last_utc_us is None:
            return 0.0
        return (self.last_utc_us - self.first_utc_us) / 1e6

    def _track_power(self, full: np.ndarray) -> None:
        if not self.shown.pairs:
            return
        power = full[:, self.shown.measured :]
        lo, hi = power.min(axis=0), power.max(axis=0)
        if self.power_min is not None:
            lo, hi = np.minimum(lo, self.power_min), np.maximum(hi, self.power_max)
        self.power_min, self.power_max = lo, hi

    def reset_power(self) -> None:
        self.power_min = self.power_max = None

    def columns(self, channel: int, span_s: float, count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Lowest, highest and mean value of ``channel`` in each of ``count`` equal slices of the last
        ``span_s`` (ending at the newest sample), from the finest tier that covers the span; NaN where a slice
        has no data."""
        if self.last_utc_us is None or count <= 0:
            return (np.full(max(count, 0), np.nan),) * 3
        tier = next((t for t in self.tiers if span_s <= t.span_s), self.tiers[-1])
        return tier.columns(channel, self.last_utc_us, span_s, count)
