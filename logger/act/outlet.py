"""The pipeline's side of running commands on events: an :class:`~logger.ingest.outlet.Outlet` that hands each
ended event, as a plain mapping of its fields, to a :class:`~logger.act.runner.CommandRunner`."""

from __future__ import annotations

import os
from typing import Any

from logger.act.runner import CommandRunner
from logger.events.model import Event
from logger.ingest.outlet import SecondFigures
from logger.ingest.state import Snapshot
from logger.rig import Rig

_COUNTS = ("commands", "ok", "failed", "timed_out", "dropped", "cut_short")


def event_fields(event: Event, rig: str, run: str | None, unit: str | None = None) -> dict[str, Any]:
    """An event as the runner takes it: the columns of the run's event table (``start`` and ``end`` as UTC
    date-times, ``duration_s`` ...), with the rig's name, the run folder and the unit of the event's channel."""
    fields = event.row()
    fields.update(rig=rig, run=run, unit=unit)
    return fields


class CommandOutlet:
    """Runs ``runner``'s command as each event of its kinds ends; its tally goes into the run's ``_run.json``
    under ``name`` and its summary onto the screen's link panel.

    Called on the ingest thread only; what it keeps (the run folder from the latest status) is its own.
    """

    def __init__(self, runner: CommandRunner, rig: Rig, name: str = "on_event") -> None:
        self.name = name
        self.runner = runner
        self._rig = rig.name
        self._units = {ch.name: ch.unit for ch in rig.channels}
        self._folder: str | None = None
        self._before: dict[str, int] = {}

    def event_started(self, event: Event) -> None:
        """Commands run when an event ends, never as it begins."""

    def event_ended(self, event: Event) -> None:
        if self.runner.wants(event.kind):
            unit = self._units.get(event.channel) if event.channel else None
            self.runner.offer(event.kind, event_fields(event, self._rig, self._folder, unit))

    def seconds(self, figures: SecondFigures) -> None:
        """Per-second figures are not events: nothing to run."""

    def status(self, snapshot: Snapshot) -> None:
        """Keep the folder being recorded into (none while recording is off), for the events that follow."""
        folder = snapshot.recording.folder if snapshot.recording is not None else None
        self._folder = os.path.abspath(folder) if folder else None

    def summary(self) -> str | None:
        return self.runner.summary()

    def account(self) -> dict[str, Any]:
        """The runner's account for the run now ending: its counts since the account of the run before (the
        live screen can record several runs), and the commands still unfinished."""
        whole = self.runner.account()
        ours = {key: value - self._before.get(key, 0) if key in _COUNTS else value for key, value in whole.items()}
        self._before = {key: whole[key] for key in _COUNTS}
        return ours

    def close(self) -> None:
        self.runner.close()
