"""Sequence and device clock made monotonic, checked against each other, cut into boot segments.

The device sends a 16-bit sequence number and a 32-bit microsecond clock; both wrap (the clock every
2**32 us = 71.6 min). Neither is trusted alone. Between two frames the clock says how many sample periods
passed and the sequence must agree (modulo its wrap, so a silence that wrapped the sequence is counted right);
a silence long enough to wrap the clock is measured by the host's steady clock. A frame that disagrees with
the frame before it, while the frame after it agrees with that one, is a corrupt line (a CRC-16 lets some
multi-bit errors through) and is rejected on its own count. When the frames after it agree with the odd frame
instead, the device really stepped: it restarted (a boot header says so for sure), and a new boot segment
begins. The step across a restart is timed from arrivals on the host's steady clock.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from logger.wire.frames import CLOCK_MODULUS, SEQ_MODULUS

PERIOD_SLACK = 0.5
"""A step may differ from its sequence count times the period by this share of a period (timer jitter)."""
RATE_TOLERANCE = 50e-6
"""...plus this share of the step: the sampling timer and the clock share one oscillator, so only timer
rounding separates them (50 ppm, common practice, no source)...
"""
NOMINAL_TOLERANCE = 200e-6
"""...plus how well the period is known: the header's nominal period is off by the crystal's tolerance (tens
of ppm, up to about 100; common practice, no source), a measured one by its own estimate's uncertainty. Only
long steps (silences) feel these shares; a single step is judged by PERIOD_SLACK."""
MEASURED_AFTER = 100
"""Frames of a segment after which its own average period replaces the nominal one."""
HOST_SLACK_S = 2.0
"""Whole clock wraps in a silence are counted from the host's steady clock when it agrees within this (plus
2 % of the silence); a wrap is 71.6 minutes, so a backlog of seconds cannot mislead it."""
VETO_SLACK_S = 10.0
"""A step that needed whole sequence wraps is a restart when it claims this much more (plus 5 %) than the
host's steady clock saw pass; a backlog in the reads before it is allowed for."""


@dataclass(frozen=True)
class Unwrapped:
    """The frames of one batch that were kept, on the run's axes."""

    rows: np.ndarray
    """Which rows of the batch fed were kept (indices, in order)."""
    seq: np.ndarray
    """Unwrapped sequence (int64), continuing across restarts."""
    device_us: np.ndarray
    """Unwrapped device clock (int64 µs), continuing across restarts by the bridged step."""
    segment: np.ndarray
    """Boot segment of each row (int32): 0 at the start, one more at each restart."""
    gaps: tuple[tuple[int, int], ...] = ()
    """(row in the kept rows, frames lost just before it), for every gap inside a segment."""
    resets: tuple[int, ...] = ()
    """Rows (in the kept rows) that start a new boot segment."""


@dataclass
class UnwrapCounters:
    """Running totals; ``rows + lost`` is the sequence span of every segment together."""

    rows: int = 0
    lost: int = 0
    inconsistent: int = 0
    """Lines with a valid CRC whose clock disagrees with their sequence, rejected."""
    duplicates: int = 0
    resets: int = 0


