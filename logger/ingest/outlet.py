"""Outlets: whatever hears of a run as it goes, beyond its own screen and folder (a broker, a command to run).

The ingest thread calls an outlet's methods between batches, so each must return at once: an outlet hands the
work to a thread of its own through a queue. What it is given is immutable: events are frozen, per-second
figures are read-only arrays, snapshots are frozen. An outlet that raises is dropped with a note; it never
stops a recording.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from logger.core.seconds import Seconds
from logger.events.model import Event
from logger.ingest.state import Snapshot


@dataclass(frozen=True, slots=True)
class SecondFigures:
    """Whole seconds of the device clock, as the rollups hold them (``logger.core.seconds``): one row each.

    ``device_s`` is the second on the run's device clock, ``utc_us`` the UTC label of its first sample. Per
    channel (columns in ``channels`` order): ``minimum``, ``mean``, ``maximum``, ``sd`` (population standard
    deviation within the second); per rail (``rails``), ``joules`` delivered in it.
    """

    channels: tuple[str, ...]
    rails: tuple[str, ...]
    device_s: np.ndarray
    utc_us: np.ndarray
    count: np.ndarray
    covered_s: np.ndarray
    minimum: np.ndarray
    mean: np.ndarray
    maximum: np.ndarray
    sd: np.ndarray
    joules: np.ndarray

    def __len__(self) -> int:
        return len(self.device_s)


def second_figures(seconds: Seconds, final: bool = False) -> SecondFigures | None:
    """The seconds ``seconds`` has finished since it was last asked (see :meth:`Seconds.take_done`)."""
    rows = seconds.take_done(final)
    if rows is None:
        return None
    width = len(seconds.channels)
    count = rows["count"]
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.sqrt(np.where(count[:, None] > 0, rows["m2"] / count[:, None], np.nan))
    figures = SecondFigures(tuple(seconds.channels), tuple(p.rail for p in seconds.pairs), rows["key"], rows["utc"],
                            count, rows["covered"], rows["min"], rows["mean"], rows["max"], sd, rows["int"][:, width:])
    for name in ("device_s", "utc_us", "count", "covered_s", "minimum", "mean", "maximum", "sd", "joules"):
        getattr(figures, name).flags.writeable = False
    return figures


GOING_ON_KINDS = ("brownout", "dropout", "overvoltage", "overcurrent", "flicker")
"""Events that are heard as they begin as well as when they end."""
_FAMILY = {"dropout": "brownout"}


def event_key(event: Event) -> str:
    """What ties an event's end to its beginning: its channel and first label. A brownout that deepens into a
    dropout is one event, begun as the one and ended as the other."""
    return f"{_FAMILY.get(event.kind, event.kind)}/{event.channel or ''}/{event.start_us}"


class Outlet(Protocol):
    """Hears of a run on the ingest thread; every method returns at once."""

    name: str

    def event_started(self, event: Event) -> None:
        """One of ``GOING_ON_KINDS`` has begun (no id yet: it gets one when it ends). Each is heard to begin
        before it is heard to end, even one that began and ended within a batch."""

    def event_ended(self, event: Event) -> None:
        """An event as the run's log numbers it: ended, or an instant (a mark, a reset, a link event)."""

    def seconds(self, figures: SecondFigures) -> None:
        """Seconds of the device clock that have just ended."""

    def status(self, snapshot: Snapshot) -> None:
        """The run's latest picture, with the recorder's progress (as often as the ingest thread publishes)."""

    def summary(self) -> str | None:
        """One short line for the link panel (its state and what it dropped), or None."""

    def account(self) -> dict[str, Any]:
        """What it did, for the run's ``_run.json`` (never a secret)."""

    def close(self) -> None:
        """The run has ended: send what is left within a short time, then let go."""
