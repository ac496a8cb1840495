"""UTC labels for the device's time axis: a host anchor plus device time times (1 + drift).

Device time is what was measured; UTC is only a label for people and joins. The relation is fitted to the
arrivals of reads on the host's steady clock (``time.monotonic()`` for a port, so a step of the wall clock
cannot bend it), as the lower edge of the cloud of (device time, arrival) pairs, because transport only ever
delays. The steady clock becomes UTC by one wall offset, watched for steps: a step is reported, and the
labels move to the new offset by slewing. Whenever the target line moves (a better fit, a restart, a wall
step), the labels slew towards it at :data:`SLEW` and never step: they strictly increase, and no stamp
repeats.

Drift is bounded by what an oscillator can do: :data:`MAX_DRIFT` admits a ceramic resonator (typically
+/-0.5 % initial tolerance; a quartz crystal is within +/-100 ppm; common practice, no source). A fit beyond
it means the data does not arrive in real time (an unpaced replay or simulation, a device emptying a buffer):
host arrivals are then ignored and the labels follow the device clock from the first arrival.
"""

from __future__ import annotations

import math
from bisect import bisect_right
from collections import deque

import numpy as np

MAX_DRIFT = 0.01
SLEW = 0.01
"""How fast labels move towards a corrected line: 10 ms per second of device time."""
WALL_STEP_S = 0.1
"""A change of the wall clock's offset from the steady clock larger than this is a step (NTP, a user)."""
FIT_WINDOW_US = 5_000_000
FIT_SPAN_S = 30.0
UNPACED_SLACK_S = 10.0
"""Device time may run ahead of arrivals by this much (a device emptying its buffer) before the data is
taken as not arriving in real time."""
MAX_WINDOWS = 720
"""An hour of 5 s windows: the fit follows slow temperature drift."""