def _steps(p_seq: np.ndarray, p_dev: np.ndarray, seq: np.ndarray, dev: np.ndarray, period: float,
           clock_wraps: np.ndarray | int = 0, rate_tol: float = RATE_TOLERANCE + NOMINAL_TOLERANCE
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sequence and clock steps from frames ``p`` to frames ``seq, dev``, and whether they agree.

    The clock step (plus any whole clock wraps the host measured) says how many periods passed; the sequence
    step is taken modulo its wrap and completed with the wraps that count implies.
    """
    ddev = (dev - p_dev) % CLOCK_MODULUS + np.asarray(clock_wraps, dtype=np.int64) * CLOCK_MODULUS
    dseq_raw = (seq - p_seq) % SEQ_MODULUS
    wraps = np.maximum(np.rint((ddev / period - dseq_raw) / SEQ_MODULUS), 0).astype(np.int64)
    dseq = dseq_raw + wraps * SEQ_MODULUS
    ok = (dseq >= 1) & (np.abs(ddev - dseq * period) <= PERIOD_SLACK * period + rate_tol * ddev)
    return dseq, ddev, ok


class Unwrapper:
    """Streaming unwrap of sequence and clock, one batch of frames at a time.

    A frame that cannot be judged yet (the last of a batch, out of step with the one before) is held until
    the next batch says whether it was corrupt or the start of something new; :meth:`finish` rejects it.
    """

    def __init__(self, rate_hz: float) -> None:
        self.nominal_us = 1e6 / rate_hz
        self.counters = UnwrapCounters()
        self._raw: tuple[int, int] | None = None  # last kept (seq, clock) as sent
        self._last: tuple[int, int] | None = None  # last kept (seq, clock) unwrapped
        self._segment = 0
        self._origin: tuple[int, int] | None = None  # first (seq, clock) unwrapped of this segment
        self._step_dev_us = 0.0  # largest deviation of a single step from the period since the origin
        self._restart_pending = False
        self._rate_changed = False
        self._last_arrival = math.nan  # host steady time by which the last kept frame had arrived
        self.held: tuple[int, int, int, float] | None = None
        """A frame waiting for the next batch: (seq, clock, row in its batch, arrival)."""

    @property
    def period_us(self) -> float:
        """The sample period in device µs: the segment's own average once it has 100 frames, else nominal."""
        if not self._measured:
            return self.nominal_us
        return (self._last[1] - self._origin[1]) / (self._last[0] - self._origin[0])

    @property
    def rate_tolerance(self) -> float:
        """How far the clock may stray from the sequence count times :attr:`period_us`, as a share of the step:
        timer rounding, plus the nominal period's crystal tolerance or the measured period's uncertainty (the
        average over a span is off by at most twice the largest single-step deviation seen, over the span)."""
        if not self._measured:
            return RATE_TOLERANCE + NOMINAL_TOLERANCE
        span = self._last[1] - self._origin[1]
        return RATE_TOLERANCE + 2 * self._step_dev_us / span

    @property
    def _measured(self) -> bool:
        return self._origin is not None and self._last is not None and (
            self._last[0] - self._origin[0] >= MEASURED_AFTER)

    @property
    def segment(self) -> int:
        return self._segment

    def restart(self) -> None:
        """The device says it has just booted: its next frame starts a new segment, whatever it holds."""
        self._restart_pending = self._raw is not None

    def set_rate(self, rate_hz: float) -> None:
        """A header gives the rate; when it changes, the period is measured afresh from here."""
        period = 1e6 / rate_hz
        if abs(period - self.nominal_us) > 1e-9 * period:
            self._rate_changed = self._raw is not None
            if self._last is not None:
                self._origin, self._step_dev_us = self._last, 0.0
        self.nominal_us = period

    def feed(self, seq: np.ndarray, device_us: np.ndarray, arrival: float = math.nan,
             bridge: BridgeTimer | None = None) -> Unwrapped:
        """Unwrap one batch of frames in arrival order. ``arrival`` is the host steady time (s) by which the
        batch's newest frame had arrived (NaN if unknown); ``bridge`` times the step across a restart.

        A held frame from the batch before is judged first; it is reported as row -1.
        """
        seq = np.asarray(seq, dtype=np.int64)
        dev = np.asarray(device_us, dtype=np.int64)
        rows = np.arange(len(seq))
        if self.held is not None:
            h_seq, h_dev, _, _ = self.held
            seq, dev, rows = np.r_[h_seq, seq], np.r_[h_dev, dev], np.r_[-1, rows]
            self.held = None
        if len(seq) == 0:
            return self._empty()
        decision = self._decide(seq, dev, arrival)
        return self._finish(seq, dev, rows, decision, arrival, bridge)

    def finish(self) -> None:
        """At the end of the stream a held frame has nothing after it to vouch for it: rejected."""
        if self.held is not None:
            self.held = None
            self.counters.inconsistent += 1

    # -- deciding which frames to keep -----------------------------------------------------------------

    def _decide(self, seq: np.ndarray, dev: np.ndarray, arrival: float) -> _Decision:
        n = len(seq)
        d = _Decision(n)
        first = None
        if self._raw is None:  # the first frame of all: kept unless the next two say it is the odd one out
            first = 0
            if n >= 3 and not self._agree(seq[0], dev[0], seq[1], dev[1]) and self._agree(seq[1], dev[1],
                                                                                          seq[2], dev[2]):
                d.reject(0)
                self.counters.inconsistent += 1
                first = 1
            self._raw = self._last = (int(seq[first]) - 1, int(dev[first]) - round(self.nominal_us))
        d.ok = self._in_step(seq, dev, 0, self._raw, self.period_us, self.rate_tolerance)
        if first is not None:
            d.ok[first] = True
        if self._rate_changed:
            d.ok[0] = True
            self._rate_changed = False
        if self._restart_pending:
            d.ok[0] = False
        self._resolve(seq, dev, d, arrival)
        return d

    @staticmethod
    def _in_step(seq: np.ndarray, dev: np.ndarray, start: int, before: tuple[int, int], period: float,
                 rate_tol: float) -> np.ndarray:
        """Whether each row from ``start`` on agrees with the row before it (``before`` for the first);
        exact repeats count as agreeing here and are dropped as duplicates later."""
        p_seq = np.r_[before[0], seq[start:-1]]
        p_dev = np.r_[before[1], dev[start:-1]]
        _, ddev, ok = _steps(p_seq, p_dev, seq[start:], dev[start:], period, 0, rate_tol)
        repeat = (ddev == 0) & ((seq[start:] - p_seq) % SEQ_MODULUS == 0)
        return np.r_[np.ones(start, dtype=bool), ok | repeat]

    def _resolve(self, seq: np.ndarray, dev: np.ndarray, d: _Decision, arrival: float) -> None:
        """Judge each frame out of step with the one before it (rare: a loop over those only)."""
        n = len(seq)
        period = self.period_us
        i = -1
        while True:
            later = np.flatnonzero(~d.ok[i + 1 :])
            if len(later) == 0:
                return
            i += 1 + int(later[0])
            ref = d.last_kept_before(i)
            r_seq, r_dev = (int(seq[ref]), int(dev[ref])) if ref >= 0 else self._raw
            if i == 0 and self._restart_pending:
                d.breaks.add(0)
                self._restart_pending = False
                continue
            wraps = self._host_wraps(r_dev, int(dev[i]), ref, arrival)
            if wraps and self._agree(r_seq, r_dev, int(seq[i]), int(dev[i]), wraps, period):
                d.clock_wraps[i] = wraps
                continue
            if i == n - 1:
                d.hold = True
                d.reject(i)
                return
            if self._agree(r_seq, r_dev, int(seq[i + 1]), int(dev[i + 1]), 0, period):
                d.reject(i)  # the one odd line among agreeing neighbours
                d.ok[i + 1] = True
                self.counters.inconsistent += 1
            elif self._agree(int(seq[i]), int(dev[i]), int(seq[i + 1]), int(dev[i + 1]), 0, period):
                d.breaks.add(i)  # the device really stepped: a restart
            elif (new_period := self._same_new_rate(seq, dev, i)) is not None:
                d.breaks.add(i)  # a rate change whose header was lost: measured afresh from here
                self.nominal_us = period = new_period
                d.ok[i + 1 :] = self._in_step(seq, dev, i + 1, (int(seq[i]), int(dev[i])), period,
                                              RATE_TOLERANCE + NOMINAL_TOLERANCE)[i + 1 :]
            else:
                d.reject(i)
                self.counters.inconsistent += 1
                d.ok[i + 1] = False

    def _agree(self, s0: int, d0: int, s1: int, d1: int, wraps: int = 0, period: float | None = None) -> bool:
        _, _, ok = _steps(np.array([s0]), np.array([d0]), np.array([s1]), np.array([d1]),
                          period or self.period_us, wraps, self.rate_tolerance)
        return bool(ok[0])

    @staticmethod
    def _same_new_rate(seq: np.ndarray, dev: np.ndarray, i: int) -> float | None:
        """The new period when frames i, i+1, i+2 step by one each at one period of their own (a rate change
        whose header was lost), else None."""
        if i + 2 >= len(seq):
            return None
        s = (np.diff(seq[i : i + 3]) % SEQ_MODULUS).tolist()
        t = (np.diff(dev[i : i + 3]) % CLOCK_MODULUS).astype(float)
        return float(t.mean()) if s == [1, 1] and t[0] > 0 and abs(t[1] - t[0]) <= 0.1 * t[0] else None

    def _host_wraps(self, r_dev: int, dev: int, ref: int, arrival: float) -> int:
        """Whole clock wraps in a silence, from the host's steady clock (0 when unknown or too short)."""
        if ref >= 0 or math.isnan(arrival) or math.isnan(self._last_arrival):
            return 0
        elapsed_us = (arrival - self._last_arrival) * 1e6
        step = (dev - r_dev) % CLOCK_MODULUS
        wraps = round((elapsed_us - step) / CLOCK_MODULUS)
        if wraps <= 0 or abs(step + wraps * CLOCK_MODULUS - elapsed_us) > HOST_SLACK_S * 1e6 + 0.02 * elapsed_us:
            return 0
        return wraps

    # -- unwrapping what was kept ----------------------------------------------------------------------

    def _finish(self, seq: np.ndarray, dev: np.ndarray, rows: np.ndarray, d: _Decision, arrival: float,
                bridge: BridgeTimer | None) -> Unwrapped:
        if d.hold:
            last = len(seq) - 1
            self.held = (int(seq[last]), int(dev[last]), int(rows[last]), arrival)
        kept = np.flatnonzero(d.keep)
        if len(kept) == 0:
            return self._empty()
        k_seq, k_dev = seq[kept], dev[kept]
        p_seq = np.r_[self._raw[0], k_seq[:-1]]
        p_dev = np.r_[self._raw[1], k_dev[:-1]]
        wraps = np.array([d.clock_wraps.get(int(i), 0) for i in kept], dtype=np.int64) if d.clock_wraps else 0
        dseq, ddev, _ = _steps(p_seq, p_dev, k_seq, k_dev, self.period_us, wraps, self.rate_tolerance)
        is_break = np.isin(kept, np.fromiter(d.breaks, dtype=np.int64, count=len(d.breaks)))
        duplicate = (dseq == 0) | ((ddev == 0) & ~is_break)
        if self._check_silences(dseq, ddev, is_break, duplicate, arrival):
            dseq, ddev, _ = _steps(p_seq, p_dev, k_seq, k_dev, self.period_us, wraps, self.rate_tolerance)
        break_rows = np.flatnonzero(is_break & ~duplicate)
        for j in break_rows:  # across a restart nothing on the device bridges the gap; the host's clock does
            ddev[j] = bridge.step_us(self._last_before(j, p_dev, ddev), int(k_dev[j]), int(k_dev[-1]), arrival,
                                     self.period_us) if bridge is not None else round(self.period_us)
            dseq[j] = 1
        keep = ~duplicate
        self.counters.duplicates += int(duplicate.sum())
        return self._emit(kept[keep], rows, k_seq[keep], k_dev[keep], dseq[keep], ddev[keep],
                          np.flatnonzero(is_break[keep]), arrival)

    def _check_silences(self, dseq: np.ndarray, ddev: np.ndarray, is_break: np.ndarray, duplicate: np.ndarray,
                        arrival: float) -> bool:
        """A step whose sequence count had to be completed by whole wraps agrees with the clock only modulo
        65,536 periods, which a restart can match by chance; when the host's steady clock says far less time
        passed than such a step claims, it is a restart after all. Steps the sequence vouches for by itself are
        never overruled: a backlog makes arrivals say less time passed than did. Returns whether anything
        changed."""
        if math.isnan(arrival) or math.isnan(self._last_arrival):
            return False
        elapsed_us = (arrival - self._last_arrival) * 1e6
        limit = elapsed_us + VETO_SLACK_S * 1e6 + 0.05 * elapsed_us
        wrapped = np.flatnonzero((dseq >= SEQ_MODULUS) & (ddev > limit) & ~is_break & ~duplicate)
        is_break[wrapped] = True
        return len(wrapped) > 0

    def _last_before(self, j: int, p_dev: np.ndarray, ddev: np.ndarray) -> int:
        """The unwrapped clock of the frame kept just before row ``j``."""
        assert self._last is not None
        return self._last[1] + int(ddev[:j].sum())

    def _emit(self, kept: np.ndarray, rows: np.ndarray, k_seq: np.ndarray, k_dev: np.ndarray, dseq: np.ndarray,
              ddev: np.ndarray, breaks: np.ndarray, arrival: float) -> Unwrapped:
        if len(kept) == 0:
            return self._empty()
        assert self._last is not None
        useq = self._last[0] + np.cumsum(dseq)
        udev = self._last[1] + np.cumsum(ddev)
        segment = np.full(len(kept), self._segment, dtype=np.int32)
        for j in breaks:
            segment[j:] += 1
        lost_each = np.where(np.isin(np.arange(len(kept)), breaks), 0, dseq - 1)
        gaps = tuple((int(j), int(lost_each[j])) for j in np.flatnonzero(lost_each))
        self._segment = int(segment[-1])
        single = (dseq == 1) & (lost_each == 0)
        if len(breaks):
            j = int(breaks[-1])
            self._origin, self._step_dev_us = (int(useq[j]), int(udev[j])), 0.0
            single[: j + 1] = False
        elif self._origin is None:
            self._origin = (int(useq[0]), int(udev[0]))
        if single.any():
            self._step_dev_us = max(self._step_dev_us, float(np.abs(ddev[single] - self.period_us).max()))
        self._raw = (int(k_seq[-1]), int(k_dev[-1]))
        self._last = (int(useq[-1]), int(udev[-1]))
        if not math.isnan(arrival):
            self._last_arrival = arrival
        c = self.counters
        c.rows += len(kept)
        c.lost += int(lost_each.sum())
        c.resets += len(breaks)
        return Unwrapped(rows=rows[kept], seq=useq, device_us=udev, segment=segment, gaps=gaps,
                         resets=tuple(int(j) for j in breaks))

    @staticmethod
    def _empty() -> Unwrapped:
        none = np.zeros(0, dtype=np.int64)
        return Unwrapped(rows=none, seq=none, device_us=none, segment=np.zeros(0, dtype=np.int32))


class _Decision:
    """Per row of a batch: kept or rejected, in step with the row before, starts a segment, clock wraps."""

    def __init__(self, n: int) -> None:
        self.keep = np.ones(n, dtype=bool)
        self.ok = np.ones(n, dtype=bool)
        self.breaks: set[int] = set()
        self.clock_wraps: dict[int, int] = {}
        self.hold = False

    def reject(self, i: int) -> None:
        self.keep[i] = False

    def last_kept_before(self, i: int) -> int:
        before = np.flatnonzero(self.keep[:i])
        return int(before[-1]) if len(before) else -1


class BridgeTimer:
    """Times the step across a restart on the host's steady clock.

    The last frame before it is placed by ``emitted_before`` (the host time at which the old segment's frame
    was sent, from the clock relation so far); the first frame after it by the batch's arrival less the new
    clock's time from that frame to the batch's newest. At least one period.
    """

    def __init__(self, emitted_at: Callable[[int], float]) -> None:
        self.emitted_at = emitted_at

    def step_us(self, last_before_us: int, first_after_raw: int, newest_raw: int, arrival: float,
                period_us: float) -> int:
        sent = self.emitted_at(last_before_us)
        if math.isnan(arrival) or sent is None or math.isnan(sent):
            return round(period_us)
        first_after = arrival - ((newest_raw - first_after_raw) % CLOCK_MODULUS) * 1e-6
        return max(round(period_us), round((first_after - sent) * 1e6))
