"""The processing core: counts in, calibrated values, events and per-second figures out.

Synchronous and free of I/O, so the same code runs live (the ingest thread), on replay, in recovery, in recal
and in tests, and a run's live totals, its review and a recal with the same profile agree. Every measurement
is on the device clock (``device_us``); UTC labels ride along for people.

A calibration change made while running (a zero, a profile) is applied from a sample on and recorded with
that sample's device time, so an offline pass given the same changes applies them at the same sample.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from logger.cal.apply import Calibrator
from logger.cal.profile import Profile, profile_from_dict
from logger.core.gaps import GAP_S, gap_rows
from logger.core.seconds import Pair, Seconds
from logger.events import Event, EventDetector
from logger.events.outside import OutsideWatch
from logger.rig import Rig


@dataclass(frozen=True)
class Block:
    """Samples on the run's axes: as the time base gives them, or as a part holds them."""

    device_us: np.ndarray
    utc_us: np.ndarray
    seq: np.ndarray
    segment: np.ndarray
    counts: np.ndarray
    """Raw counts of the rig's channels, in the rig's order (frames, channels)."""

    def __len__(self) -> int:
        return len(self.device_us)

    def rows(self, part: slice) -> Block:
        return Block(self.device_us[part], self.utc_us[part], self.seq[part], self.segment[part], self.counts[part])


@dataclass(frozen=True)
class Change:
    """A calibration change applied from the sample at ``device_us`` on: a zero (``counts``: the raw reading
    taken as zero) or a profile."""

    device_us: int
    utc: str
    channel: str
    change: str
    counts: float | None = None
    profile: dict[str, Any] | None = None

    def as_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"utc": self.utc, "device_us": self.device_us, "channel": self.channel,
                               "change": self.change}
        if self.counts is not None:
            out["counts"] = round(self.counts, 6)
        if self.profile is not None:
            out["profile"] = self.profile
        return out

    @staticmethod
    def from_dict(doc: dict[str, Any]) -> Change | None:
        """The change as ``_run.json`` keeps it; None for one recorded without the sample it took effect from
        (runs recorded before that was kept), which cannot be placed."""
        if not isinstance(doc.get("device_us"), int):
            return None
        return Change(doc["device_us"], str(doc.get("utc", "")), str(doc["channel"]), str(doc["change"]),
                      doc.get("counts"), doc.get("profile"))


@dataclass
class Processed:
    """What one block gave: its values and the events that finished in it."""

    values: np.ndarray
    events: list[Event] = field(default_factory=list)