class Labeler:
    """Device time (µs, unwrapped) to UTC (µs): strictly increasing, slewed, never stepped back."""

    def __init__(self, start_utc_s: float | None = None) -> None:
        self.start_utc_s = start_utc_s
        self._minima: deque[tuple[float, float]] = deque(maxlen=MAX_WINDOWS)  # (device s, steady - device s)
        self._window: tuple[int, float, float] | None = None
        self._slope = 1.0  # steady seconds per device second
        self._lag: float | None = None  # steady - device, seconds, at the fit's origin
        self._origin_us: int | None = None
        self._first: tuple[int, float] | None = None  # the first (device µs, arrival)
        self.wall_offset: float | None = None
        self.paced = True
        """False once arrivals have shown the data is not coming in real time."""
        self.fitted = False
        self._pieces: list[tuple[int, float, float]] = []  # (from device µs, label µs there, slope)
        self._starts: list[int] = []
        self._last_label = -math.inf
        self.steps: list[tuple[int, float]] = []
        """Wall-clock steps seen: (device µs, seconds stepped), for the caller to report."""
        self.fault: str | None = None
        self.anchor = ""
        """What the first label came from: "arrival" or "start" (the given start time)."""

    @property
    def drift_ppm(self) -> float:
        """How fast the device clock runs against the host's steady clock, in ppm (positive: fast)."""
        return (1.0 / self._slope - 1.0) * 1e6

    def restart(self) -> None:
        """A new boot segment: its bridge was estimated, so the offset is measured afresh; the drift stays."""
        self._minima.clear()
        self._window = None

    def observe(self, device_us: int, arrival: float, wall_offset: float) -> None:
        """The frame at ``device_us`` had arrived by ``arrival`` (steady clock, s); UTC = steady + offset."""
        if math.isnan(arrival) or not self.paced:
            return  # without arrivals the labels start from the first sample labelled (``start_utc_s``)
        if self._origin_us is None:
            self._origin_us = device_us
        self._watch_wall(device_us, wall_offset)
        if self._first is None:
            self._first = (device_us, arrival)
        if self._runs_ahead(device_us, arrival):
            return
        d = (device_us - self._origin_us) * 1e-6
        lag = arrival - d * self._slope
        window = (device_us - self._origin_us) // FIT_WINDOW_US
        if self._window is None or window != self._window[0]:
            if self._window is not None:
                self._minima.append(self._window[1:])
                self._refit()
            self._window = (window, d, arrival - d)
        elif arrival - d < self._window[2]:
            self._window = (window, d, arrival - d)
        if self._lag is None or lag < self._lag:
            self._lag = lag
            self._retarget(device_us)

    def _watch_wall(self, device_us: int, wall_offset: float) -> None:
        if self.wall_offset is None:
            self.wall_offset = wall_offset
        elif abs(wall_offset - self.wall_offset) > WALL_STEP_S:
            self.steps.append((device_us, wall_offset - self.wall_offset))
            self.wall_offset = wall_offset
            self._retarget(device_us)

    def _refit(self) -> None:
        """Drift from the windows' least-delayed arrivals once they span 30 s; a slope no oscillator could
        have means the arrivals are not in real time."""
        if len(self._minima) < 3:
            return
        pts = np.array(self._minima)
        d, lag = pts[:, 0], pts[:, 1]
        if d[-1] - d[0] < FIT_SPAN_S:
            return
        slope_minus_one = _lower_edge_slope(d, lag)
        if abs(slope_minus_one) > MAX_DRIFT:
            self._unpaced(int(self._origin_us + d[-1] * 1e6), f"{1 / (1 + slope_minus_one):.3g}x")
            return
        self._slope = 1.0 + float(slope_minus_one)
        self._lag = float(np.min(lag - slope_minus_one * d))
        self.fitted = True
        self._retarget(int(self._origin_us + d[-1] * 1e6))

    def _runs_ahead(self, device_us: int, arrival: float) -> bool:
        """Whether the device clock has run further ahead of the arrivals than any oscillator and buffer
        explain; if so, arrivals are ignored from now on."""
        first_us, first_arrival = self._first
        host_s = arrival - first_arrival
        ahead_s = (device_us - first_us) * 1e-6 - host_s
        if abs(ahead_s) <= UNPACED_SLACK_S + MAX_DRIFT * abs(host_s):
            return False
        speed = (device_us - first_us) * 1e-6 / host_s if host_s > 0 else math.inf
        self._unpaced(device_us, f"{speed:.3g}x" if math.isfinite(speed) else "all at once, or faster than")
        return True

    def _unpaced(self, now_us: int, speed: str) -> None:
        """Give up on arrivals: labels follow the device clock from the first arrival."""
        self.paced = False
        self.fault = (f"data arrived at {speed} the pace of the device clock, which no oscillator explains: not "
                      "in real time (a replay or an unpaced simulation); UTC labels follow the device clock from "
                      "the first arrival")
        first_us, first_arrival = self._first
        self._slope = 1.0
        self._lag = first_arrival - (first_us - self._origin_us) * 1e-6
        self._retarget(now_us)

    def steady_at(self, device_us: int) -> float | None:
        """Host steady time (s) at which the frame at ``device_us`` was sent, by the fit so far."""
        if self._lag is None or self._origin_us is None:
            return None
        return self._lag + (device_us - self._origin_us) * 1e-6 * self._slope

    def _target_us(self, device_us: float) -> float:
        """Where the fit puts the label of ``device_us`` (µs UTC)."""
        if self._lag is None:
            base = self.start_utc_s if self.start_utc_s is not None else 0.0
            return (base + (device_us - self._origin_us) * 1e-6) * 1e6
        offset = self.wall_offset or 0.0
        return (offset + self._lag + (device_us - self._origin_us) * 1e-6 * self._slope) * 1e6

    def _retarget(self, now_us: int) -> None:
        """Move towards the current target from ``now_us`` on: a slewing piece until the labels meet the
        target line, then the line itself."""
        if not self._pieces:
            self.anchor = "arrival" if self._lag is not None else "start"
            self._add_piece(now_us, self._target_us(now_us), self._slope)
            return
        here = self._label_at(now_us)
        miss = self._target_us(now_us) - here
        if abs(miss) < 1.0:
            self._add_piece(now_us, here, self._slope)
            return
        rate = self._slope + math.copysign(SLEW, miss)
        meet_us = now_us + abs(miss) / SLEW
        self._add_piece(now_us, here, rate)
        self._add_piece(math.ceil(meet_us), self._target_us(math.ceil(meet_us)), self._slope)

    def _add_piece(self, from_us: int, label_us: float, slope: float) -> None:
        while self._starts and self._starts[-1] >= from_us:  # a newer plan replaces pieces not yet reached
            self._starts.pop()
            self._pieces.pop()
        self._starts.append(from_us)
        self._pieces.append((from_us, label_us, slope))

    def label_of(self, device_us: int) -> float:
        """The label of one device time, without moving anything on (for events and marks)."""
        if not self._pieces:
            return self._target_us(device_us) if self._origin_us is not None else device_us
        return self._label_at(device_us)

    def _label_at(self, device_us: int) -> float:
        k = max(bisect_right(self._starts, device_us) - 1, 0)
        start, label, slope = self._pieces[k]
        return label + (device_us - start) * slope

    def label(self, device_us: np.ndarray) -> np.ndarray:
        """UTC µs (int64) for unwrapped device times in increasing order, continuing the labels given so far."""
        if len(device_us) == 0:
            return np.zeros(0, dtype=np.int64)
        if self._origin_us is None:
            self._origin_us = int(device_us[0])
        if not self._pieces:
            if self.start_utc_s is None and self._lag is None:
                raise ValueError("labels need an arrival or a start time")
            self._retarget(int(device_us[0]))
        starts = np.asarray(self._starts, dtype=np.int64)
        k = np.maximum(np.searchsorted(starts, device_us, side="right") - 1, 0)
        base = np.array([p[1] for p in self._pieces])
        slope = np.array([p[2] for p in self._pieces])
        utc = np.rint(base[k] + (device_us - starts[k]) * slope[k]).astype(np.int64)
        if self._last_label > -math.inf:
            utc[0] = max(utc[0], int(self._last_label) + 1)
        step = np.arange(len(utc))
        utc = np.maximum.accumulate(utc - step) + step  # strictly increasing even at absurd sample rates
        self._last_label = float(utc[-1])
        return utc


def _lower_edge_slope(d: np.ndarray, lag: np.ndarray) -> float:
    """Slope of the lower edge of (device s, arrival lag) points: a line fitted, then refitted without the
    points well above it (reads that waited in a backlog), so a stretch of late arrivals cannot tilt it."""
    keep = np.ones(len(d), dtype=bool)
    slope = 0.0
    for _ in range(3):
        slope, intercept = np.polyfit(d[keep], lag[keep], 1)
        resid = lag - (intercept + slope * d)
        spread = max(3.0 * float(np.median(np.abs(resid[keep] - np.median(resid[keep])))), 1e-3)
        new = resid <= spread
        if new.sum() < 3 or (new == keep).all():
            break
        keep = new
    return float(slope)
