"""Ten minutes of min/max per 10 ms bucket, kept by the screen from the pipeline's live ring.

The live ring holds only the last minute of raw samples; the trend wants up to ten minutes. Each poll the
screen copies the samples that are new since the last one, folds them into fixed time buckets (lowest and
highest value of each channel per bucket) and keeps those, so a brownout of one sample still shows as a
spike at any span. Memory is fixed: 60,000 buckets whatever the sample rate.
"""

from __future__ import annotations

import math

import numpy as np

from logger.live import Ring
from logger.tui.channels import Shown


class TrendHistory:
    """Bucketed min/max of every shown channel, plus the min/max since reset of the power columns."""

    def __init__(self, shown: Shown, bucket_s: float = 0.01, span_s: float = 600.0) -> None:
        self.shown = shown
        self.width = len(shown.names)
        self.bucket_us = round(bucket_s * 1e6)
        self.buckets = Ring(math.ceil(span_s / bucket_s) + 8, 2 * self.width)
        self.last_utc_us: int | None = None
        self.power_min: np.ndarray | None = None
        self.power_max: np.ndarray | None = None
        self._pending: tuple[int, np.ndarray] | None = None
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
        """Fold a batch of rig values (oldest first) into the buckets."""
        full = self.shown.with_power(values)
        self._track_power(full)
        idx = utc_us // self.bucket_us
        starts = np.flatnonzero(np.r_[True, idx[1:] != idx[:-1]])
        both = np.hstack([np.minimum.reduceat(full, starts, axis=0), np.maximum.reduceat(full, starts, axis=0)])
        keys = idx[starts]
        if self._pending is not None:
            key, row = self._pending
            if key == keys[0]:
                both[0] = np.concatenate([np.minimum(row[: self.width], both[0, : self.width]),
                                          np.maximum(row[self.width :], both[0, self.width :])])
            else:
                self.buckets.extend(np.array([key * self.bucket_us]), row[None, :])
        if len(keys) > 1:
            self.buckets.extend(keys[:-1] * self.bucket_us, both[:-1])
        self._pending = (int(keys[-1]), both[-1].copy())
        self.last_utc_us = int(utc_us[-1])

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

    def columns(self, channel: int, span_s: float, count: int) -> tuple[np.ndarray, np.ndarray]:
        """Lowest and highest value of ``channel`` in each of ``count`` equal slices of the last ``span_s``
        (ending at the newest sample); NaN where a slice has no data."""
        lo = np.full(count, np.nan)
        hi = np.full(count, np.nan)
        if self.last_utc_us is None or count <= 0:
            return lo, hi
        span_us = round(span_s * 1e6)
        want = min(self.buckets.written, math.ceil(span_us / self.bucket_us) + 1)
        t, rows = self.buckets.latest(want)
        if self._pending is not None:
            t = np.r_[t, self._pending[0] * self.bucket_us]
            rows = np.vstack([rows, self._pending[1][None, :]])
        start = self.last_utc_us - span_us
        keep = t >= start
        t, rows = t[keep], rows[keep]
        if len(t) == 0:
            return lo, hi
        col = np.clip((t - start) * count // span_us, 0, count - 1)
        np.fmin.at(lo, col, rows[:, channel].astype(np.float64))
        np.fmax.at(hi, col, rows[:, self.width + channel].astype(np.float64))
        return lo, hi
