"""The live screen: polls the pipeline's snapshot ten times a second and never touches the ingest thread.

Keys: ``p`` pauses the display (ingest and recording go on), ``r`` resets min/max, ``m`` adds a mark with a
note, ``s`` changes the trend's span, ``c`` its channel, ``b`` toggles the bell, ``z`` zeroes a current channel,
``w`` stops recording (sealing the run) or starts a new run, ``k`` opens the calibration panel; ``q``,
``ctrl+q`` or ``ctrl+c`` stops the run cleanly (the parts are sealed in a worker thread while the screen
says so) and leaves.
"""

from __future__ import annotations

import os
import threading
import time
from typing import ClassVar

from textual import events, work
from textual.app import App, ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.css.query import NoMatches
from textual.widgets import DataTable, Footer
from textual.worker import get_current_worker

from logger.cal.zero import zero_refusal
from logger.ingest import Pipeline
from logger.ingest.stream import ZERO_MOMENT_S
from logger.tui.banner import Banner
from logger.tui.calpanel import CalPanel
from logger.tui.channels import shown_channels
from logger.tui.events_table import EventDetail, EventTable
from logger.tui.history import TrendHistory
from logger.tui.mark import MarkInput
from logger.tui.messages import MarkNote, RunSealed
from logger.tui.readouts import Readout, Readouts
from logger.tui.status import StatusPanel
from logger.tui.trend import Trend

POLL_S = 0.1


AGAIN_S = 3.0
"""How long a key that asks for a second press waits for it."""


