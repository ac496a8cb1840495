"""The ingest thread: source -> decoder -> time base -> processing core -> recorder and live state.

One thread owns a run's state. It reads in bulk, decodes, puts frames on the device's time axis, calibrates,
detects and accumulates whole batches, hands them to the recorder's queue and the live rings, publishes a frozen
:class:`Snapshot`, and goes back to the port. Other threads read the latest snapshot and ask for things (a mark,
a zero, a profile, a reset, recording on or off, a line to the device) through one queue, which the ingest
thread drains between reads.

Batches come as often as someone looks: every ``batch_s`` (a tenth of a second) while snapshots are asked for,
every ``quiet_batch_s`` while nobody has asked for one lately (a headless recording between its status lines).
Events are timed on the device clock, so the batch size changes when work is done, never what is found.
"""

from __future__ import annotations

import contextlib
import math
import queue
import threading
import time
import traceback
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from logger.cal.apply import stand_in_header
from logger.cal.profile import Profile
from logger.core import GAP_S, Processor
from logger.events import Event
from logger.events.link import LinkWatch
from logger.events.log import EventLog
from logger.ingest.account import clock_account, link_counts, link_health
from logger.ingest.flow import FlowWatch
from logger.ingest.outlet import GOING_ON_KINDS, Outlet, event_key, second_figures
from logger.ingest.recorder import QUEUE_BATCHES, Recorder
from logger.ingest.runs import Runs
from logger.ingest.state import RateMeter, Ring, Snapshot
from logger.ingest.stream import Processed, SampleStream
from logger.rig import Rig, RigError
from logger.sources.base import Chunk, LinkLost, Source, SourceError
from logger.store import StoreError, sample_batch, sample_schema
from logger.timebase import TimeBase
from logger.wire import Answer, Decoder, DeviceHeader, FrameBatch, encode_line

ASK_HEADER = encode_line("?H")
PUBLISH_S = 0.1
"""How often the ingest thread publishes a new snapshot while someone watches (screens poll ten times a second)."""
WATCHED_S = 1.0
"""Two snapshots asked for within this long of each other, the latest within this long of now, mean someone is
watching (a screen asks ten times a second): batches and snapshots then come every ``batch_s``. A status line
every few seconds is not watching."""


