"""The banner line at the top: what is going on now, in words, and the bell when a new fault starts.

It shows, in order of importance: the run being sealed; a brownout, dropout, overvoltage or overcurrent going
on; a link that is down or carries no valid data; a fault that ended less than ``hold_s`` ago; a run that
ended by itself (it stays on screen until q); a pipeline still waiting for its device; a paused display; that
nothing is being recorded; otherwise a quiet line with the rig's name.
"""

from __future__ import annotations

import time

from textual.widgets import Static

from logger.events.model import Event
from logger.ingest.state import Snapshot
from logger.tui.fmt import event_title

FAULT_KINDS = ("dropout", "overvoltage", "overcurrent", "brownout", "flicker")
"""The faults the banner tells, worst first: a rail that is gone outranks one out of limits, which outranks a
sag, which outranks the flicker those sags add up to (common practice, no source)."""
NO_DATA = {"reconnecting": "DISCONNECTED", "garbled": "NO VALID DATA", "silent": "NO DATA", "failed": "FAILED"}


class Banner(Static):
    """A line across the top (up to three when the message is long); red while something is wrong, so it
    is seen from across the bench."""

    DEFAULT_CSS = """
    Banner {
        height: auto;
        max-height: 3;
        width: 1fr;
        padding: 0 1;
        background: $primary 30%;
        color: $text;
    }
    Banner.-alert { background: $error; color: $text; text-style: bold; }
    Banner.-warn { background: $warning 70%; color: $text; text-style: bold; }
    Banner.-muted { background: $panel; color: $text-muted; }
    """

    def __init__(self, rig_name: str, hold_s: float = 5.0, *, id: str | None = None) -> None:
        super().__init__("", id=id)
        self.rig_name = rig_name
        self.hold_s = hold_s
        self.bell_on = False
        self.paused = False
        self.sealing = ""
        self._recent: Event | None = None
        self._line = ""
        self._recent_at = 0.0
        self._active_seen: set[tuple[str, str | None, int]] = set()

    def show(self, snap: Snapshot, fresh: list[Event]) -> bool:
        """Update from a snapshot and the events new since the last one; True if the bell should ring."""
        ring = False
        held = self._recent is not None and time.monotonic() - self._recent_at < self.hold_s
        for event in sorted((e for e in fresh if e.kind in FAULT_KINDS), key=_rank):
            if not held or _rank(event) <= _rank(self._recent):  # a lesser fault does not hide a worse one
                self._recent, self._recent_at, held = event, time.monotonic(), True
            ring = ring or (event.kind != "flicker" and self._key(event) not in self._active_seen)
        active = {self._key(e) for e in snap.active}
        ring = ring or bool(active - self._active_seen)
        self._active_seen = active | {self._key(e) for e in fresh}
        self._paint(snap)
        return ring and self.bell_on

    @staticmethod
    def _key(event: Event) -> tuple[str, str | None, int]:
        return ("fault", event.channel, event.start_us)

    def _paint(self, snap: Snapshot) -> None:
        kind, line = "", f"railtap | {self.rig_name} | all quiet"
        held = self._recent is not None and time.monotonic() - self._recent_at < self.hold_s
        if self.sealing:
            kind, line = "-warn", self.sealing
        elif snap.active:
            kind, line = "-alert", "NOW: " + "; ".join(event_title(e) for e in sorted(snap.active, key=_rank))
        elif snap.state in NO_DATA:
            kind, line = "-alert", f"{NO_DATA[snap.state]}{_for(snap.link.down_since)}: {snap.message}"
        elif held:
            kind, line = "-alert", f"JUST NOW: {event_title(self._recent)}"
        elif snap.state == "stopped":
            kind, line = "-warn", f"RUN ENDED: {snap.message}; every part is sealed; q leaves"
        elif snap.state != "running":
            kind, line = "-warn", f"{snap.state.upper()}: {snap.message}"
        elif self.paused:
            kind, line = "-muted", "display paused (recording goes on); press p to go on"
        elif snap.recording is None:
            kind, line = "-warn", f"NOT RECORDING: nothing is being kept (w starts a run) | {self.rig_name}"
        if self.paused and kind != "-muted":
            line = f"[paused] {line}"
        if self.bell_on and not self.sealing:
            line += "  [bell on]"
        for name in ("-alert", "-warn", "-muted"):
            self.set_class(name == kind, name)
        if line != self._line:
            self._line = line
            self.update(line)


def _rank(event: Event) -> int:
    return FAULT_KINDS.index(event.kind) if event.kind in FAULT_KINDS else len(FAULT_KINDS)


def _for(since: float | None) -> str:
    """`` for 1 min 12 s`` since a UTC time, or nothing."""
    if since is None:
        return ""
    seconds = max(0, int(time.time() - since))
    return f" for {seconds // 60} min {seconds % 60} s" if seconds >= 60 else f" for {seconds} s"
