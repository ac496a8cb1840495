"""Wires a source to the decoder, clock, calibrator, recorder and live state, in one ingest thread.

The ingest thread reads in bulk, decodes, stamps and calibrates whole batches, hands them to the recorder's
queue and the live ring, and goes back to the port. Anyone watching calls :meth:`Pipeline.snapshot`.
"""

from __future__ import annotations

import contextlib
import threading
import time
from collections import deque
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from logger.cal.profile import Profile
from logger.calibration import Calibrator, stand_in_header
from logger.core import GAP_S, Block, Processor
from logger.events import Event
from logger.events.link import LinkWatch
from logger.events.log import EventLog
from logger.live import LinkHealth, RateMeter, Ring, Snapshot
from logger.recording import Recorder, run_metadata
from logger.rig import Rig, RigError
from logger.sources.base import Chunk, LinkLost, Source, SourceError
from logger.store import sample_batch, sample_schema
from logger.store.files import utc_text
from logger.timebase import Stamped, TimeBase
from logger.wire import Answer, Decoder, DeviceHeader, FrameBatch, encode_line

ASK_HEADER = encode_line("?H")
MAX_PENDING_FRAMES = 1 << 20
QUIET_S = 2.0
"""After this long without a valid frame the screen is told why: garbage only, or nothing at all."""


@dataclass(frozen=True)
class Settings:
    """How a pipeline runs; everything has a default a user would expect."""

    record_root: Path | None = Path("runs")
    label: str = ""
    part_seconds: float = 3600.0
    keep_raw: bool = False
    duration_s: float | None = None
    live_seconds: float = 60.0
    gap_s: float = GAP_S
    """Missing frames over a longer step are a gap: a frame_gap event, and not integrated across."""
    batch_s: float = 0.1
    """Reads are gathered for this long before decoding: fewer, larger batches cost less CPU."""
    header_wait_s: float = 10.0
    retry_s: float = 1.0
    start_utc: float | None = None
    """UTC seconds for the first sample when the source cannot say when bytes arrived (a plain byte dump):
    ``--start`` or the file's own time; None takes the host's clock."""
    start_from: str = "the host's clock at the first sample"
    """Where ``start_utc`` came from, for ``_run.json``."""
    record_at_start: bool = True
    """False: watch only until :meth:`Pipeline.set_recording` starts a run (needs ``record_root``)."""