@dataclass(frozen=True)
class Settings:
    """How a pipeline runs; everything has a default a user would expect."""

    record_root: Path | None = Path("runs")
    label: str = ""
    part_seconds: float = 3600.0
    keep_raw: bool = False
    duration_s: float | None = None
    """Stop after this much device time from the first sample."""
    live_seconds: float = 60.0
    gap_s: float = GAP_S
    """Missing frames over a longer step are a gap: a frame_gap event, and not integrated across."""
    batch_s: float = 0.1
    """While someone watches (asks for snapshots), reads are gathered for this long before decoding, and what a
    screen shows is never older."""
    quiet_batch_s: float = 0.5
    """While nobody watches, reads are gathered for this long. A batch costs about the same fixed Python work
    (a few hundred numpy calls) whatever its size, so fewer, larger ones save most of the CPU of a headless
    recording. It matches the journal's flush interval (``RunWriter``'s 0.5 s), so samples still reach the
    disk at about the same pace: within about 0.8 s of arriving, against 0.6 s with tenth-of-a-second batches."""
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
    """One run: from the first byte to sealed parts. Start it, watch snapshots, stop it.

    ``outlets`` hear of the run as it goes (:mod:`logger.ingest.outlet`): events as they start and end, each
    finished second's figures, and the run's state; they are closed when the run has ended.
    """

    def __init__(self, source: Source, rig: Rig, settings: Settings | None = None,
                 outlets: Sequence[Outlet] = ()) -> None:
        self.source = source
        self.rig = rig
        self.settings = s = settings or Settings()
        self.decoder = Decoder()
        self.events = EventLog()
        self.outlets = list(outlets)
        self.events.listener = self._event_ended if self.outlets else None
        self._going_on: set[str] = set()
        """The keys (``event_key``) of events the outlets have heard begin and not yet end."""
        self.stream = SampleStream(rig, self._note, gap_s=s.gap_s, duration_s=s.duration_s,
                                   live_seconds=s.live_seconds, start_utc=s.start_utc,
                                   keep_seconds=bool(self.outlets))
        self.state = "waiting"
        self.message = f"opening {source.name}"
        self.error: str | None = None
        self.stop_reason = "stopped by user"
        self.crash: str | None = None
        """The traceback of an unexpected error in the ingest thread, for ``_run.json``."""
        self.notes: dict[str, str] = {}
        """The latest note of each kind about the input (a header refused, lines of the wrong width, a profile
        that did not fit): shown on the screen as they come, kept in ``_run.json`` and repeated in the final
        report. Written by the ingest thread; read by others only once it has ended."""
        self.answers: tuple[Answer, ...] = ()
        """The device's latest answers to host commands, oldest first (a new tuple each time: safe to read)."""
        self.reconnects = 0
        self.down_since: float | None = None
        """When the link was lost (UTC seconds), while reconnecting."""
        self._names = tuple(ch.name for ch in rig.channels)
        self._schema = sample_schema(self._names)
        self.runs = Runs(s.record_root or Path("."), s.label, rig, self._schema, source.name, gap_s=s.gap_s,
                         part_seconds=s.part_seconds, keep_raw=s.keep_raw)
        self._link = LinkWatch()
        self._rate = RateMeter()
        self._flow = FlowWatch(source.name)
        self._commands: queue.SimpleQueue[tuple[str, Any]] = queue.SimpleQueue()
        self._record_wanted: bool | None = None
        self._pending_raw: list[Chunk] = []
        self._held: list[bytes] = []
        self._held_bytes = 0
        self._held_time = (float("nan"), 0.0)
        self._held_since = float("nan")
        self._fed_at = 0.0
        self._published_at = 0.0
        self._asked: tuple[float, float] = (-math.inf, -math.inf)
        """When the last two snapshots were asked for (steady clock); other threads swap it, ingest reads it."""
        self._snapshot: Snapshot | None = None
        self._stop = threading.Event()
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, name="railtap-ingest", daemon=True)
        self._publish()

    # -- control (any thread) --------------------------------------------------------------------------

    def start(self) -> None:
        """Open the source (raises :class:`SourceError` at once if it cannot) and start ingesting."""
        self.source.open()
        self.decoder.joined_midstream()
        self._send(ASK_HEADER)
        self._flow = FlowWatch(self.source.name)
        self.state, self.message = "waiting", f"connected to {self.source.name}; waiting for the device header"
        self._publish()
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

    def snapshot(self) -> Snapshot:
        """The latest picture the ingest thread published, with the recorder's progress as of now.

        Asking also tells the ingest thread when: asked again within ``WATCHED_S``, it batches and publishes
        every ``batch_s``. That pair of times is the one value other threads write; the ingest thread only reads.
        """
        self._asked = (self._asked[1], time.monotonic())
        return self._snapshot.with_recording(self.runs.state(), self.recording)

    def mark(self, note: str) -> None:
        """A user's note at this moment (the time of the newest sample, else the host clock)."""
        self._commands.put(("mark", note))

    def set_recording(self, on: bool) -> None:
        """Start recording to a new run folder under ``record_root``, or stop and seal the present one; done
        by the ingest thread at its next read. Raises ValueError when there is nowhere to record to."""
        if on and self.settings.record_root is None:
            raise ValueError("this run was started without a folder to record to")
        self._record_wanted = on
        self._commands.put(("record", on))

    def zero(self, channel: str) -> None:
        """Take the current reading of an amps channel as its zero (a tare, with no current flowing): done by
        the ingest thread on the next batch, noted in the event list. Raw counts are always kept, so the run
        can be calibrated again later whatever was zeroed."""
        if self.rig.channel(channel).role != "amps":
            raise ValueError(f"{channel} is not an amps channel; only current channels are zeroed")
        self._commands.put(("zero", channel))

    def use_profile(self, channel: str, profile: Profile) -> None:
        """Calibrate ``channel`` with ``profile`` from the next batch on (noted in the event list); raw counts
        are kept, so a recording can be calibrated again afterwards whatever was used live."""
        self.rig.channel(channel)
        self._commands.put(("profile", (channel, profile)))

    def reset_minmax(self) -> None:
        """Forget min/max and start the charge and energy counters again from zero, from the next batch."""
        self._commands.put(("reset", None))

    def send(self, command: str) -> None:
        """Send a host command (``?H``, ``?P token``, ``!R hz``) to the device; its answer comes back in
        ``answers``. A lost link just drops it (the next read reports the loss)."""
        self._commands.put(("send", encode_line(command)))

    @property
    def recording(self) -> bool:
        """Whether samples are being recorded now, or will be (as last asked, or from the first header on)."""
        if self._record_wanted is not None:
            return self._record_wanted
        return self.settings.record_root is not None and self.settings.record_at_start

    @property
    def recorder(self) -> Recorder | None:
        """The run being recorded now, if any."""
        return self.runs.current

    @property
    def final(self) -> dict[str, Any] | None:
        """The final metadata of the run sealed last (None if nothing was recorded)."""
        return self.runs.final

    @property
    def sealed(self) -> list[dict[str, Any]]:
        """Every run this pipeline recorded and sealed, oldest first (recording can be stopped and started)."""
        return self.runs.sealed

    @property
    def calibration_changes(self) -> list[dict[str, Any]]:
        """Zeros and profiles applied while running, oldest first; every run sealed afterwards records them."""
        return self.stream.calibration_changes()

    @property
    def header(self) -> DeviceHeader | None:
        return self.stream.header

    @property
    def timebase(self) -> TimeBase | None:
        return self.stream.timebase

    @property
    def processor(self) -> Processor | None:
        return self.stream.processor

    @property
    def ring(self) -> Ring | None:
        return self.stream.ring

    @property
    def counts_ring(self) -> Ring | None:
        """The same recent rows as raw counts (the rig's channels, its order): what calibration averages."""
        return self.stream.counts_ring

    # -- the ingest thread -------------------------------------------------------------------------------

    def _run(self) -> None:
        try:
            while not self._stop.is_set():
                if not self._step():
                    break
                recorder = self.recorder
                if recorder is not None and (recorder.error or not recorder.alive):  # a store failure stops the run
                    self._fail(recorder.error or "the recorder stopped")
                    break
            self._drain()
        except (RigError, SourceError, StoreError) as exc:
            self._fail(str(exc))
        except Exception as exc:  # a bug: still seal what was recorded, say so in one line, keep the details
            self.crash = traceback.format_exc()
            kept = "in the run's _run.json, under crash" if self.recorder is not None else "printed above"
            self._fail(f"internal error, please report it: {type(exc).__name__}: {exc} (the traceback is kept "
                       f"{kept})")
        finally:
            try:
                self._finish()
            finally:
                self._publish()
                self._close_outlets()
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
        self._take_commands()  # before this read is decoded: what was asked during it applies to it
        now = time.monotonic()
        batch_s = self._batch_s(now)
        if chunk.data:
            self._take(chunk, batch_s)
        if self._held_bytes >= 65536 or now - self._fed_at >= batch_s:
            self._drain()
        if now - self._published_at >= max(PUBLISH_S, batch_s):
            self._watch()
            self._publish()
            self._published_at = now
        return not self._duration_reached()

    def _batch_s(self, now: float) -> float:
        """How long reads are gathered now: ``batch_s`` while someone watches, ``quiet_batch_s`` otherwise."""
        before, last = self._asked
        if now - last < WATCHED_S and last - before < WATCHED_S:
            return self.settings.batch_s
        return max(self.settings.batch_s, self.settings.quiet_batch_s)

    def _take_commands(self, finishing: bool = False) -> None:
        """Do what other threads asked; zeros, profiles and resets wait for the next batch's first sample, and
        once the run is finishing, a new run folder is no longer opened."""
        while True:
            try:
                what, arg = self._commands.get_nowait()
            except queue.Empty:
                return
            if what == "record":
                if not finishing:
                    self._switch_recording(arg)
            elif what == "mark":
                self.events.add(Event("mark", self._now_us(), detail=arg, device_start_us=self.stream.last_us))
            elif what == "send":
                self._send(arg)
            else:
                self.stream.ask(what, arg)

    def _take(self, chunk: Chunk, batch_s: float) -> None:
        """Hold a read until enough has come to decode as one batch (reads at low rates are tiny). A batch
        spans at most ``batch_s`` of the reads' own arrival times too, so a source faster than real time (a
        replay, the simulator) is not lumped under one arrival."""
        if self._held and chunk.host_time - self._held_since >= batch_s:
            self._drain()
        if not self._held:
            self._held_since = chunk.host_time
        if self.recorder is not None:
            self.recorder.add_raw(chunk)
        elif self.settings.keep_raw and self.header is None:
            self._pending_raw.append(chunk)
        self._flow.bytes_came()
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
                if self.header is None:
                    self.stream.hold(item, arrival, offset)
                else:
                    self._record(self.stream.emit(item, arrival, offset))
            elif isinstance(item, DeviceHeader):
                self._on_header(item)
            else:
                self.answers = (*self.answers[-19:], item)
        self._rate.mark(self.timebase.counters.rows if self.timebase is not None else 0, self.stream.last_us)
        self._flow.frames_so_far(self.decoder.counters.frames)
        if self.stream.last_utc_us is not None:
            self._note(self._link.rejects(self.decoder.counters.rejected, self.stream.last_utc_us))
        self._tell_outlets()

    def _on_header(self, header: DeviceHeader) -> None:
        if not self.stream.on_header(header):
            return
        if self.settings.record_root is not None and self.settings.record_at_start:
            self._open_run(from_first_byte=True)
        self.state, self.message = "running", f"receiving from {self.source.name}"
        for processed in self.stream.flush():
            self._record(processed)

    def _record(self, processed: Processed | None) -> None:
        """Hand a processed batch to the run being recorded, if any."""
        if processed is None or self.recorder is None:
            return
        b = processed.block
        self.recorder.add_batch(sample_batch(self._schema, b.utc_us, b.device_us, b.seq, b.segment, processed.values,
                                             b.counts))

    def _duration_reached(self) -> bool:
        if self.stream.duration_reached():
            self.stop_reason = f"duration of {self.settings.duration_s:g} s reached"
            return True
        return False

    def _note(self, events: list[Event]) -> None:
        for event in events:
            self.events.add(event)

    def _now_us(self) -> int:
        """The time of the newest sample, else the host clock."""
        last = self.stream.last_utc_us
        return last if last is not None else int(time.time() * 1e6)

    # -- the link and the run folders --------------------------------------------------------------------

    def _reconnect(self, why: str) -> bool:
        """Wait out an unplug: retry the source every ``retry_s`` until it is back or the run is stopped."""
        lost_at = self.down_since = time.time()
        self.state, self.message = "reconnecting", (
            f"link lost ({why}); retrying every {self.settings.retry_s:g} s, and the run goes on when it is back")
        self._publish()
        self.source.close()
        while not self._stop.wait(self.settings.retry_s):
            self._take_commands()
            try:
                self.source.open()
            except SourceError as exc:
                self.message = f"link lost; still retrying: {exc}"
                self._publish()
                continue
            self.reconnects += 1
            self.down_since = None
            self._flow.restart()
            self.decoder.joined_midstream()
            back = time.time()
            # Anchored at the last sample's time (the data's own clock, which a replay or a fast simulation
            # runs ahead of the wall clock), lasting as long as the wall clock says the outage did.
            start_us = self.stream.last_utc_us if self.stream.last_utc_us is not None else int(lost_at * 1e6)
            self.events.add(Event("link_lost", start_us, start_us + int((back - lost_at) * 1e6), detail=why))
            self._send(ASK_HEADER)
            self.state, self.message = "running", f"reconnected to {self.source.name} after {back - lost_at:.1f} s"
            return True
        return False

    def _open_run(self, from_first_byte: bool = False) -> None:
        """A new run folder. The run opened at the first header counts the link from the first byte (the lines
        decoded with that header and any rejected before it included); one started later, from then on."""
        base = {} if from_first_byte else link_counts(self.decoder.counters, self.timebase, self.reconnects,
                                                      self.header)
        recorder = self.runs.open(self.header, base)
        self.events.sink = recorder.add_event
        for chunk in self._pending_raw:
            recorder.add_raw(chunk)
        self._pending_raw = []
        if self.outlets:  # they hear of the run's folder before any of its events
            self._publish()

    def _switch_recording(self, on: bool) -> None:
        """Start or stop recording, between reads: a stopped run is sealed on a thread of its own, so ingest
        goes straight back to the port; the next start opens a new run folder."""
        if on and self.recorder is None and self.header is not None:
            self._open_run()
            self.events.add(Event("mark", self._now_us(), detail=f"recording started: {self.recorder.folder}"))
        elif not on and self.recorder is not None:
            self.events.add(Event("mark", self._now_us(), detail=f"recording stopped: {self.recorder.folder}"))
            self.events.sink = None
            self.runs.stop("recording stopped by user", self._run_account(self.recorder))

    def _run_account(self, recorder: Recorder) -> dict[str, Any]:
        """What a run says at its end, worked out here on the ingest thread."""
        extra: dict[str, Any] = {
            "link": link_counts(self.decoder.counters, self.timebase, self.reconnects, self.header,
                                recorder.link_base, self.stream.past_end),
            "clock": clock_account(self.timebase, self.settings.start_from),
            "recorder_queue": {"peak_batches": recorder.queue_peak, "limit_batches": QUEUE_BATCHES},
        }
        if self.calibration_changes:
            extra["calibration_changes"] = self.calibration_changes
        if self.crash:
            extra["crash"] = self.crash
        if self.notes:
            extra["notes"] = list(self.notes.values())
        for outlet in self.outlets:
            extra[outlet.name] = outlet.account()
        return extra

    def _watch(self) -> None:
        """Ask for a header while none has come, fall back on the rig's after a while, and say why no samples
        come when they do not."""
        if self.header is None:
            if self._flow.ask_header_now():
                self._send(ASK_HEADER)
            waited = self._flow.waited_s()
            if waited >= self.settings.header_wait_s:
                pending = self.stream.last_pending
                fallback = stand_in_header(self.rig, pending) if pending is not None else None
                if fallback is not None:
                    self._on_header(fallback)
                    return
                got = self.decoder.counters
                self.message = (
                    f"no header from the device after {waited:.0f} s ({got.frames} frames, {got.rejected} "
                    "rejected lines): check the baud rate and firmware, or set device.adc_bits and "
                    "device.vref_mv in the rig")
        verdict = self._flow.verdict(self.state, self.decoder.counters.rejected, self.header is not None)
        if verdict is not None:
            self.state, self.message = verdict
        if self.runs.failed:
            self.message, self.runs.failed = self.runs.failed, None
        self._take_notices()

    def _take_notices(self) -> None:
        """Move what the stream and the decoder noticed about the input into the message and the notes."""
        if self.stream.notice:
            self.message = self.notes["stream"] = self.stream.notice
            self.stream.notice = None
        if self.decoder.refused:
            self.message = self.notes["header"] = f"{self.decoder.refused}; it was not used"
            self.decoder.refused = None

    def _send(self, line: bytes) -> None:
        with contextlib.suppress(SourceError):  # a lost link shows up on the next read
            self.source.write(line)

    def _fail(self, message: str) -> None:
        self.error = message
        self.state, self.message = "failed", message
        self.stop_reason = f"failed: {message}"

    def _finish(self) -> None:
        self._take_commands(finishing=True)  # what was asked before the stop: a mark still goes into the run
        self.source.close()
        self._take_notices()
        if self.header is None and self.decoder.counters.frames and not self.error:
            refused = self.notes.pop("header", None)  # said once, in the failure itself
            why = f"no usable header ({refused})" if refused else "never a header line"
            self._fail(
                f"{self.decoder.counters.frames} frames arrived but {why}, so nothing could be recorded: check "
                "the firmware, or set device.adc_bits and device.vref_mv in the rig file"
            )
        self.stream.finish()
        self._tell_outlets(final=True)
        extra = self._run_account(self.recorder) if self.recorder is not None else {}
        error = self.runs.finish(self.stop_reason, extra)
        if error and not self.error:
            self._fail(error)
        if self.state != "failed":
            self.state, self.message = "stopped", self.stop_reason

    # -- outlets -----------------------------------------------------------------------------------------

    def _tell_outlets(self, final: bool = False) -> None:
        """Hand the outlets the seconds that have ended and the events that have begun since the last batch
        (at the end of the stream, its last second too)."""
        core = self.processor
        if not self.outlets or core is None:
            return
        figures = second_figures(core.seconds, final)
        if figures is not None:
            self._each_outlet("seconds", figures)
        for event in core.active():
            key = event_key(event)
            if key not in self._going_on:
                self._going_on.add(key)
                self._each_outlet("event_started", event)

    def _event_ended(self, event: Event) -> None:
        if event.kind in GOING_ON_KINDS:
            key = event_key(event)
            if key in self._going_on:
                self._going_on.discard(key)
            else:  # begun and ended within one batch: heard to begin all the same
                self._each_outlet("event_started", replace(event, end_us=None, device_end_us=None, id=None))
        self._each_outlet("event_ended", event)

    def _each_outlet(self, method: str, *args: Any) -> None:
        """Call one method of every outlet; one that fails is dropped with a note, and the run goes on."""
        for outlet in list(self.outlets):
            try:
                getattr(outlet, method)(*args)
            except Exception as exc:
                self.outlets.remove(outlet)
                self.message = self.notes[f"outlet {outlet.name}"] = (
                    f"{outlet.name} stopped ({type(exc).__name__}: {exc}); the recording goes on without it")

    def _close_outlets(self) -> None:
        self._each_outlet("close")
        self.outlets = []

    def _publish(self) -> None:
        """Swap in a new frozen picture of the run for other threads, and show it to the outlets."""
        core = self.processor
        latest = self.ring.latest(1)[1][0] if self.ring is not None and self.ring.written else None
        self._snapshot = Snapshot(
            state=self.state,
            message=self.message,
            channels=self._names,
            units=tuple(ch.unit for ch in self.rig.channels),
            latest=latest,
            at_limit=core.at_limit if core else (),
            outside_cal=core.outside_now if core else (),
            minimum=None if core is None or core.minimum is None else core.minimum.copy(),
            maximum=None if core is None or core.maximum is None else core.maximum.copy(),
            link=link_health(self.source.name, self.state in ("running", "waiting", "garbled", "silent"),
                             self.down_since, self.decoder.counters, self.timebase, self._rate.per_second(),
                             self.reconnects, self.stream.past_end),
            recording=None,
            last_run=self.final.get("folder") if self.final else None,
            events=self.events.recent(500),
            active=tuple(core.active()) if core else (),
            charge_ah=core.charge_ah if core else (),
            energy_wh=core.energy_wh if core else (),
            elapsed_s=None if self.stream.first_us is None else (self.stream.last_us - self.stream.first_us) / 1e6,
            outlets=tuple(line for o in self.outlets if (line := o.summary())),
        )
        if self.outlets:
            self._each_outlet("status", self._snapshot.with_recording(self.runs.state(), self.recording))
