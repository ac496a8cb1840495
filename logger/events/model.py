"""One event, as detectors make it and as the run's event table stores it."""

from __future__ import annotations

from dataclasses import asdict, dataclass, replace
from datetime import UTC, datetime, timedelta
from typing import Any

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)

KINDS = ("brownout", "dropout", "overvoltage", "overcurrent", "flicker", "frame_gap", "crc_burst",
         "link_lost", "device_reset", "clock_step", "outside_cal", "mark")


@dataclass(frozen=True)
class Event:
    """Something worth a line in the event list.

    ``start_us`` and ``end_us`` are UTC labels in microseconds (``end_us`` is None for an instant, a mark or a
    device reset, or for an event still going on). Where the device measured the event, ``device_start_us``
    and ``device_end_us`` hold the same moments on the run's device clock, and its duration comes from them.
    """

    kind: str
    start_us: int
    end_us: int | None = None
    channel: str | None = None
    value: float | None = None
    """Residual (lowest value) of a brownout or dropout, peak of an overvoltage or overcurrent, frames
    lost in a gap, lowest residual of a flicker episode."""
    depth_pct: float | None = None
    """Brownout and dropout: how far below nominal, in % of nominal; overvoltage: how far above."""
    count: int | None = None
    rate_hz: float | None = None
    duty: float | None = None
    """Flicker: fraction of the episode spent below the threshold."""
    peak: float | None = None
    """Flicker: highest residual among its dips (``value`` is the lowest)."""
    detail: str = ""
    id: int | None = None
    episode: int | None = None
    """For a brownout or dropout inside a flicker episode: the episode's id."""
    device_start_us: int | None = None
    device_end_us: int | None = None

    @property
    def duration_s(self) -> float | None:
        """On the device clock where it measured the event; else (a link outage) between the labels."""
        if self.device_start_us is not None and self.device_end_us is not None:
            return (self.device_end_us - self.device_start_us) / 1e6
        return None if self.end_us is None else (self.end_us - self.start_us) / 1e6

    def with_id(self, event_id: int) -> Event:
        return replace(self, id=event_id)

    def row(self) -> dict[str, Any]:
        """The event as a row of the run's event table (see :func:`logger.store.event_schema`)."""
        row = asdict(self)
        row["start"] = _EPOCH + timedelta(microseconds=row.pop("start_us"))
        end = row.pop("end_us")
        row["end"] = None if end is None else _EPOCH + timedelta(microseconds=end)
        row["duration_s"] = self.duration_s
        return row