class Pipeline:
    """One run: from the first byte to sealed parts. Start it, watch snapshots, stop it."""

    def __init__(self, source: Source, rig: Rig, settings: Settings | None = None) -> None:
        self.source = source
        self.rig = rig
        self.settings = settings or Settings()
        self.decoder = Decoder()
        self.timebase: TimeBase | None = None
        """Made at the first header (it needs the rate); the one owner of the run's time."""
        self.header: DeviceHeader | None = None
        self.processor: Processor | None = None
        """Made at the first header; calibrates, detects and accumulates (the same core offline paths use)."""
        self.recorder: Recorder | None = None
        self.ring: Ring | None = None
        self.counts_ring: Ring | None = None
        """The same recent rows as raw counts (the rig's channels, its order): what calibration averages."""
        self.state = "waiting"
        self.message = f"opening {source.name}"
        self.error: str | None = None
        self.stop_reason = "stopped by user"
        self.final: dict[str, Any] | None = None
        """The final metadata of the run sealed last (None if nothing was recorded)."""
        self.sealed: list[dict[str, Any]] = []
        """Every run this pipeline recorded and sealed, oldest first (recording can be stopped and started)."""
        self._record_requests: deque[bool] = deque()
        self._sealers: list[threading.Thread] = []
        self.answers: deque[Answer] = deque(maxlen=20)
        self.reconnects = 0
        self._names = tuple(ch.name for ch in rig.channels)
        self._schema = sample_schema(self._names)
        self._pending: list[tuple[FrameBatch, float, float]] = []
        self._pending_frames = 0
        self.unheaded = 0
        """Frames dropped because no header came to say how to read them."""
        self._pending_raw: list[Chunk] = []
        self._held: list[bytes] = []
        self._held_bytes = 0
        self._held_time = (float("nan"), 0.0)
        self._held_since = float("nan")
        self._fed_at = 0.0
        self._bytes_at = self._frames_at = time.monotonic()
        self._frames_seen = self._rejects_seen = 0
        self.down_since: float | None = None
        """When the link was lost (UTC seconds), while reconnecting."""
        self.events = EventLog()
        self.link = LinkWatch()
        self.rate = RateMeter()
        self._zero_requests: deque[str] = deque()
        self._profile_requests: deque[tuple[str, Profile]] = deque()
        self._reset_requests: deque[bool] = deque()
        self._first_us: int | None = None
        self._last_us: int | None = None
        self._last_utc_us: int | None = None
        self._stop = threading.Event()
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, name="railtap-ingest", daemon=True)

    # -- control ---------------------------------------------------------------------------------

    def start(self) -> None:
        """Open the source (raises :class:`SourceError` at once if it cannot) and start ingesting."""
        self.source.open()
        self.decoder.joined_midstream()
        self._send(ASK_HEADER)
        self._asked_at = time.monotonic()
        self._started_at = self._bytes_at = self._frames_at = time.monotonic()
        self.state, self.message = "waiting", f"connected to {self.source.name}; waiting for the device header"
        self._thread.start()

    def request_stop(self, reason: str = "stopped by user") -> None:
        self.stop_reason = reason
        self._stop.set()

    def wait(self, timeout: float | None = None) -> bool:
        """Block until the run has ended and its parts are sealed; True if it has.

        An Event rather than ``Thread.join``: a join cut short by Ctrl-C can report a live thread as ended,
        and the process would then exit before the parts are sealed.
        """
        return self._done.wait(timeout)

    def stop(self, reason: str = "stopped by user") -> dict[str, Any] | None:
        """Stop, seal everything and return the run's final metadata (None if nothing was recorded)."""
        self.request_stop(reason)
        self.wait()
        return self.final

    # -- ingest thread ---------------------------------------------------------------------------

    def _run(self) -> None:
        try:
            while not self._stop.is_set():
                if not self._step():
                    break
                if self.recorder is not None and not self.recorder.alive:
                    self._fail(self.recorder.error or "recorder stopped")
                    break
            self._drain()
        except (RigError, SourceError) as exc:
            self._fail(str(exc))
        except Exception as exc:  # a bug: still seal what was recorded, and say so in one line
            self._fail(f"internal error, please report it: {type(exc).__name__}: {exc}")
            raise
        finally:
            try:
                self._finish()
            finally:
                self._done.set()

    def _step(self) -> bool:
        try:
            chunk = self.source.read()
        except LinkLost as exc:
            self._drain()
            return self._reconnect(str(exc))
        if chunk is None:
            self._drain()
            self.stop_reason = "source ended"
            return False
        if self._record_requests:
            self._switch_recording()
        if chunk.data:
            self._take(chunk)
        if self._held_bytes >= 65536 or time.monotonic() - self._fed_at >= self.settings.batch_s:
            self._drain()
        self._watch_header()
        self._watch_flow()
        return not self._duration_reached()

    def _take(self, chunk: Chunk) -> None:
        """Hold a read until enough has come to decode as one batch (reads at low rates are tiny). A batch
        spans at most ``batch_s`` of the reads' own arrival times too, so a source faster than real time (a
        replay, the simulator) is not lumped under one arrival."""
        if self._held and chunk.host_time - self._held_since >= self.settings.batch_s:
            self._drain()
        if not self._held:
            self._held_since = chunk.host_time
        if self.recorder is not None:
            self.recorder.add_raw(chunk)
        elif self.settings.keep_raw and self.header is None:
            self._pending_raw.append(chunk)
        self._bytes_at = time.monotonic()
        self._held.append(chunk.data)
        self._held_bytes += len(chunk.data)
        self._held_time = (chunk.host_time, chunk.wall_offset)

    def _drain(self) -> None:
        """Decode everything held; every byte had arrived by the host time of the last read."""
        self._fed_at = time.monotonic()
        if not self._held:
            return
        data, (arrival, offset) = b"".join(self._held), self._held_time
        self._held, self._held_bytes = [], 0
        for item in self.decoder.feed(data):
            if isinstance(item, FrameBatch):
                if self.timebase is None:
                    self._hold_until_header(item, arrival, offset)
                else:
                    self._emit(item, arrival, offset)
            elif isinstance(item, DeviceHeader):
                self._on_header(item)
            else:
                self.answers.append(item)
        self.rate.mark(self.decoder.counters.frames)
        if self.decoder.counters.frames != self._frames_seen:
            self._frames_seen, self._frames_at = self.decoder.counters.frames, time.monotonic()
        if self._last_utc_us is not None:
            self._note(self.link.rejects(self.decoder.counters.rejected, self._last_utc_us))

    def _hold_until_header(self, batch: FrameBatch, arrival: float, offset: float) -> None:
        """Keep frames that came before the first header (they need its ADC bits and reference); past
        ``MAX_PENDING_FRAMES`` the oldest go, counted, so a device that never sends one cannot fill memory."""
        self._pending.append((batch, arrival, offset))
        self._pending_frames += len(batch)
        while self._pending_frames > MAX_PENDING_FRAMES and len(self._pending) > 1:
            dropped, _, _ = self._pending.pop(0)
            self._pending_frames -= len(dropped)
            self.unheaded += len(dropped)

    def _on_header(self, header: DeviceHeader) -> None:
        first = self.header is None
        if first:
            start = self.settings.start_utc
            self.timebase = TimeBase(header, time.time() if start is None else start)
        self.timebase.on_header(header, first)
        if first:
            self.processor = Processor(self.rig, Calibrator(self.rig, header), gap_s=self.settings.gap_s)
        elif _format(header) != _format(self.header):
            self._note(self.processor.set_calibrator(Calibrator(self.rig, header)))
        self.header = header
        if first:
            self._begin(header)

    def _begin(self, header: DeviceHeader) -> None:
        """First header: size the live ring, open the run folder, then flush what waited for the header."""
        capacity = max(1024, int(self.settings.live_seconds * header.rate_hz))
        self.ring = Ring(capacity, len(self._names))
        self.counts_ring = Ring(capacity, len(self._names))
        if self.settings.record_root is not None and self.settings.record_at_start:
            self._open_recorder(header, from_first_byte=True)
        self.state, self.message = "running", f"receiving from {self.source.name}"
        pending, self._pending, self._pending_frames = self._pending, [], 0
        for batch, arrival, offset in pending:
            self._emit(batch, arrival, offset)

    def _open_recorder(self, header: DeviceHeader, from_first_byte: bool = False) -> None:
        """A new run folder. The run opened at the first header counts the link from the first byte (the lines
        decoded with that header and any rejected before it included); one started later, from then on."""
        self.recorder = Recorder(
            self.settings.record_root,
            self.settings.label or self.rig.name,
            self._schema,
            run_metadata(self.rig, header, self.source.name, self.settings.gap_s),
            part_seconds=self.settings.part_seconds,
            keep_raw=self.settings.keep_raw,
        )
        self.recorder.link_base = {} if from_first_byte else self._link_counts()
        self.events.sink = self.recorder.add_event
        for chunk in self._pending_raw:
            self.recorder.add_raw(chunk)
        self._pending_raw = []

    def _emit(self, batch: FrameBatch, arrival: float, offset: float) -> None:
        """Put one batch on the run's time axis and hand on what it keeps."""
        if self._duration_reached():
            return
        stamped = self.timebase.feed(batch, arrival, offset)
        for step in self.timebase.clock_steps():
            self._note([Event("clock_step", step.utc_us, value=step.step_s,
                              detail=f"the host's wall clock stepped by {step.step_s:+.3f} s; labels slew to it, "
                                     "durations are measured on the device clock")])
        if len(stamped) == 0:
            return
        if self._first_us is None:
            self._first_us = int(stamped.device_us[0])
        self._stamp(stamped)

    def _stamp(self, s: Stamped) -> None:
        within = self._within_duration(s.device_us)
        if within.stop == 0:  # all past the end of --duration
            return
        block = Block(s.device_us[within], s.utc_us[within], s.seq[within], s.segment[within],
                      self.processor.calibrator.select(s.counts[within]))
        self._take_requests(block)
        out = self.processor.feed(block)
        self._note(out.events)
        self.ring.extend(block.utc_us, out.values)
        self.counts_ring.extend(block.utc_us, block.counts)
        self._last_us = int(block.device_us[-1])
        self._last_utc_us = int(block.utc_us[-1])
        if self.recorder is not None:
            self.recorder.add_batch(sample_batch(self._schema, block.utc_us, block.device_us, block.seq,
                                                 block.segment, out.values, block.counts))

    def _take_requests(self, block: Block) -> None:
        """Zeros, profiles and resets asked for since the last batch, applied from this batch's first sample
        (the one owner of the run's state applies them; the screen only asks)."""
        when = utc_text(int(block.utc_us[0]))
        while self._reset_requests:
            self._reset_requests.popleft()
            self.processor.reset_figures()
        while self._zero_requests:
            name = self._zero_requests.popleft()
            moment = max(1, round(0.05 * self.header.rate_hz))  # the readings of the moment asked: 50 ms
            change = self.processor.zero(name, block, moment, when)
            note = f"zeroed {name}: {change.counts:.1f} counts taken as 0 {self.rig.channel(name).unit}"
            self.events.add(Event("mark", int(block.utc_us[0]), channel=name, value=change.counts, detail=note,
                                  device_start_us=int(block.device_us[0])))
        while self._profile_requests:
            name, profile = self._profile_requests.popleft()
            try:
                _, closed = self.processor.use_profile(name, profile, block, when)
            except RigError as exc:
                self.message = str(exc)
                continue
            self._note(closed)
            self.events.add(Event("mark", int(block.utc_us[0]), channel=name,
                                  detail=f"calibration applied: {profile.model}, {len(profile.points)} points",
                                  device_start_us=int(block.device_us[0])))

    @property
    def calibration_changes(self) -> list[dict[str, Any]]:
        """Zeros and profiles applied while running, oldest first; every run sealed afterwards records them."""
        return [c.as_dict() for c in self.processor.applied] if self.processor is not None else []

    def _within_duration(self, device_us: np.ndarray) -> slice:
        """Rows up to the end of ``--duration`` (measured on the device clock from the first sample)."""
        if self.settings.duration_s is None:
            return slice(None)
        end_us = self._first_us + round(self.settings.duration_s * 1e6)
        return slice(0, np.searchsorted(device_us, end_us, side="left"))

    def _note(self, events: list[Event]) -> None:
        for event in events:
            self.events.add(event)

    def _reconnect(self, why: str) -> bool:
        """Wait out an unplug: retry the source every ``retry_s`` until it is back or the run is stopped."""
        lost_at = self.down_since = time.time()
        self.state, self.message = "reconnecting", (
            f"link lost ({why}); retrying every {self.settings.retry_s:g} s, and the run goes on when it is back")
        self.source.close()
        while not self._stop.wait(self.settings.retry_s):
            try:
                self.source.open()
            except SourceError as exc:
                self.message = f"link lost; still retrying: {exc}"
                continue
            self.reconnects += 1
            self.down_since = None
            self._bytes_at = self._frames_at = time.monotonic()
            self.decoder.joined_midstream()
            back = time.time()
            # Anchored at the last sample's time (the data's own clock, which a replay or a fast simulation
            # runs ahead of the wall clock), lasting as long as the wall clock says the outage did.
            start_us = self._last_utc_us if self._last_utc_us is not None else int(lost_at * 1e6)
            self.events.add(Event("link_lost", start_us, start_us + int((back - lost_at) * 1e6), detail=why))
            self._send(ASK_HEADER)
            self.state, self.message = "running", f"reconnected to {self.source.name} after {back - lost_at:.1f} s"
            return True
        return False

    def _switch_recording(self) -> None:
        """Start or stop recording as asked, between reads. A stopped run is sealed on a thread of its own,
        so ingest goes straight back to the port; the next start opens a new run folder."""
        while self._record_requests:
            on = self._record_requests.popleft()
            if on and self.recorder is None and self.header is not None:
                self._open_recorder(self.header)
                self.events.add(Event("mark", self._now_us(), detail=f"recording started: {self.recorder.folder}"))
            elif not on and self.recorder is not None:
                old, self.recorder = self.recorder, None
                self.events.add(Event("mark", self._now_us(), detail=f"recording stopped: {old.folder}"))
                self.events.sink = None
                sealer = threading.Thread(target=self._seal, args=(old, "recording stopped by user"),
                                          name="railtap-seal", daemon=True)
                self._sealers.append(sealer)
                sealer.start()

    def _seal(self, recorder: Recorder, reason: str) -> None:
        extra: dict[str, Any] = {"link": self._link_counts(recorder.link_base), "clock": self._clock_account()}
        if self.calibration_changes:
            extra["calibration_changes"] = list(self.calibration_changes)
        final = recorder.stop(reason, extra=extra)
        self.final = None if final is None else {**final, "folder": str(recorder.folder)}
        if self.final is not None:
            self.sealed.append(self.final)
        elif recorder.error and recorder is not self.recorder:
            self.message = f"{recorder.folder}: {recorder.error}; `railtap recover` can finish it"

    def _watch_flow(self) -> None:
        """Say plainly why no samples come: bytes that never make a valid line (a wrong baud rate, most
        often), or no bytes at all (a device without power, stuck, or resetting). Back to running when
        frames flow again."""
        if self.state not in ("waiting", "running", "garbled", "silent"):
            return
        now = time.monotonic()
        quiet = now - self._frames_at
        rejected = self.decoder.counters.rejected
        if quiet < QUIET_S:
            if self.state in ("garbled", "silent"):
                self.state = "running" if self.header is not None else "waiting"
                self.message = f"receiving from {self.source.name} again"
            self._rejects_seen = rejected
            return
        if now - self._bytes_at < QUIET_S and rejected > self._rejects_seen:
            self.state, self.message = "garbled", (
                f"bytes arrive but no valid line for {quiet:.0f} s ({rejected:,} rejected): most likely the "
                f"baud rate is wrong; {self.source.name} must match the firmware (--baud, or device.baud in "
                "the rig file)"
            )
        elif now - self._bytes_at >= QUIET_S and (self.header is not None or self._frames_seen == 0):
            self.state, self.message = "silent", (
                f"nothing from {self.source.name} for {now - self._bytes_at:.0f} s: is this the tap's port, is the "
                "device powered and its firmware running? (the run goes on when data comes back)"
            )

    def _watch_header(self) -> None:
        if self.header is not None:
            return
        now = time.monotonic()
        if now - self._asked_at >= 2.0:
            self._send(ASK_HEADER)
            self._asked_at = now
        waited = now - self._started_at
        if waited >= self.settings.header_wait_s:
            fallback = stand_in_header(self.rig, self._pending[-1][0]) if self._pending else None
            if fallback is not None:
                self._on_header(fallback)
                return
            got = self.decoder.counters
            self.message = (
                f"no header from the device after {waited:.0f} s ({got.frames} frames, {got.rejected} rejected "
                "lines): check the baud rate and firmware, or set device.adc_bits and device.vref_mv in the rig"
            )

    def _duration_reached(self) -> bool:
        limit = self.settings.duration_s
        if limit is None or self._first_us is None or self._last_us is None:
            return False
        if self._last_us - self._first_us >= round(limit * 1e6) - self._period_us():
            self.stop_reason = f"duration of {limit:g} s reached"
            return True
        return False

    def _period_us(self) -> int:
        return round(1e6 / self.header.rate_hz) if self.header else 1

    def _send(self, line: bytes) -> None:
        with contextlib.suppress(SourceError):  # a lost link shows up on the next read
            self.source.write(line)

    def _fail(self, message: str) -> None:
        self.error = message
        self.state, self.message = "failed", message
        self.stop_reason = f"failed: {message}"

    def _finish(self) -> None:
        self.source.close()
        self._record_requests.clear()
        if self.header is None and self.decoder.counters.frames and not self.error:
            self._fail(
                f"{self.decoder.counters.frames} frames arrived but never a header line, so nothing could be "
                "recorded: check the firmware, or set device.adc_bits and device.vref_mv in the rig file"
            )
        if self.timebase is not None:
            self.timebase.finish()
        if self.processor is not None:
            self._note(self.processor.finish())
        for sealer in self._sealers:  # runs stopped earlier first, so ``final`` is the last run's
            sealer.join()
        if self.recorder is not None:
            self._seal(self.recorder, self.stop_reason)
            if self.recorder.error and not self.error:
                self._fail(self.recorder.error)
        if self.state != "failed":
            self.state, self.message = "stopped", self.stop_reason

    # -- watching ----------------------------------------------------------------------------------

    def snapshot(self) -> Snapshot:
        """An immutable picture of the run right now."""
        latest = None
        if self.ring is not None and self.ring.written:
            latest = self.ring.latest(1)[1][0]
        core = self.processor
        return Snapshot(
            state=self.state,
            message=self.message,
            channels=self._names,
            units=tuple(ch.unit for ch in self.rig.channels),
            latest=latest,
            at_limit=core.at_limit if core else (),
            outside_cal=core.outside_now if core else (),
            minimum=core.minimum if core else None,
            maximum=core.maximum if core else None,
            link=self._link_health(),
            recording=self.recorder.state() if self.recorder is not None else None,
            recording_on=self.recording,
            last_run=self.final.get("folder") if self.final else None,
            events=self.events.recent(50),
            active=tuple(core.active()) if core else (),
            charge_ah=core.charge_ah if core else (),
            energy_wh=core.energy_wh if core else (),
        )

    def mark(self, note: str) -> Event:
        """A user's note at this moment (the time of the newest sample, else the host clock)."""
        return self.events.add(Event("mark", self._now_us(), detail=note))

    def set_recording(self, on: bool) -> None:
        """Start recording to a new run folder under ``record_root``, or stop and seal the present one; done
        by the ingest thread at its next read. Raises ValueError when there is nowhere to record to."""
        if on and self.settings.record_root is None:
            raise ValueError("this run was started without a folder to record to")
        self._record_requests.append(on)

    @property
    def recording(self) -> bool:
        """Whether samples are being recorded now, or will be from the first header on."""
        if self._record_requests:
            return self._record_requests[-1]
        if self.header is None:
            return self.settings.record_root is not None and self.settings.record_at_start
        return self.recorder is not None

    def _now_us(self) -> int:
        """The time of the newest sample, else the host clock."""
        return self._last_utc_us if self._last_utc_us is not None else int(time.time() * 1e6)

    def zero(self, channel: str) -> None:
        """Take the current reading of an amps channel as its zero (a tare, with no current flowing): done by
        the ingest thread on the next batch, noted in the event list. Raw counts are always kept, so the run
        can be calibrated again later whatever was zeroed."""
        if self.rig.channel(channel).role != "amps":
            raise ValueError(f"{channel} is not an amps channel; only current channels are zeroed")
        self._zero_requests.append(channel)

    def send(self, command: str) -> None:
        """Send a host command (``?H``, ``?P token``, ``!R hz``) to the device; its answer comes back in
        ``answers``. A lost link just drops it (the next read reports the loss)."""
        self._send(encode_line(command))

    def use_profile(self, channel: str, profile: Profile) -> None:
        """Calibrate ``channel`` with ``profile`` from the next batch on (noted in the event list); raw counts
        are kept, so a recording can be calibrated again afterwards whatever was used live."""
        self.rig.channel(channel)
        self._profile_requests.append((channel, profile))

    def reset_minmax(self) -> None:
        """Forget min/max and start the charge and energy counters again from zero (done by the ingest
        thread at its next batch)."""
        self._reset_requests.append(True)

    def _link_counts(self, since: dict[str, int] | None = None) -> dict[str, Any]:
        """The link's counters (less those in ``since``) and the device clock's drift, for ``_run.json``."""
        c = self.decoder.counters
        t = self.timebase.counters if self.timebase is not None else None
        now = {"frames": c.frames, "lost": t.lost if t else 0, "inconsistent": t.inconsistent if t else 0,
               "rejected": c.rejected, "bad_crc": c.bad_crc, "resets": t.resets if t else 0,
               "reconnects": self.reconnects}
        since = since or {}
        counts: dict[str, Any] = {k: v - since.get(k, 0) for k, v in now.items()}
        drift = self.timebase.drift_ppm if self.timebase is not None else None
        counts["drift_ppm"] = None if drift is None else round(drift, 2)
        counts["rate_hz"] = self.header.rate_hz if self.header else None
        return counts

    def _clock_account(self) -> dict[str, Any]:
        """How the run's UTC labels were made, for ``_run.json`` (durations are on the device clock always)."""
        if self.timebase is None:
            return {}
        labels = self.timebase.labels
        if labels.anchor == "arrival":
            made = "arrival times of reads on the host's steady clock, one wall offset per run"
        else:
            made = f"the device clock from {self.settings.start_from} (the source gave no arrival times)"
        if not labels.paced:
            made = "the device clock from the first arrival (the data did not arrive in real time)"
        account: dict[str, Any] = {"labels": made, "period_us": round(self.timebase.period_us, 3),
                                   "wall_clock_steps": len(labels.steps)}
        if labels.fault:
            account["note"] = labels.fault
        return account

    def _link_health(self) -> LinkHealth:
        c = self.decoder.counters
        t = self.timebase.counters if self.timebase is not None else None
        return LinkHealth(
            source=self.source.name,
            connected=self.state in ("running", "waiting", "garbled", "silent"),
            down_since=self.down_since,
            frames=c.frames,
            rate_hz=self.rate.per_second(),
            lost=t.lost if t else 0,
            rejected=c.rejected,
            bad_crc=c.bad_crc,
            resets=t.resets if t else 0,
            reconnects=self.reconnects,
            drift_ppm=self.timebase.drift_ppm if self.timebase is not None else None,
            decoder=c.as_dict(),
        )


def _format(header: DeviceHeader) -> tuple[Any, ...]:
    """What a header says about how to read the frames after it: the inputs, bits and reference."""
    return header.channels, header.adc_bits, header.vref_mv
