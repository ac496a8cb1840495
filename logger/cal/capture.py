"""Taking one calibration point: average the raw counts, but only once the reading has settled.

A point taken while the rail is still moving (a supply slewing to its new setting, a reference meter
auto-ranging, a thermal drift after a load change) bends the whole curve. So a window of raw counts is
judged before it is used: its standard deviation must be within what the user allows, and the means of its
two halves must agree within what that noise explains (four standard errors, or half a count when the noise
is below one count), so a slow drift is caught even when it is quieter than the noise.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

import numpy as np

DEFAULT_SAMPLES = 2000
DEFAULT_MAX_SD = 25.0
"""Counts. Ripple on a rail makes the spread wide without making the mean unsure (a window holds many
ripple cycles), so this only stops a point taken on a badly noisy or oscillating tap; the drift test
is what waits for the rail to settle."""


class Recent(Protocol):
    """Recent raw counts as the ingest thread keeps them (``logger.ingest.Ring``): how many were ever written,
    how many are kept, and copies of the newest."""

    @property
    def written(self) -> int: ...

    @property
    def capacity(self) -> int: ...

    def latest(self, count: int) -> tuple[np.ndarray, np.ndarray]: ...


@dataclass(frozen=True)
class Reading:
    """A window of raw counts, summarised and judged."""

    mean: float
    sd: float
    samples: int
    drift: float
    """Mean of the window's second half minus its first, in counts."""
    at_limit: bool
    """Some counts sat at the bottom or top of the converter's range."""
    settled: bool
    why: str
    """Why it is not settled (empty when it is)."""


def judge(counts: np.ndarray, max_sd: float = DEFAULT_MAX_SD, full_scale: int | None = None) -> Reading:
    """Summarise a window of one channel's raw counts and say whether it is fit to be a point."""
    counts = np.asarray(counts, dtype=np.float64)
    n = len(counts)
    if n < 8:
        return Reading(float("nan"), float("nan"), n, float("nan"), False, False, f"only {n} samples so far")
    mean, sd = float(counts.mean()), float(counts.std(ddof=1))
    half = n // 2
    drift = float(counts[half:].mean() - counts[:half].mean())
    allowed = max(4.0 * 2.0 * sd / np.sqrt(n), 0.5)  # the halves' means differ by 2 sd / sqrt(n) from noise
    at_limit = bool(counts.min() <= 0 or (full_scale is not None and counts.max() >= full_scale))
    why = ""
    if at_limit:
        why = "the reading is at the end of the converter's range; the true value may lie beyond it"
    elif sd > max_sd:
        why = f"too noisy: sd {sd:.2f} counts (allowed {max_sd:g})"
    elif abs(drift) > allowed:
        why = f"still moving: {drift:+.2f} counts between the halves of the window (allowed {allowed:.2f})"
    return Reading(mean, sd, n, drift, at_limit, not why, why)


def take_point(
    ring: Recent,
    column: int,
    samples: int = DEFAULT_SAMPLES,
    max_sd: float = DEFAULT_MAX_SD,
    *,
    full_scale: int | None = None,
    timeout_s: float = 120.0,
    progress: Callable[[Reading], None] | None = None,
    cancelled: Callable[[], bool] = lambda: False,
) -> Reading:
    """Wait for ``samples`` fresh raw counts of ``column`` in ``ring`` and judge them; while unsettled, keep
    judging the newest ``samples`` twice a second (``progress`` is told each time) until settled, cancelled,
    or ``timeout_s``. Returns the last reading, settled or not."""
    samples = min(samples, ring.capacity)
    start = ring.written
    deadline = time.monotonic() + timeout_s
    reading = judge(np.empty(0))
    while not cancelled() and time.monotonic() < deadline:
        fresh = ring.written - start
        if fresh >= samples:
            reading = judge(ring.latest(samples)[1][:, column], max_sd, full_scale)
            if reading.settled:
                return reading
        else:
            reading = Reading(float("nan"), float("nan"), fresh, float("nan"), False, False,
                              f"averaging: {fresh} of {samples} samples")
        if progress is not None:
            progress(reading)
        time.sleep(0.5 if fresh >= samples else 0.1)
    return reading
