"""Streaming level detectors: a sliding mean and a hysteresis comparator, both exact across batch splits.

The comparator follows the way power-quality standards time a dip (IEC 61000-4-30:2015, 5.4.2, from
memory): an event starts at the first sample past the threshold and ends at the first sample back past the
threshold plus the hysteresis; its residual is the extreme value in between. A short sliding mean stands in
for the half-cycle RMS that AC measurements use: a DC rail has no cycle, and the mean only needs to keep a
single noisy sample from making or breaking an event.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Span:
    """One excursion: from the first sample past the threshold to the first sample back past the release
    level (``end_us`` is None while it is still going on)."""

    start_us: int
    end_us: int | None
    extreme: float
    """The lowest value of an excursion below, the highest of one above (the residual, for a dip)."""

    @property
    def duration_s(self) -> float | None:
        return None if self.end_us is None else (self.end_us - self.start_us) / 1e6


class SlidingMean:
    """Causal mean over the last ``width`` samples, carried across batches (the first samples of a stream
    average over a window padded with the first value)."""

    def __init__(self, width: int) -> None:
        self.width = max(1, int(width))
        self._tail: np.ndarray | None = None

    def feed(self, x: np.ndarray) -> np.ndarray:
        if self.width == 1 or len(x) == 0:
            return x.astype(np.float64)
        x = x.astype(np.float64)
        tail = self._tail if self._tail is not None else np.full(self.width - 1, x[0])
        joined = np.concatenate((tail, x))
        self._tail = joined[-(self.width - 1) :]
        return np.convolve(joined, np.full(self.width, 1.0 / self.width), mode="valid")


class Comparator:
    """Hysteresis comparator over one channel, fed batch by batch.

    Args:
        enter: the threshold; an excursion starts at the first sample beyond it.
        leave: the release level; the excursion ends at the first sample at or back beyond it.
        below: True for excursions below (dips), False for excursions above (swells, overcurrent).
    """

    def __init__(self, enter: float, leave: float, below: bool) -> None:
        if (leave < enter) if below else (leave > enter):
            raise ValueError("the release level must lie on the normal side of the threshold")
        self.enter, self.leave, self.below = enter, leave, below
        self._active = False
        self._start_us = 0
        self._extreme = np.inf if below else -np.inf

    def feed(self, t_us: np.ndarray, x: np.ndarray) -> list[Span]:
        """Spans that ended in this batch, in order."""
        n = len(x)
        if n == 0:
            return []
        state = self._states(x)
        before = np.concatenate(([self._active], state[:-1]))
        starts = np.flatnonzero(state & ~before)
        ends = np.flatnonzero(~state & before)
        spans = []
        if self._active and len(ends):
            first_end = ends[0]
            spans.append(Span(self._start_us, int(t_us[first_end]), self._pick(self._extreme, x[:first_end])))
            ends = ends[1:]
        closed = starts[: len(ends)]
        if len(closed):
            bounds = np.empty(2 * len(closed), dtype=np.int64)
            bounds[0::2], bounds[1::2] = closed, ends
            extremes = (np.minimum if self.below else np.maximum).reduceat(x, bounds)[0::2]
            pairs = zip(closed, ends, extremes, strict=True)
            spans += [Span(int(t_us[s]), int(t_us[e]), float(v)) for s, e, v in pairs]
        self._carry(t_us, x, state, starts, len(closed))
        return spans

    def current(self) -> Span | None:
        """The excursion going on now, if any."""
        return Span(self._start_us, None, float(self._extreme)) if self._active else None

    def _states(self, x: np.ndarray) -> np.ndarray:
        """In or out of an excursion after each sample: in past the threshold, out past the release level,
        otherwise as before."""
        if self.below:
            into, out = x < self.enter, x >= self.leave
        else:
            into, out = x > self.enter, x <= self.leave
        decided = into | out
        last = np.maximum.accumulate(np.where(decided, np.arange(len(x)), -1))
        return np.where(last >= 0, into[np.maximum(last, 0)], self._active)

    def _carry(self, t_us: np.ndarray, x: np.ndarray, state: np.ndarray, starts: np.ndarray, used: int) -> None:
        """Remember an excursion still open at the end of the batch."""
        if not state[-1]:
            self._active = False
            self._extreme = np.inf if self.below else -np.inf
            return
        if used < len(starts):  # it began in this batch
            self._start_us = int(t_us[starts[used]])
            self._extreme = self._pick(np.inf if self.below else -np.inf, x[starts[used] :])
        else:  # it was already open before this batch and is still open
            self._extreme = self._pick(self._extreme, x)
        self._active = True

    def _pick(self, running: float, x: np.ndarray) -> float:
        if len(x) == 0:
            return float(running)
        return float(min(running, x.min()) if self.below else max(running, x.max()))
