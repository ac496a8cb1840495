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
    start_label: int = 0
    end_label: int | None = None
    """UTC labels of the same two samples (device time is what was measured; labels are for people)."""

    @property
    def duration_s(self) -> float | None:
        return None if self.end_us is None else (self.end_us - self.start_us) / 1e6


class SlidingMean:
    """Causal mean over the samples of the last ``window_us`` of device time, carried across batches.

    Measured on the clock, not in samples, so it follows a change of rate and never averages across a gap.
    Each sample's window holds the samples within ``window_us`` before it, less half of its own step, so
    timer jitter of up to half a period never changes the count (the first samples of a stream average over
    what there is). Each window is summed in the same order whatever the batches, so any split gives the
    same means to the last bit.
    """

    MAX_TAIL = 1 << 20

    def __init__(self, window_us: int) -> None:
        self.window_us = max(0, int(window_us))
        self._t = np.zeros(0, dtype=np.int64)
        self._x = np.zeros(0)

    def feed(self, t_us: np.ndarray, x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        if self.window_us == 0 or len(x) == 0:
            return x
        before = int(self._t[-1]) if len(self._t) else int(t_us[0]) - self.window_us
        step = np.diff(t_us, prepend=before)
        if (self.window_us <= step + step // 2).all():  # no window reaches the sample before: each its own mean
            self._carry(t_us, x)
            return x
        jt, jx = np.r_[self._t, t_us], np.r_[self._x, x]
        m = len(self._t)
        mine = np.arange(m, len(jt))
        cutoff = np.minimum(t_us - self.window_us + step // 2, t_us - 1)  # a sample is always its own window
        width = mine + 1 - np.searchsorted(jt, cutoff, side="right")
        out = np.empty(len(x))
        for w in np.unique(width):
            rows = np.flatnonzero(width == w)
            out[rows] = np.lib.stride_tricks.sliding_window_view(jx, int(w))[mine[rows] - w + 1].sum(axis=1) / w
        self._carry(t_us, x)
        return out

    def _carry(self, t_us: np.ndarray, x: np.ndarray) -> None:
        """Keep the samples a later window may reach: those within ``window_us`` of the last, and one more."""
        if t_us[-1] - t_us[0] <= self.window_us:  # a short batch: the older samples may still be needed
            t_us, x = np.r_[self._t, t_us], np.r_[self._x, x]
        keep = max(int(np.searchsorted(t_us, t_us[-1] - self.window_us, side="left")) - 1, len(t_us) - self.MAX_TAIL, 0)
        self._t, self._x = t_us[keep:], x[keep:]


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
        self._start_label = 0
        self._extreme = np.inf if below else -np.inf

    def feed(self, t_us: np.ndarray, x: np.ndarray, labels: np.ndarray | None = None) -> list[Span]:
        """Spans that ended in this batch, in order; ``labels`` are the samples' UTC labels (``t_us`` if
        None)."""
        n = len(x)
        if n == 0:
            return []
        labels = t_us if labels is None else labels
        state = self._states(x)
        before = np.concatenate(([self._active], state[:-1]))
        starts = np.flatnonzero(state & ~before)
        ends = np.flatnonzero(~state & before)
        spans = []
        if self._active and len(ends):
            first_end = ends[0]
            spans.append(Span(self._start_us, int(t_us[first_end]), self._pick(self._extreme, x[:first_end]),
                              self._start_label, int(labels[first_end])))
            ends = ends[1:]
        closed = starts[: len(ends)]
        if len(closed):
            bounds = np.empty(2 * len(closed), dtype=np.int64)
            bounds[0::2], bounds[1::2] = closed, ends
            extremes = (np.minimum if self.below else np.maximum).reduceat(x, bounds)[0::2]
            pairs = zip(closed, ends, extremes, strict=True)
            spans += [Span(int(t_us[s]), int(t_us[e]), float(v), int(labels[s]), int(labels[e])) for s, e, v in pairs]
        self._carry(t_us, labels, x, state, starts, len(closed))
        return spans

    def current(self) -> Span | None:
        """The excursion going on now, if any."""
        return Span(self._start_us, None, float(self._extreme), self._start_label) if self._active else None

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

    def _carry(self, t_us: np.ndarray, labels: np.ndarray, x: np.ndarray, state: np.ndarray, starts: np.ndarray,
               used: int) -> None:
        """Remember an excursion still open at the end of the batch."""
        if not state[-1]:
            self._active = False
            self._extreme = np.inf if self.below else -np.inf
            return
        if used < len(starts):  # it began in this batch
            self._start_us = int(t_us[starts[used]])
            self._start_label = int(labels[starts[used]])
            self._extreme = self._pick(np.inf if self.below else -np.inf, x[starts[used] :])
        else:  # it was already open before this batch and is still open
            self._extreme = self._pick(self._extreme, x)
        self._active = True

    def _pick(self, running: float, x: np.ndarray) -> float:
        if len(x) == 0:
            return float(running)
        return float(min(running, x.min()) if self.below else max(running, x.max()))
