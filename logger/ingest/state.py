"""What the ingest thread publishes for whoever watches: frozen snapshots, and rings of recent samples.

The ingest thread builds a new :class:`Snapshot` after each batch and swaps it in; readers only ever see whole
ones. The rings of recent samples (for the trend and for taking calibration points) are appended by the ingest
thread under a short lock, and readers copy what they need under the same lock. :class:`RateMeter` is the
ingest thread's own.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from dataclasses import dataclass, field, replace

import numpy as np

from logger.events.model import Event


class Ring:
    """The most recent ``capacity`` samples: UTC microseconds and one float32 column per channel."""

    def __init__(self, capacity: int, width: int) -> None:
        self.capacity = capacity
        self.utc_us = np.zeros(capacity, dtype=np.int64)
        self.values = np.zeros((capacity, width), dtype=np.float32)
        self.written = 0
        self._lock = threading.Lock()

    def extend(self, utc_us: np.ndarray, values: np.ndarray) -> None:
        """Append a batch, keeping only the newest ``capacity`` rows."""
        n = len(utc_us)
        if n > self.capacity:
            utc_us, values = utc_us[-self.capacity :], values[-self.capacity :]
            self.written += n - self.capacity
            n = self.capacity
        pos = np.arange(self.written, self.written + n) % self.capacity
        with self._lock:
            self.utc_us[pos] = utc_us
            self.values[pos] = values
            self.written += n

    def latest(self, count: int) -> tuple[np.ndarray, np.ndarray]:
        """Copies of the newest ``count`` rows (or fewer), oldest first."""
        with self._lock:
            count = min(count, self.written, self.capacity)
            pos = np.arange(self.written - count, self.written) % self.capacity
            return self.utc_us[pos], self.values[pos]


class RateMeter:
    """Sample sets per second on the device's clock over the last few seconds of arrivals, falling to zero when
    nothing arrives. On the device clock, not on arrivals: a backlog read at start-up or after a stall arrives
    faster than the device sends it, and must not read as a faster device."""

    def __init__(self, window_s: float = 5.0) -> None:
        self.window_s = window_s
        self._marks: deque[tuple[float, int, int]] = deque(maxlen=256)

    def mark(self, rows: int, device_us: int | None) -> None:
        """The rows taken so far and the device clock of the newest (None before the first)."""
        if device_us is not None:
            self._marks.append((time.monotonic(), rows, device_us))

    def per_second(self) -> float:
        now = time.monotonic()
        marks = [m for m in self._marks if m[0] >= now - self.window_s]
        if len(marks) < 2 or marks[-1][2] <= marks[0][2]:
            return 0.0
        return (marks[-1][1] - marks[0][1]) / ((marks[-1][2] - marks[0][2]) / 1e6)


@dataclass(frozen=True)
class LinkHealth:
    """How well bytes are turning into samples."""

    source: str
    connected: bool
    frames: int
    rate_hz: float
    lost: int
    rejected: int
    bad_crc: int
    resets: int
    reconnects: int
    drift_ppm: float | None
    """None until 30 s of arrivals have measured it (and for data that does not arrive in real time)."""
    decoder: dict[str, int] = field(default_factory=dict)
    down_since: float | None = None
    """When the link was lost (UTC seconds), while the pipeline is reconnecting."""


@dataclass(frozen=True)
class RecordingState:
    folder: str | None
    rows: int
    bytes_on_disk: int
    elapsed_s: float
    journal_lag_rows: int
    """Rows taken but not yet safe on disk."""
    error: str | None = None


@dataclass(frozen=True)
class Snapshot:
    """Everything a screen or a status line shows, frozen at one moment."""

    state: str
    """waiting, running, garbled (bytes but no valid line), silent (no bytes), reconnecting, stopped or
    failed."""
    message: str
    channels: tuple[str, ...]
    units: tuple[str, ...]
    latest: np.ndarray | None
    minimum: np.ndarray | None
    maximum: np.ndarray | None
    link: LinkHealth
    recording: RecordingState | None
    events: tuple[Event, ...] = ()
    """The newest events first."""
    active: tuple[Event, ...] = ()
    """Brownouts, overvoltages and overcurrents going on right now."""
    charge_ah: tuple[float, ...] = ()
    """Per volts/amps pair (``Rig.power_pairs()``), since the start or the last reset."""
    energy_wh: tuple[float, ...] = ()
    at_limit: tuple[bool, ...] = ()
    """Per channel: the newest reading's counts are at 0 or full scale, so the value may lie beyond it."""
    outside_cal: tuple[bool, ...] = ()
    """Per channel: the newest reading lies outside its calibration profile's span (extrapolated)."""
    recording_on: bool = True
    """Recording now, or about to be from the first header on."""
    last_run: str | None = None
    """The folder of the run sealed last, when recording was stopped and started again."""
    elapsed_s: float | None = None
    """Device time from the first sample to the newest (None before the first)."""
    outlets: tuple[str, ...] = ()
    """One line per outlet (a broker it publishes to, commands it runs): its state and what it dropped."""

    def with_recording(self, recording: RecordingState | None, recording_on: bool) -> Snapshot:
        """The same picture with the recorder's progress as of now (it moves on its own thread)."""
        return replace(self, recording=recording, recording_on=recording_on)
