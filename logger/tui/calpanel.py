"""The calibration panel: take points for one channel while the screen keeps running, fit, save, apply.

The same steps as ``railtap cal`` at the terminal, without blocking: a typed reference value starts a point,
and each poll judges the newest raw counts until they have settled (or a minute has gone by, when the point
is refused with the reason). Ctrl+S fits every model, shows the assessment, saves the recommended profile
and applies it to the live readings; the rig file is left for the user to point at the profile.
"""

from __future__ import annotations

import math
import time
from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.widgets import Input, Static

from logger.cal.assess import CalPoint
from logger.cal.capture import DEFAULT_MAX_SD, DEFAULT_SAMPLES, Reading, judge
from logger.cal.profile import load_profile
from logger.cal.session import CalError, CalOptions, fit_and_save
from logger.ingest import Pipeline

SETTLE_TIMEOUT_S = 60.0


class CalPanel(VerticalScroll):
    """Docked at the bottom while open; Escape closes it (points taken so far are kept until the next
    channel is chosen)."""

    DEFAULT_CSS = """
    CalPanel { display: none; dock: bottom; height: auto; max-height: 70%; border: round $accent;
               background: $surface; padding: 0 1; margin: 0 0 1 0; }
    CalPanel.-open { display: block; }
    CalPanel Input { margin: 0; }
    CalPanel .cal-live { color: $text; }
    CalPanel .cal-points { color: $text-muted; }
    """
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "close", "close"),
        Binding("ctrl+s", "save", "fit & save"),
        Binding("ctrl+z", "undo", "undo point"),
    ]

    def __init__(self, pipeline: Pipeline, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.pipeline = pipeline
        self.channel = 0
        self.points: list[CalPoint] = []
        self._pending: tuple[float, int, float] | None = None  # (reference, ring row at start, deadline)
        self._last: Reading | None = None

    def compose(self) -> ComposeResult:
        yield Static("", classes="cal-live")
        yield Static("", classes="cal-points")
        yield Input(placeholder="reference value read on your meter; Enter takes the point", id="cal-ref")

    def open(self, channel: int) -> None:
        if channel != self.channel:
            self.points, self._pending = [], None
        self.channel = channel
        ch = self.pipeline.rig.channels[channel]
        self.border_title = f"calibrate {ch.name} ({ch.unit})"
        self.add_class("-open")
        self.query_one(Input).disabled = False
        self.query_one(Input).focus()
        self._show_points()

    def action_close(self) -> None:
        self.remove_class("-open")
        self.query_one(Input).disabled = True  # not focusable while hidden, so keys go to the screen
        self._pending = None
        self.app.set_focus(self.app.query_one("#events"))  # the arrow keys move through the events again

    def action_undo(self) -> None:
        self.points = self.points[:-1]
        self._show_points()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        try:
            reference = float(event.value)
        except ValueError:
            self.notify(f"{event.value!r} is not a number", severity="warning", timeout=3)
            return
        ring = self.pipeline.counts_ring
        if ring is None:
            self.notify("no samples yet", severity="warning", timeout=3)
            return
        self._pending = (reference, ring.written, time.monotonic() + SETTLE_TIMEOUT_S)
        event.input.value = ""

    def poll(self) -> None:
        """Judge the newest raw counts; finish a point that is being taken once they have settled."""
        if not self.has_class("-open"):
            return
        ring = self.pipeline.counts_ring
        if ring is None or ring.written == 0:
            return
        n = min(DEFAULT_SAMPLES, ring.capacity)
        header = self.pipeline.header
        full = (1 << header.adc_bits) - 1 if header is not None else None
        self._last = judge(ring.latest(n)[1][:, self.channel], DEFAULT_MAX_SD, full)
        if self._pending is not None:
            self._advance(ring.written, n)
        self._show_live()

    def _advance(self, written: int, n: int) -> None:
        reference, start, deadline = self._pending
        reading = self._last
        if written - start < n:
            return
        if reading.settled:
            self.points.append(CalPoint(reference, reading.mean, reading.sd, reading.samples))
            self._pending = None
            self._show_points()
        elif time.monotonic() > deadline:
            self._pending = None
            self.notify(f"point not taken: {reading.why}", severity="warning", timeout=6)

    def _show_live(self) -> None:
        r = self._last
        if r is None or not math.isfinite(r.mean):
            text = "waiting for samples"
        else:
            state = "settled" if r.settled else r.why
            text = f"now: {r.mean:.2f} counts, sd {r.sd:.2f} over the last {r.samples} samples: {state}"
        if self._pending is not None:
            text += f"\ntaking a point at {self._pending[0]:g}: waiting until the reading has settled"
        self.query_one(".cal-live", Static).update(text)

    def _show_points(self) -> None:
        unit = self.pipeline.rig.channels[self.channel].unit
        lines = [f"  {k + 1}. {p.reference:g} {unit} at {p.counts:.2f} counts (sd {p.counts_sd:.2f})"
                 for k, p in enumerate(self.points)]
        self.query_one(".cal-points", Static).update("\n".join(lines) or "no points yet")

    def action_save(self) -> None:
        rig = self.pipeline.rig
        ch = rig.channels[self.channel]
        header = self.pipeline.header
        said: list[str] = []
        try:
            path = fit_and_save(rig, ch, self.points, CalOptions(), said.append,
                                header.adc_bits if header else None, header.vref_mv if header else None)
        except CalError as exc:
            self.notify(str(exc), severity="warning", timeout=6)
            return
        self.pipeline.use_profile(ch.name, load_profile(path))
        self.query_one(".cal-points", Static).update("".join(said).rstrip())
        self.notify(f"{ch.name}: profile saved to {path} and applied to the live readings", timeout=6)
