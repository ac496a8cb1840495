"""Serve the simulated rig on a pseudo-terminal, so any serial program can open it like a real tap.

POSIX only (``os.openpty``). The server writes the device's bytes to the pty master, paced to the wall
clock, and feeds whatever the client writes back to the device as host commands. The slave side is kept
open by the server itself, so the pty stays configured whether or not a client is attached; when nobody
reads, the pty buffer fills and the server drops bytes (and the stale ones queued in the pty) rather
than block, much as a real tap's transmit buffer overflows when no host is listening. At speed 0 the server
is unpaced instead: it writes as fast as the client reads and waits for it, dropping nothing, so a recorder can
be measured on a simulated day without the simulator in its own process.
"""

from __future__ import annotations

import os
import select
import termios
import threading
import time
import tty
from collections.abc import Callable
from dataclasses import dataclass

from logger.sim.device import SimDevice

BACKLOG_LIMIT = 65536
"""Bytes held back while the client is not reading; beyond this they are dropped."""

UNPACED_STEP_S = 0.05
"""Simulated time generated at once by an unpaced server: a few kilobytes, about what a pty buffer holds."""


@dataclass
class PtyStats:
    """What the server did, for messages and tests."""

    path: str = ""
    bytes_written: int = 0
    bytes_dropped: int = 0
    command_bytes: int = 0


def serve_on_pty(
    device: SimDevice | Callable[[], SimDevice] | None = None,
    speed: float = 1.0,
    stop_event: threading.Event | None = None,
    on_ready: Callable[[str], None] | None = None,
    *,
    seed: int | None = 0,
    tick_s: float = 0.01,
    backlog_limit: int = BACKLOG_LIMIT,
) -> PtyStats:
    """Run a simulated device on a new pty until ``stop_event`` is set.

    Args:
        device: the device, or a factory that makes one (called in the serving thread); a default
            :class:`SimDevice` seeded with ``seed`` when ``None``.
        speed: simulated seconds per wall second; 0 serves as fast as the client reads, dropping nothing.
        stop_event: set it to stop; the pty is closed on the way out. ``None`` serves until interrupted.
        on_ready: called with the slave path (e.g. ``/dev/pts/7``) once clients may open it.
        seed: seed of the default device.
        tick_s: how often bytes are written and commands read.
        backlog_limit: bytes held back while the client does not read before they are dropped (a bench on a
            loaded machine raises it, so the server's own late wake-ups are not taken for a slow client).

    Returns:
        Counts of bytes written, dropped and received.
    """
    if not 0 <= speed < float("inf"):
        raise ValueError(f"speed must be 0 (unpaced) or positive and finite on a pty, got {speed}")
    dev = _make_device(device, seed)
    stop_event = stop_event or threading.Event()
    master, slave = os.openpty()
    try:
        tty.setraw(slave)
        os.set_blocking(master, False)
        stats = PtyStats(path=os.ttyname(slave))
        if on_ready is not None:
            on_ready(stats.path)
        if speed == 0:
            _pump_unpaced(dev, master, stop_event, tick_s, stats)
        else:
            _pump(dev, master, slave, speed, stop_event, tick_s, stats, backlog_limit)
        return stats
    finally:
        os.close(master)
        os.close(slave)


def _make_device(device: SimDevice | Callable[[], SimDevice] | None, seed: int | None) -> SimDevice:
    if device is None:
        return SimDevice(seed=seed)
    return device if isinstance(device, SimDevice) else device()


def _pump(
    dev: SimDevice,
    master: int,
    slave: int,
    speed: float,
    stop_event: threading.Event,
    tick_s: float,
    stats: PtyStats,
    backlog_limit: int,
) -> None:
    """Each tick: take commands, produce the bytes due by the wall clock, write what the pty accepts."""
    wall0, sim0 = time.monotonic(), dev.now_s
    backlog = bytearray()
    while not stop_event.is_set():
        readable, _, _ = select.select([master], [], [], tick_s)
        if readable:
            stats.command_bytes += _take_commands(master, dev)
        backlog += dev.generate(sim0 + (time.monotonic() - wall0) * speed)
        _push(master, slave, backlog, stats, backlog_limit)


def _pump_unpaced(dev: SimDevice, master: int, stop_event: threading.Event, tick_s: float, stats: PtyStats) -> None:
    """Generate the next stretch whenever the last is written; wait for the client to read, never drop."""
    backlog = b""
    while not stop_event.is_set():
        if not backlog:
            backlog = dev.generate(dev.now_s + UNPACED_STEP_S)
        readable, writable, _ = select.select([master], [master], [], tick_s)
        if readable:
            stats.command_bytes += _take_commands(master, dev)
        if writable:
            try:
                written = os.write(master, backlog)
            except BlockingIOError:
                written = 0
            backlog = backlog[written:]
            stats.bytes_written += written


def _take_commands(master: int, dev: SimDevice) -> int:
    try:
        data = os.read(master, 4096)
    except (BlockingIOError, InterruptedError):
        return 0
    dev.write(data)
    return len(data)


def _push(master: int, slave: int, backlog: bytearray, stats: PtyStats, limit: int) -> None:
    """Write as much of the backlog as the pty takes; drop it all when the client has stopped reading."""
    if backlog:
        try:
            written = os.write(master, backlog)
        except BlockingIOError:
            written = 0
        del backlog[:written]
        stats.bytes_written += written
    if len(backlog) > limit:
        stats.bytes_dropped += len(backlog)
        backlog.clear()
        termios.tcflush(slave, termios.TCIFLUSH)  # what sits unread in the pty is stale by now
