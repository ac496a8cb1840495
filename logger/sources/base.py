"""What every byte source offers the pipeline: open, read a chunk with its arrival time, write, close."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol


class SourceError(Exception):
    """A source cannot be opened or used; the message is one line naming the thing and what to do."""


class LinkLost(SourceError):
    """An open source went away (unplugged, reset, closed socket); reopening may bring it back."""


@dataclass(frozen=True)
class Chunk:
    """Bytes as read, with the time at which they arrived.

    ``host_time`` is seconds on the source's steady clock (``time.monotonic()`` for a port, immune to steps of
    the wall clock; the simulated or recorded clock for the simulator and a replay), NaN when unknown.
    ``wall_offset`` turns it into UTC: ``host_time + wall_offset`` is seconds since the epoch (0 where the
    steady clock already is UTC). An empty ``data`` means the read timed out with nothing to say.
    """

    data: bytes
    host_time: float
    wall_offset: float = 0.0

    @property
    def wall_time(self) -> float:
        """UTC seconds since the epoch at arrival (NaN when unknown)."""
        return self.host_time + self.wall_offset


class Source(Protocol):
    """A stream of wire bytes: a serial port, the simulated rig or a replayed capture."""

    @property
    def name(self) -> str:
        """Short description for screens and metadata, e.g. ``/dev/ttyACM0 @ 1000000``."""
        ...

    def open(self) -> None:
        """Open (or reopen after :class:`LinkLost`); raises :class:`SourceError`."""
        ...

    def read(self) -> Chunk | None:
        """Wait briefly (at most about 0.1 s) for bytes; ``None`` once the source has ended for good."""
        ...

    def write(self, data: bytes) -> None:
        """Send a command line to the device; sources that cannot send ignore it."""
        ...

    def close(self) -> None:
        """Release the port or file; safe to call twice."""
        ...
