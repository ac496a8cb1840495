"""Per-second figures of a stream of samples: what the live counters, the rollups and a full review all read.

One row per second of the device clock: ``count``, ``covered_s`` (time integrated in it), ``t_mean`` and
``t_m2`` (mean and sum of squared deviations of the samples' times within the second, in seconds), per channel
``min``, ``max``, ``mean``, ``m2`` (sum of squared deviations from that second's mean, so variances combine
exactly), ``mtx`` (the co-moment of time and value, so the second's straight-line trend can be taken out of
its spread: ``m2 - mtx**2 / t_m2`` is what is left about the line) and ``int`` (the time integral of the
value, unit x seconds), and per rail the integral of volts x amps (joules). ``utc`` labels the row with its
first sample's UTC label.

Integrals use the trapezoid rule on the device clock. Each interval between two samples belongs to the second
of its first sample; intervals across a gap (:mod:`logger.core.gaps`) are left out. Streaming and
chunk-invariant up to rounding: the last sample is carried to the next batch, so any split of the stream
(batches, parts) gives the same rows, and a run's rollups sum to exactly its full-rate integrals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from logger.core.gaps import integrated

SECOND_US = 1_000_000
STATS = ("min", "max", "mean", "m2", "mtx", "int")


@dataclass(frozen=True)
class Pair:
    """A rail's volts and amps channels, by name; their product is the rail's power."""

    rail: str
    volts: str
    amps: str
    sign: float = 1.0
    """-1 for a negative rail, so the power it delivers is counted positive."""


@dataclass(frozen=True)
class Carry:
    """The last sample seen, whose interval to the next one is counted with the next batch."""

    device_us: int
    seq: int
    segment: int
    utc: int
    values: np.ndarray


class Seconds:
    """Streams (device time, seq, segment, utc, values) batches in time order into per-second rows.

    Args:
        channels: channel names, in the order of the value rows given to :meth:`add`.
        pairs: rails whose power is integrated.
        gap_us: the gap rule's limit (:data:`logger.core.gaps.GAP_S` in µs).
        keep_rows: False keeps only the running totals (a live screen needs no history here).
    """

    def __init__(self, channels: list[str], pairs: list[Pair], gap_us: int, carry: Carry | None = None,
                 keep_rows: bool = True) -> None:
        self.gap_us = gap_us
        self.channels = channels
        self.pairs = pairs
        self.volt_cols = np.array([channels.index(p.volts) for p in pairs], dtype=int)
        self.amp_cols = np.array([channels.index(p.amps) for p in pairs], dtype=int)
        self.pair_signs = np.array([p.sign for p in pairs])
        self.carry = carry
        self.keep_rows = keep_rows
        self.rows: list[dict[str, np.ndarray]] = []
        self.integral = np.zeros(len(channels) + len(pairs))
        """Running time integrals since the start or :meth:`reset_totals`: channels, then rails' joules."""
        self.covered_s = 0.0

    def reset_totals(self) -> None:
        self.integral[:] = 0.0
        self.covered_s = 0.0

    def add(self, device_us: np.ndarray, seq: np.ndarray, segment: np.ndarray, utc: np.ndarray,
            cols: np.ndarray) -> None:
        """Fold one batch: ``cols`` holds one row per channel (channels x samples, float64), so every reduction
        runs along contiguous memory."""
        if len(device_us) == 0:
            return
        keys = device_us // SECOND_US
        starts = np.flatnonzero(np.r_[True, keys[1:] != keys[:-1]])
        counts = np.diff(np.r_[starts, len(device_us)])
        integ, cover = self._integrals(device_us, seq, segment, cols, keys, starts)
        self.integral += integ.sum(axis=1)
        self.covered_s += float(cover.sum())
        if self.keep_rows:
            mean = np.add.reduceat(cols, starts, axis=1) / counts
            dev = cols - np.repeat(mean, counts, axis=1)
            t_in = (device_us - keys * SECOND_US) * 1e-6  # seconds into its own second: small, exact enough
            t_mean = np.add.reduceat(t_in, starts) / counts
            t_dev = t_in - np.repeat(t_mean, counts)
            self.rows.append({
                "key": keys[starts], "utc": utc[starts], "count": counts,
                "min": np.minimum.reduceat(cols, starts, axis=1).T, "max": np.maximum.reduceat(cols, starts, axis=1).T,
                "mean": mean.T, "m2": np.add.reduceat(dev * dev, starts, axis=1).T,
                "mtx": np.add.reduceat(dev * t_dev, starts, axis=1).T, "int": integ.T, "covered": cover,
                "t_mean": t_mean, "t_m2": np.add.reduceat(t_dev * t_dev, starts),
            })
        self.carry = Carry(int(device_us[-1]), int(seq[-1]), int(segment[-1]), int(utc[-1]), cols[:, -1].copy())

    def _integrals(self, t: np.ndarray, seq: np.ndarray, segment: np.ndarray, cols: np.ndarray, keys: np.ndarray,
                   starts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Trapezoid areas of each interval, summed into the second of its left sample. The interval from the
        carried sample lands in the first second of this batch when the carry is in that same second, else in
        a row of its own second."""
        both = np.vstack([cols, self._power(cols)])
        ok = integrated(seq, t, segment, self.gap_us)
        half_dt = np.where(ok, np.diff(t) * 0.5e-6, 0.0)
        # Interval i starts at sample i, so the intervals of a second start where its samples do; a zero column
        # at the end gives the last second (whose last sample starts no interval) something to sum.
        area = np.zeros((both.shape[0], len(t)))
        area[:, :-1] = (both[:, 1:] + both[:, :-1]) * half_dt
        integ = np.add.reduceat(area, starts, axis=1)
        cover = np.add.reduceat(np.r_[2.0 * half_dt, 0.0], starts)
        lead = self._lead(int(t[0]), int(seq[0]), int(segment[0]), both[:, 0])
        if lead is not None:
            key, lead_area, lead_dt = lead
            if key == keys[0]:
                integ[:, 0] += lead_area
                cover[0] += lead_dt
            else:
                self.integral += lead_area
                self.covered_s += lead_dt
                if self.keep_rows:
                    self.rows.append(self._lead_row(key, lead_area, lead_dt))
        return integ, cover

    def _power(self, cols: np.ndarray) -> np.ndarray:
        """Volts x amps of each rail (rails x samples), counted positive for a negative rail."""
        return cols[self.volt_cols] * cols[self.amp_cols] * self.pair_signs[:, None]

    def _lead(self, t0: int, seq0: int, seg0: int, first: np.ndarray) -> tuple[int, np.ndarray, float] | None:
        c = self.carry
        if c is None:
            return None
        pair = integrated(np.array([c.seq, seq0]), np.array([c.device_us, t0]), np.array([c.segment, seg0]),
                          self.gap_us)
        if not pair[0]:
            return None
        step = t0 - c.device_us
        prev_both = np.r_[c.values, self._power(c.values[:, None])[:, 0]]
        return c.device_us // SECOND_US, (prev_both + first) / 2 * step * 1e-6, step * 1e-6

    def _lead_row(self, key: int, area: np.ndarray, dt: float) -> dict[str, np.ndarray]:
        """A row for the second that holds only the interval leading into this batch (no samples of its own)."""
        width = len(self.channels)
        nan = np.full((1, width), np.nan)
        return {"key": np.array([key]), "utc": np.array([self.carry.utc]), "count": np.array([0]), "min": nan,
                "max": nan, "mean": nan, "m2": np.zeros((1, width)), "mtx": np.zeros((1, width)), "int": area[None, :],
                "covered": np.array([dt]), "t_mean": np.array([np.nan]), "t_m2": np.zeros(1)}

    def merged(self) -> dict[str, np.ndarray]:
        """Every row so far, in order of seconds, rows of the same second combined."""
        return merge_rows(self.rows, len(self.channels) + len(self.pairs), len(self.channels))

    def take_done(self, final: bool = False) -> dict[str, np.ndarray] | None:
        """The rows of every second before the newest sample's (every row, when the stream has ended: ``final``),
        combined, and forgotten here: a live feed of whole seconds. None when no second has ended since."""
        if not self.rows or self.carry is None:
            return None
        merged = self.merged()
        done = merged["key"] < self.carry.device_us // SECOND_US if not final else np.ones(len(merged["key"]), bool)
        if not done.any():
            self.rows = [merged]
            return None
        self.rows = [{k: v[~done] for k, v in merged.items()}] if not done.all() else []
        return {k: v[done] for k, v in merged.items()}


def merge_rows(rows: list[dict[str, np.ndarray]], int_width: int, width: int) -> dict[str, np.ndarray]:
    """Concatenate batch rows and combine rows of the same second (a second split across batches)."""
    if not rows:
        empty = np.zeros((0, width))
        return {"key": np.zeros(0, dtype=np.int64), "utc": np.zeros(0, dtype=np.int64),
                "count": np.zeros(0, dtype=np.int64), "min": empty, "max": empty, "mean": empty, "m2": empty,
                "mtx": empty, "int": np.zeros((0, int_width)), "covered": np.zeros(0), "t_mean": np.zeros(0),
                "t_m2": np.zeros(0)}
    cat = {k: np.concatenate([r[k] for r in rows]) for k in rows[0]}
    order = np.argsort(cat["key"], kind="stable")
    cat = {k: v[order] for k, v in cat.items()}
    starts = np.flatnonzero(np.r_[True, cat["key"][1:] != cat["key"][:-1]])
    if len(starts) == len(cat["key"]):
        return cat
    n = cat["count"].astype(np.float64)[:, None]
    total = np.add.reduceat(n, starts, axis=0)
    mean_sum = np.add.reduceat(np.nan_to_num(cat["mean"]) * n, starts, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(total > 0, mean_sum / total, np.nan)
    sizes = np.diff(np.r_[starts, len(n)])
    x_off = np.nan_to_num(cat["mean"] - np.repeat(mean, sizes, axis=0))
    t_sum = np.add.reduceat(np.nan_to_num(cat["t_mean"]) * n[:, 0], starts)
    with np.errstate(invalid="ignore", divide="ignore"):
        t_mean = np.where(total[:, 0] > 0, t_sum / total[:, 0], np.nan)
    t_off = np.nan_to_num(cat["t_mean"] - np.repeat(t_mean, sizes))
    return {  # moments of parts of a second combined exactly (the parallel-axis terms)
        "key": cat["key"][starts], "utc": np.minimum.reduceat(cat["utc"], starts),
        "count": np.add.reduceat(cat["count"], starts),
        "min": np.fmin.reduceat(cat["min"], starts, axis=0), "max": np.fmax.reduceat(cat["max"], starts, axis=0),
        "mean": mean, "m2": np.add.reduceat(cat["m2"] + x_off**2 * n, starts, axis=0),
        "mtx": np.add.reduceat(cat["mtx"] + x_off * t_off[:, None] * n, starts, axis=0),
        "int": np.add.reduceat(cat["int"], starts, axis=0), "covered": np.add.reduceat(cat["covered"], starts),
        "t_mean": t_mean, "t_m2": np.add.reduceat(cat["t_m2"] + t_off**2 * n[:, 0], starts),
    }
