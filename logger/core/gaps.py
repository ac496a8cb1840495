"""The one rule for a step between samples that is not integrated across.

An interval between two consecutive samples is integrated (charge, energy, a channel's time integral, the
time a rollup covers) when both lie in the same boot segment and either no frame is missing between them or
the step is at most :data:`GAP_S` long. Anything else is a gap: a restart, or missing frames lasting longer
than that, which the link events report (``device_reset``, ``frame_gap``); nothing is guessed across it.
The same rule runs live, on replay, in recovery, recal and review, from the sample table's own columns
(``seq``, ``device_us``, ``segment``), so every path leaves out the same intervals.
"""

from __future__ import annotations

import numpy as np

GAP_S = 0.05
"""Missing frames over a step longer than this are a gap (50 ms: a few mains half-cycles of a bench supply's
input, far longer than a sample period at the rates a tap sends; common practice, no source)."""


def integrated(seq: np.ndarray, device_us: np.ndarray, segment: np.ndarray, gap_us: int) -> np.ndarray:
    """For each interval between consecutive rows (one fewer than rows): whether it is integrated."""
    step = np.diff(device_us)
    return (np.diff(segment) == 0) & (step > 0) & ((np.diff(seq) == 1) | (step <= gap_us))


def gap_rows(seq: np.ndarray, device_us: np.ndarray, segment: np.ndarray, gap_us: int) -> np.ndarray:
    """Rows (from 1) whose interval from the row before is a gap of missing frames within one segment."""
    step = np.diff(device_us)
    return np.flatnonzero((np.diff(segment) == 0) & (np.diff(seq) > 1) & (step > gap_us)) + 1
