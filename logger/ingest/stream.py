"""The samples' side of the ingest thread: decoded frames onto the run's time axis and through the core.

It holds frames that came before the device's first header (they need its bits and reference), makes the time
base and the processing core at that header, remakes the calibrator when a header changes the frame format,
applies what was asked for (zeros, profiles, resets) from a batch's first sample, keeps the live rings, and
stops at ``--duration`` of device time. Everything here runs on the ingest thread.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from logger.cal.apply import Calibrator
from logger.core import Block, Processor
from logger.events import Event
from logger.ingest.state import Ring
from logger.rig import Rig, RigError
from logger.store.files import utc_text
from logger.timebase import Stamped, TimeBase
from logger.wire import DeviceHeader, FrameBatch

MAX_PENDING_FRAMES = 1 << 20
ZERO_MOMENT_S = 0.05
"""A zero takes the mean of the readings of the moment it was asked for: 50 ms of them."""


@dataclass(frozen=True)
class Processed:
    """One batch ready for the recorder: the block on the run's axes and its calibrated values."""

    block: Block
    values: np.ndarray


class SampleStream:
    """Frames in, processed batches out, for one pipeline.

    Args:
        rig: what each input measures.
        note: where events go (the pipeline hands them to its log).
        gap_s: the gap rule's limit.
        duration_s: stop after this much device time from the first sample (None: never).
        live_seconds: how much the live rings hold.
        start_utc: the first label when the source gives no arrival times (None: the host's clock then).
        keep_seconds: keep the core's per-second rows until taken (an outlet publishes them).
    """

    def __init__(self, rig: Rig, note: Callable[[list[Event]], None], *, gap_s: float, duration_s: float | None,
                 live_seconds: float, start_utc: float | None, keep_seconds: bool = False) -> None:
        self.rig = rig
        self.keep_seconds = keep_seconds
        self._note = note
        self.gap_s, self.duration_s, self.live_seconds, self.start_utc = gap_s, duration_s, live_seconds, start_utc
        self.header: DeviceHeader | None = None
        self.timebase: TimeBase | None = None
        """Made at the first header (it needs the rate); the one owner of the run's time."""
        self.processor: Processor | None = None
        """Made at the first header; calibrates, detects and accumulates (the same core offline paths use)."""
        self.ring: Ring | None = None
        self.counts_ring: Ring | None = None
        """The same recent rows as raw counts (the rig's channels, its order): what calibration averages."""
        self.unheaded = 0
        """Frames dropped because no header came to say how to read them."""
        self.wrong_width = 0
        """Frames dropped because they held another number of counts than the header names channels."""
        self.past_end = 0
        """Frames decoded after the end of ``--duration`` (read in the same chunk): not part of the run."""
        self.first_us: int | None = None
        self.last_us: int | None = None
        self.last_utc_us: int | None = None
        self._pending: list[tuple[FrameBatch, float, float]] = []
        self._pending_frames = 0
        self._asked: list[tuple[str, Any]] = []
        self.notice: str | None = None
        """Something to tell the user (a profile that could not be applied), until the pipeline takes it."""
        self._width = len(rig.channels)

    @property
    def last_pending(self) -> FrameBatch | None:
        """The newest frames still waiting for a header (for a stand-in header's rate)."""
        return self._pending[-1][0] if self._pending else None

    def hold(self, batch: FrameBatch, arrival: float, offset: float) -> None:
        """Keep frames that came before the first header; past ``MAX_PENDING_FRAMES`` the oldest go, counted, so
        a device that never sends one cannot fill memory."""
        self._pending.append((batch, arrival, offset))
        self._pending_frames += len(batch)
        while self._pending_frames > MAX_PENDING_FRAMES and len(self._pending) > 1:
            dropped, _, _ = self._pending.pop(0)
            self._pending_frames -= len(dropped)
            self.unheaded += len(dropped)

    def on_header(self, header: DeviceHeader) -> bool:
        """Take a header; True for the first, after which :meth:`flush` hands on what waited for it."""
        first = self.header is None
        if first:
            self.timebase = TimeBase(header, time.time() if self.start_utc is None else self.start_utc)
            self.processor = Processor(self.rig, Calibrator(self.rig, header), gap_s=self.gap_s,
                                       keep_rows=self.keep_seconds)
            capacity = max(1024, int(self.live_seconds * header.rate_hz))
            self.ring, self.counts_ring = Ring(capacity, self._width), Ring(capacity, self._width)
        elif _format(header) != _format(self.header):
            self._note(self.processor.set_calibrator(Calibrator(self.rig, header)))
        self.timebase.on_header(header, first)
        self.header = header
        return first

    def flush(self) -> list[Processed]:
        """The frames that waited for the first header, processed."""
        pending, self._pending, self._pending_frames = self._pending, [], 0
        return [p for batch, arrival, offset in pending if (p := self.emit(batch, arrival, offset)) is not None]

    def ask(self, what: str, arg: Any) -> None:
        """A zero, a profile or a reset, applied from the next batch's first sample."""
        self._asked.append((what, arg))

    def emit(self, batch: FrameBatch, arrival: float, offset: float) -> Processed | None:
        """Put one batch on the run's time axis and through the core; None when nothing of it is kept."""
        if self.duration_reached():
            self.past_end += len(batch)
            return None
        if batch.channels != len(self.header.channels):
            self.wrong_width += len(batch)
            self.notice = (f"{self.wrong_width:,} data lines with {batch.channels} count(s) where the header says "
                           f"{len(self.header.channels)} channel(s): not recorded (does the firmware's header match "
                           "what it sends?)")
            return None
        stamped = self.timebase.feed(batch, arrival, offset)
        for step in self.timebase.clock_steps():
            self._note([Event("clock_step", step.utc_us, value=step.step_s, device_start_us=step.device_us,
                              detail=f"the host's wall clock stepped by {step.step_s:+.3f} s; labels slew to it, "
                                     "durations are measured on the device clock")])
        if len(stamped) == 0:
            return None
        if self.first_us is None:
            self.first_us = int(stamped.device_us[0])
        return self._process(stamped)

    def _process(self, s: Stamped) -> Processed | None:
        within = self._within_duration(s.device_us)
        self.past_end += len(s.device_us) - (len(s.device_us) if within.stop is None else within.stop)
        if within.stop == 0:  # all past the end of --duration
            return None
        block = Block(s.device_us[within], s.utc_us[within], s.seq[within], s.segment[within],
                      self.processor.calibrator.select(s.counts[within]))
        self._apply_asked(block)
        out = self.processor.feed(block)
        self._note(out.events)
        self.ring.extend(block.utc_us, out.values)
        self.counts_ring.extend(block.utc_us, block.counts)
        self.last_us, self.last_utc_us = int(block.device_us[-1]), int(block.utc_us[-1])
        return Processed(block, out.values)

    def _apply_asked(self, block: Block) -> None:
        """Zeros, profiles and resets asked for since the last batch, applied from this batch's first sample."""
        asked, self._asked = self._asked, []
        when = utc_text(int(block.utc_us[0]))
        at = {"device_start_us": int(block.device_us[0])}
        for what, arg in asked:
            if what == "reset":
                self.processor.reset_figures()
            elif what == "zero":
                moment = max(1, round(ZERO_MOMENT_S * 1e6 / self.timebase.period_us))
                change = self.processor.zero(arg, block, moment, when)
                note = f"zeroed {arg}: {change.counts:.1f} counts taken as 0 {self.rig.channel(arg).unit}"
                self._note([Event("mark", int(block.utc_us[0]), channel=arg, value=change.counts, detail=note,
                                      **at)])
            elif what == "profile":
                name, profile = arg
                try:
                    _, closed = self.processor.use_profile(name, profile, block, when)
                except RigError as exc:
                    self.notice = str(exc)
                    continue
                self._note(closed)
                self._note([Event("mark", int(block.utc_us[0]), channel=name, **at,
                                      detail=f"calibration applied: {profile.model}, {len(profile.points)} points")])

    def _within_duration(self, device_us: np.ndarray) -> slice:
        """Rows up to the end of ``--duration`` (measured on the device clock from the first sample)."""
        if self.duration_s is None:
            return slice(None)
        end_us = self.first_us + round(self.duration_s * 1e6)
        return slice(0, np.searchsorted(device_us, end_us, side="left"))

    def duration_reached(self) -> bool:
        if self.duration_s is None or self.first_us is None or self.last_us is None:
            return False
        return self.last_us - self.first_us >= round(self.duration_s * 1e6) - self.timebase.period_us

    def finish(self) -> None:
        """The stream has ended: a frame held for judgement is rejected, open events are closed."""
        if self.timebase is not None:
            self.timebase.finish()
        if self.processor is not None:
            self._note(self.processor.finish())

    def calibration_changes(self) -> list[dict[str, Any]]:
        """Zeros and profiles applied while running, oldest first."""
        return [c.as_dict() for c in self.processor.applied] if self.processor is not None else []


def _format(header: DeviceHeader) -> tuple[Any, ...]:
    """What a header says about how to read the frames after it: the inputs, bits and reference."""
    return header.channels, header.adc_bits, header.vref_mv
