"""The simulated rig as a byte source: a :class:`~logger.sim.SimDevice` read in slices of simulated time.

At ``speed`` 1 each read returns about 10 ms of data, paced against the wall clock; faster speeds give
proportionally larger slices, and ``speed`` 0 (or infinity) runs as fast as the reader can take it, in
slices of up to about 64 KB. Arrival times are simulated too (``start_utc`` plus simulated time plus a
small latency), so a run at any speed looks to the pipeline like one at real time.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

from logger.sim.device import SimDevice
from logger.sources.base import Chunk, LinkLost, SourceError

MAX_CHUNK_BYTES = 65536


@dataclass(frozen=True)
class Unplug:
    """A scripted outage: the link goes at ``at_s`` of simulated time and comes back ``down_s`` later."""

    at_s: float
    down_s: float
    reset: bool = True
    """The device restarts when plugged back in (as a bus-powered board does); otherwise it keeps
    running and what it sent meanwhile is lost."""


class SimSource:
    """A :class:`~logger.sources.base.Source` over a simulated device.

    Args:
        device: the simulated device; a default :class:`SimDevice` seeded with ``seed`` when omitted.
        speed: simulated seconds per wall-clock second; ``0`` or ``math.inf`` for as fast as possible.
        duration_s: simulated time after which :meth:`read` returns ``None``; endless when ``None``.
        start_utc: host time at simulated time 0; the wall clock at the first :meth:`open` when ``None``.
        latency_s: added to every arrival time, as a USB link would.
        slice_s: wall-clock seconds of data per read when paced.
        sleep: how to wait (tests may pass a fake).
        clock: monotonic wall clock (tests may pass a fake).
        seed: seed of the default device (ignored when ``device`` is given).
    """

    def __init__(
        self,
        device: SimDevice | None = None,
        *,
        speed: float = 1.0,
        duration_s: float | None = None,
        start_utc: float | None = None,
        latency_s: float = 0.002,
        slice_s: float = 0.010,
        sleep: Callable[[float], None] = time.sleep,
        clock: Callable[[], float] = time.monotonic,
        seed: int | None = 0,
    ) -> None:
        if not speed >= 0:
            raise ValueError(f"speed must be 0 (as fast as possible) or positive, got {speed}")
        self.device = device if device is not None else SimDevice(seed=seed)
        self.speed = speed
        self.duration_s = duration_s
        self.start_utc = start_utc
        self.latency_s = latency_s
        self.slice_s = slice_s
        self._sleep = sleep
        self._clock = clock
        self._unplugs: list[Unplug] = []
        self._down_until_wall: float | None = None
        self._is_open = False
        self._wall0 = 0.0

    @property
    def paced(self) -> bool:
        """Whether reads wait for the wall clock (a finite, positive speed)."""
        return 0 < self.speed < math.inf

    @property
    def name(self) -> str:
        """E.g. ``simulated rig (x1)``."""
        pace = f"x{self.speed:g}" if self.paced else "as fast as possible"
        return f"simulated rig ({pace})"

    def unplug(self, at_s: float, down_s: float, *, reset: bool = True) -> None:
        """Script an outage: reads raise :class:`LinkLost` from ``at_s``, :meth:`open` fails until
        ``down_s`` later (wall time ``down_s / speed`` when paced, ``down_s`` otherwise)."""
        self._unplugs.append(Unplug(at_s, down_s, reset))
        self._unplugs.sort(key=lambda u: u.at_s)

    def open(self) -> None:
        """Connect, or reconnect after an outage once it is over."""
        if self._down_until_wall is not None:
            if self._clock() < self._down_until_wall:
                raise SourceError("simulated rig: unplugged; plug it back in (scripted outage)")
            self._plug_back()
        if self.start_utc is None:
            self.start_utc = time.time()
        if not self._is_open:
            self._wall0 = self._clock() - self._sim_to_wall(self.device.now_s)
        self._is_open = True

    def close(self) -> None:
        """Disconnect; the device keeps its state, and a later :meth:`open` carries on from it."""
        self._is_open = False

    def write(self, data: bytes) -> None:
        """Hand a command line to the device; it answers ahead of the next data."""
        if not self._is_open:
            raise LinkLost("simulated rig: not connected")
        self.device.write(data)

    def read(self) -> Chunk | None:
        """The next slice of simulated time, paced to the wall clock when ``speed`` is finite."""
        if not self._is_open:
            raise LinkLost("simulated rig: not connected")
        now_s = self.device.now_s
        if self.duration_s is not None and now_s >= self.duration_s:
            return None
        outage = self._unplugs[0] if self._unplugs else None
        if outage is not None and now_s >= outage.at_s:
            self._go_down(outage)
            raise LinkLost(f"simulated rig: unplugged at {outage.at_s:g} s (scripted outage)")
        target_s = self._next_target(now_s)
        if outage is not None:
            target_s = min(target_s, outage.at_s)
        data = self.device.generate(target_s)
        assert self.start_utc is not None
        return Chunk(data, self.start_utc + target_s + self.latency_s)

    def _next_target(self, now_s: float) -> float:
        """Simulated time to read up to: a slice ahead, waiting for the wall clock when paced."""
        most_s = now_s + MAX_CHUNK_BYTES / (self.device.rate_hz * self.device.line_bytes)
        if self.paced:
            due_s = now_s + self.slice_s * self.speed
            wait = self._wall0 + self._sim_to_wall(due_s) - self._clock()
            if wait > 0:
                self._sleep(min(wait, 0.1))
            target_s = min(max((self._clock() - self._wall0) * self.speed, now_s), most_s)
        else:
            target_s = most_s
        if self.duration_s is not None:
            target_s = min(target_s, self.duration_s)
        return target_s

    def _sim_to_wall(self, sim_s: float) -> float:
        return sim_s / self.speed if self.paced else 0.0

    def _go_down(self, outage: Unplug) -> None:
        self._is_open = False
        self._down_until_wall = self._clock() + (outage.down_s / self.speed if self.paced else outage.down_s)

    def _plug_back(self) -> None:
        outage = self._unplugs.pop(0)
        back_s = outage.at_s + outage.down_s
        if outage.reset:
            self.device.reset(at_s=back_s)
        else:
            self.device.drain(back_s)
        self._down_until_wall = None
        self._wall0 = self._clock() - self._sim_to_wall(back_s)