class RailtapApp(App[str]):
    """The live screen over a started :class:`~logger.ingest.Pipeline`; returns a one-line summary."""

    TITLE = "railtap"
    ENABLE_COMMAND_PALETTE = False
    AUTO_FOCUS = "EventTable"
    HORIZONTAL_BREAKPOINTS: ClassVar[list[tuple[int, str]]] = [(0, "-narrow"), (120, "-wide")]
    VERTICAL_BREAKPOINTS: ClassVar[list[tuple[int, str]]] = [(0, "-short"), (32, "-tall")]
    CSS = """
    #lower { height: 1fr; min-height: 8; }
    #events-col { width: 1fr; }
    EventTable { scrollbar-size-horizontal: 0; }
    Screen.-narrow EventDetail { max-height: 2; }
    Screen.-short #lower { height: 2fr; }
    Screen.-wide StatusPanel { width: 46; }
    """
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("p", "pause", "pause"),
        Binding("r", "reset", "reset"),
        Binding("m", "mark", "mark"),
        Binding("s", "span", "span"),
        Binding("c", "channel", "channel"),
        Binding("b", "bell", "bell"),
        Binding("f", "filter", "filter"),
        Binding("F", "filter_channel", "channel only", show=False),
        Binding("z", "zero", "zero"),
        Binding("w", "record", "record"),
        Binding("k", "calibrate", "cal"),
        Binding("q", "quit", "quit"),
        Binding("ctrl+q", "quit_now", "quit", show=False, priority=True),
        Binding("ctrl+c", "quit_now", "quit", show=False),
    ]

    def __init__(self, pipeline: Pipeline) -> None:
        super().__init__()
        self.pipeline = pipeline
        self.history = TrendHistory(shown_channels(pipeline.rig))
        self.paused = False
        self.sealing = False
        self._seen_id = 0
        self._armed: tuple[str, float] | None = None
        """The key that asked "press again" and when: a second press within ``AGAIN_S`` does the thing."""

    def compose(self) -> ComposeResult:
        yield Banner(self.pipeline.rig.name, id="banner")
        yield Readouts(self.history)
        yield Trend(self.history, id="trend")
        with Horizontal(id="lower"):
            with Vertical(id="events-col"):
                yield EventTable(id="events")
                yield EventDetail(id="detail")
            yield StatusPanel(id="status")
        yield MarkInput(id="mark")
        yield CalPanel(self.pipeline, id="cal")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self._polls = 0
        self._end_told = False
        for warning in self.pipeline.rig.warnings():
            self.notify(warning, severity="warning", timeout=15)
        self.set_interval(POLL_S, self.poll)
        self.poll()

    def poll(self) -> None:
        """Read one snapshot and show it. Ingest never waits for this: if drawing fails, the screen ends and
        its caller stops and seals the run, so no sample is lost to a display bug."""
        snap = self.pipeline.snapshot()
        fresh_samples = self.history.pull(self.pipeline.ring)
        try:
            banner = self.query_one(Banner)
        except NoMatches:  # the screen is going away as the app exits
            return
        table = self.query_one(EventTable)
        fresh = [e for e in snap.events if e.id is not None and e.id > self._seen_id][::-1]
        if fresh:
            self._seen_id = fresh[-1].id
        if not self.paused and table.add_events(snap.events, snap.active):
            self.query_one(EventDetail).show(table.selected())
        if banner.show(snap, fresh):
            self.bell()
        self.query_one(StatusPanel).show(snap)
        self.query_one(CalPanel).poll()
        if not self.paused:
            self.query_one(Readouts).show(snap)
            self._polls += 1
            # Nothing new (link down, device silent): the trend stays as drawn. Otherwise it is redrawn five
            # times a second, half the poll rate: drawing it is most of what the screen costs.
            if fresh_samples and self._polls % 2 == 0:
                self.query_one(Trend).new_data()
        if not self.sealing and self.pipeline.wait(0) and not self._end_told:
            # The run ended by itself (its duration, the source, an error) and is sealed. The screen stays, with
            # the whole run's trend and events, until someone has looked: a 12-hour test is read in the morning.
            self._end_told = True
            if self.pipeline.error:
                self.notify("the run stopped on an error and its parts are sealed; q leaves", severity="error",
                            timeout=24 * 3600)
            else:
                self.notify(f"the run ended ({self.pipeline.stop_reason}) and is sealed; the screen stays for a look; "
                            "q leaves", timeout=24 * 3600)

    def on_data_table_row_highlighted(self, message: DataTable.RowHighlighted) -> None:
        """Moving through the event list spells out the event under the cursor."""
        self.query_one(EventDetail).show(self.query_one(EventTable).selected())

    # -- keys -------------------------------------------------------------------------------------

    def action_pause(self) -> None:
        self.paused = not self.paused
        self.query_one(Banner).paused = self.paused
        self.query_one(Trend).set_class(self.paused, "-paused")
        for readout in self.query(Readout):
            readout.set_class(self.paused, "-paused")
        self.notify("display paused; recording goes on" if self.paused else "display running", timeout=2)
        self.poll()

    def action_reset(self) -> None:
        self.history.pull(self.pipeline.ring)  # samples from before the reset must not count after it
        self.history.reset_power()
        self.pipeline.reset_minmax()
        self.notify("min/max reset", timeout=2)

    def action_mark(self) -> None:
        self.query_one(MarkInput).open()

    def on_mark_note(self, message: MarkNote) -> None:
        self.pipeline.mark(message.note)
        self.notify(f"marked: {message.note}", timeout=2)

    def action_span(self) -> None:
        self.query_one(Trend).next_span()

    def action_channel(self) -> None:
        """The trend's next channel; an event list limited to a channel follows it."""
        self.query_one(Trend).next_channel()
        table = self.query_one(EventTable)
        if table.channel is not None:
            self._filter(table.kinds, self._trend_channel())

    def action_filter(self) -> None:
        """The event list by kind: every event, then faults, then each kind seen so far in turn."""
        table = self.query_one(EventTable)
        self._filter(table.next_kinds(), table.channel)

    def action_filter_channel(self) -> None:
        """The event list limited to the channel the trend shows (``c`` picks it), or to every channel again."""
        table = self.query_one(EventTable)
        channel = self._trend_channel() if table.channel is None else None
        if table.channel is None and channel is None:
            self.notify("the trend shows a computed figure, not a channel: press c for a channel", timeout=3)
            return
        self._filter(table.kinds, channel)

    def _trend_channel(self) -> str | None:
        """The rig channel the trend shows, or None for a figure computed from two (power)."""
        trend = self.query_one(Trend)
        name = trend.history.shown.names[trend.channel]
        return name if name in [ch.name for ch in self.pipeline.rig.channels] else None

    def _filter(self, kinds: tuple[str, ...] | None, channel: str | None) -> None:
        table = self.query_one(EventTable)
        table.set_filter(kinds, channel)
        self.query_one(EventDetail).show(table.selected())

    def action_zero(self) -> None:
        """Zero the current channel the trend shows, or the first one. It must carry no current, so the first
        press only says what would happen and shows the reading; a second press within 3 s does it."""
        amps = [ch.name for ch in self.pipeline.rig.channels if ch.role == "amps"]
        if not amps:
            self.notify("no current channel to zero", timeout=2)
            return
        trend = self.query_one(Trend)
        shown = trend.history.shown.names[trend.channel]
        name = shown if shown in amps else amps[0]
        k = [ch.name for ch in self.pipeline.rig.channels].index(name)
        refusal = self._implausible_zero(k)
        if refusal is not None:
            self.notify(refusal, severity="error", timeout=6)
            return
        latest = self.pipeline.snapshot().latest
        reading = "" if latest is None else f" (it reads {latest[k]:+.4g} A now)"
        if self._again(f"zero {name}", f"press z again within {AGAIN_S:g} s to take {name}'s present reading as "
                       f"0 A{reading}: only with no current flowing"):
            self.pipeline.zero(name)
            self.notify(f"{name} zeroed at its present reading; noted in the event list and in the run", timeout=3)

    def _implausible_zero(self, k: int) -> str | None:
        """Why the present reading of channel ``k`` cannot be its zero (the last 50 ms of raw counts), if so."""
        ring, header = self.pipeline.counts_ring, self.pipeline.header
        if ring is None or header is None or not ring.written:
            return None
        period_s = 1.0 / header.rate_hz
        _, counts = ring.latest(max(1, min(ring.capacity, round(ZERO_MOMENT_S / period_s))))
        return zero_refusal(self.pipeline.rig.channels[k], float(counts[:, k].mean()), header.adc_bits)

    def _again(self, what: str, ask: str) -> bool:
        """True on the second press of the same thing within ``AGAIN_S``; the first one shows ``ask``."""
        now = time.monotonic()
        if self._armed is not None and self._armed[0] == what and now - self._armed[1] < AGAIN_S:
            self._armed = None
            return True
        self._armed = (what, now)
        self.notify(ask, severity="warning", timeout=AGAIN_S)
        return False

    def action_record(self) -> None:
        """Stop recording (the run is sealed while the screen goes on) or start a new run folder."""
        on = not self.pipeline.recording
        if not on and not self._again("stop recording", f"press w again within {AGAIN_S:g} s to stop recording "
                                      "(the run is sealed; the screen goes on, recording nothing)"):
            return
        try:
            self.pipeline.set_recording(on)
        except ValueError as exc:
            self.notify(str(exc), severity="warning", timeout=3)
            return
        self.notify("recording to a new run folder" if on else "recording stopped; sealing the run", timeout=3)

    def action_calibrate(self) -> None:
        """Take calibration points for the channel the trend shows (or the first), with the screen running."""
        trend = self.query_one(Trend)
        measured = len(self.pipeline.rig.channels)
        self.query_one(CalPanel).open(trend.channel if trend.channel < measured else 0)

    def action_bell(self) -> None:
        banner = self.query_one(Banner)
        banner.bell_on = not banner.bell_on
        self.notify(f"bell {'on' if banner.bell_on else 'off'} for new brownouts and dropouts", timeout=2)
        self.poll()

    async def action_quit(self) -> None:
        """Stop and seal; while a run is being recorded, only on a second press (one key must not end a test)."""
        if self.pipeline.recording and not self.pipeline.wait(0) and not self.sealing and not self._again(
                "quit", f"press q again within {AGAIN_S:g} s to stop the test and seal the run"):
            return
        self._seal("stopped by user")

    async def action_quit_now(self) -> None:
        """Ctrl+C and Ctrl+Q: a deliberate stop, at once."""
        self._seal("stopped by user")

    # -- stopping ---------------------------------------------------------------------------------

    def _seal(self, why: str) -> None:
        if self.sealing:
            return
        self.sealing = True
        self.query_one(Banner).sealing = "sealing the run's parts... (the journal keeps every sample meanwhile)"
        self.poll()
        self._stop_pipeline(why)

    @work(thread=True, exclusive=True, group="seal")
    def _stop_pipeline(self, why: str) -> None:
        """Stop and seal off the event loop, so the screen keeps drawing while parts are written."""
        worker = get_current_worker()
        self.pipeline.request_stop(self.pipeline.stop_reason if self.pipeline.wait(0) else why)
        while not self.pipeline.wait(0.1):
            if worker.cancelled_event.is_set():
                return
        final = self.pipeline.final or {}
        self.post_message(RunSealed(f"{final.get('status', 'no recording')}: {self.pipeline.stop_reason}"))

    def on_run_sealed(self, message: RunSealed) -> None:
        self.exit(message.summary)

    def _on_key(self, event: events.Key) -> None:
        """Runs before Textual's own key handling (handlers run down the class tree) and skips it once no screen
        is left: a key still on its way up to the app when the run is sealed and the app exits would otherwise
        raise (seen on a loaded machine)."""
        if not self.screen_stack:
            event.prevent_default()


def run_screen(pipeline: Pipeline, hangup: threading.Event | None = None, grace_s: float = 5.0) -> str | None:
    """Show the live screen over a started pipeline until the user quits; the run is stopped and sealed when
    this returns (or, if the screen itself failed, the caller must stop it). A run that ends by itself (its
    duration, the source, an error) is sealed and stays on screen, saying so, until someone presses q.

    If the terminal goes away (a closed window, a dropped SSH session), the hangup signal stops and seals the
    run (the caller sets ``hangup``), but the screen can then block for ever writing to the dead terminal, or
    wait for a q nobody will press. So once the run is sealed after a hangup, the screen has ``grace_s`` to
    close; after that the process ends without it (exit status 129, as for a hangup), its data already safe on
    disk.
    """
    closed = threading.Event()
    hung_up = hangup or threading.Event()

    def watch() -> None:
        hung_up.wait()
        pipeline.wait()
        if not closed.wait(grace_s):  # the terminal went away
            os._exit(129)

    threading.Thread(target=watch, name="railtap-screen-watch", daemon=True).start()
    try:
        return RailtapApp(pipeline).run()
    finally:
        closed.set()