class Processor:
    """Calibrate, detect, accumulate; one per run (or per offline pass).

    Args:
        rig: the rig (channels, roles, event rules, power pairs).
        calibrator: counts to units (the processor owns it from here: changes go through :meth:`change`).
        gap_s: the gap rule's limit (:mod:`logger.core.gaps`).
        keep_rows: keep every per-second row (for a rollup); a live run needs only the totals.
        changes: calibration changes to apply at their samples (an offline pass replaying a run).
    """

    def __init__(self, rig: Rig, calibrator: Calibrator, *, gap_s: float = GAP_S, keep_rows: bool = False,
                 changes: list[Change] | None = None) -> None:
        self.rig = rig
        self.calibrator = calibrator
        self.names = tuple(ch.name for ch in rig.channels)
        self.units = tuple(ch.unit for ch in rig.channels)
        self.gap_us = round(gap_s * 1e6)
        self.detector = EventDetector(rig)
        pairs = [Pair(p.rail, self.names[p.volts], self.names[p.amps], p.sign) for p in rig.power_pairs()]
        self.seconds = Seconds(list(self.names), pairs, self.gap_us, keep_rows=keep_rows)
        self.outside: OutsideWatch | None = None
        self._watch_spans()
        self._pending = sorted(changes or [], key=lambda c: c.device_us)
        self.applied: list[Change] = []
        """Calibration changes applied so far, oldest first."""
        self.minimum: np.ndarray | None = None
        self.maximum: np.ndarray | None = None
        self.outside_now: tuple[bool, ...] = ()
        self.at_limit: tuple[bool, ...] = ()
        self._last: tuple[int, int, int, int] | None = None  # device µs, seq, segment, utc of the last sample

    # -- feeding ---------------------------------------------------------------------------------------

    def feed(self, block: Block) -> Processed:
        """Process one block; blocks come in time order, split anyhow."""
        if len(block) == 0:
            return Processed(np.zeros((0, len(self.names)), dtype=np.float32))
        if self._pending and self._pending[0].device_us <= int(block.device_us[-1]):
            return self._feed_across_changes(block)
        values = self.calibrator.values(block.counts)
        events = self._link_events(block)
        events += self.detector.feed(block.device_us, values, block.utc_us)
        if self.outside is not None:
            outside = self.calibrator.outside(block.counts)
            self.outside_now = tuple(bool(b) for b in outside[-1])
            events += self.outside.feed(block.device_us, block.utc_us, outside, values)
        self.at_limit = self.calibrator.at_limit(block.counts[-1])
        self.seconds.add(block.device_us, block.seq, block.segment, block.utc_us, values.T.astype(np.float64))
        self._track(values)
        self._last = (int(block.device_us[-1]), int(block.seq[-1]), int(block.segment[-1]), int(block.utc_us[-1]))
        return Processed(values, events)

    def _feed_across_changes(self, block: Block) -> Processed:
        """Split a block where recorded changes begin, applying each before the rows it covers."""
        out = Processed(np.zeros((0, len(self.names)), dtype=np.float32))
        start = 0
        while self._pending and self._pending[0].device_us <= int(block.device_us[-1]):
            at = int(np.searchsorted(block.device_us, self._pending[0].device_us, side="left"))
            if at > start:
                self._append(out, self.feed(block.rows(slice(start, at))))
                start = at
            out.events += self._apply(self._pending.pop(0))
        self._append(out, self.feed(block.rows(slice(start, None))))
        return out

    @staticmethod
    def _append(out: Processed, more: Processed) -> None:
        out.values = np.concatenate((out.values, more.values)) if len(out.values) else more.values
        out.events += more.events

    def finish(self) -> list[Event]:
        """Close what is still open at the end of the stream."""
        events = self.detector.finish()
        if self.outside is not None:
            events += self.outside.finish()
        return events

    # -- calibration changes ---------------------------------------------------------------------------

    def zero(self, channel: str, block: Block, moment: int, utc: str = "") -> Change:
        """Take the mean raw reading of the first ``moment`` samples of ``block`` as the zero of ``channel``,
        from the block's first sample on (call before feeding the block)."""
        k = self.names.index(channel)
        change = Change(int(block.device_us[0]), utc, channel, "zero", counts=float(np.mean(block.counts[:moment, k])))
        self._apply(change)
        return change

    def use_profile(self, channel: str, profile: Profile, block: Block, utc: str = "") -> tuple[Change, list[Event]]:
        """Calibrate ``channel`` with ``profile`` from the block's first sample on (call before feeding it);
        returns the change and the events it closes (readings outside the old span)."""
        change = Change(int(block.device_us[0]), utc, channel, "profile", profile=profile.to_dict())
        return change, self._apply(change)

    def set_calibrator(self, calibrator: Calibrator) -> list[Event]:
        """A header changed the frame format (bits, reference, inputs): calibrate afresh from here."""
        self.calibrator = calibrator
        return self._watch_spans()

    def _apply(self, change: Change) -> list[Event]:
        k = self.names.index(change.channel)
        events: list[Event] = []
        if change.change == "zero" and change.counts is not None:
            self.calibrator.zero(k, np.array([change.counts]))
        elif change.change == "profile" and change.profile is not None:
            self.calibrator.use(k, profile_from_dict(change.profile))
            events = self._watch_spans()
        self.applied.append(change)
        return events

    def _watch_spans(self) -> list[Event]:
        """Flag readings outside the calibrated span of every channel that has a profile."""
        curves = self.calibrator.curves
        closed = self.outside.finish() if self.outside is not None else []
        if curves:
            spans = {k: tuple(sorted(map(float, curve.value(self.calibrator.spans[k])))) for k, curve in
                     curves.items()}
            self.outside = OutsideWatch(self.names, spans, self.units)
        return closed

    # -- live figures ----------------------------------------------------------------------------------

    def _track(self, values: np.ndarray) -> None:
        lo, hi = values.min(axis=0), values.max(axis=0)
        if self.minimum is not None:
            lo, hi = np.minimum(lo, self.minimum), np.maximum(hi, self.maximum)
        self.minimum, self.maximum = lo, hi

    def reset_figures(self) -> None:
        """Forget min/max and start the charge and energy counters again from zero."""
        self.minimum = self.maximum = None
        self.seconds.reset_totals()

    @property
    def charge_ah(self) -> tuple[float, ...]:
        """Per volts/amps pair (``Rig.power_pairs()``): the amps channel's integral, since start or reset."""
        return tuple(float(self.seconds.integral[self.names.index(p.amps)]) / 3600.0 for p in self.seconds.pairs)

    @property
    def energy_wh(self) -> tuple[float, ...]:
        width = len(self.names)
        return tuple(float(self.seconds.integral[width + j]) / 3600.0 for j in range(len(self.seconds.pairs)))

    def active(self) -> list[Event]:
        return self.detector.active()

    # -- link events -----------------------------------------------------------------------------------

    def _link_events(self, block: Block) -> list[Event]:
        """Gaps (missing frames over more than the gap rule allows) and restarts, from the block's own columns,
        so every path finds the same ones the integrals leave out."""
        t, seq, seg, utc = block.device_us, block.seq, block.segment, block.utc_us
        if self._last is not None:
            t, seq, seg = np.r_[self._last[0], t], np.r_[self._last[1], seq], np.r_[self._last[2], seg]
            utc = np.r_[self._last[3], utc]
        events = []
        for row in gap_rows(seq, t, seg, self.gap_us):
            lost = int(seq[row] - seq[row - 1] - 1)
            events.append(Event("frame_gap", int(utc[row - 1]), int(utc[row]), value=float(lost), count=lost,
                                detail=f"{lost} frames lost", device_start_us=int(t[row - 1]),
                                device_end_us=int(t[row])))
        for row in np.flatnonzero(np.diff(seg)) + 1:
            events.append(Event("device_reset", int(utc[row]), detail="device restarted; its counters began again",
                                device_start_us=int(t[row])))
        return events
