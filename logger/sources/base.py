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
    """Bytes as read, with the host time (UTC seconds since the epoch) at which they arrived.

    An empty ``data`` means the read timed out with nothing to say.
    """

    data: bytes
    host_time: float


class Source(Protocol):
    """A stream of wire bytes: a serial port, the simulated rig or a replayed capture."""

    @property
    def name(self) -> str:
        """Short description for screens and metadata, e.g. ``/dev/ttyACM0 @ 921600``."""
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
