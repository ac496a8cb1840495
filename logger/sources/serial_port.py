"""A serial port as a byte source, by pyserial URL: a device path, ``socket://``, ``rfc2217://``, ``loop://``.

Reads take whatever has arrived in one call (what ``in_waiting`` reports, or, when that is nothing or, as on
``socket://``, only says "something", whatever comes within the 0.1 s read timeout), never a line at a time:
framing is the decoder's job. On Linux a device path is read at a steady pace (:class:`ReadPacer`): the kernel
gathers the bytes between two reads, so a 1 kHz stream costs about ten wake-ups a second, not one per USB
packet. Every port failure after opening becomes :class:`LinkLost`, so the pipeline has one path for "the
cable came out"; failing to open becomes a :class:`SourceError` whose one line says what to do.
"""

from __future__ import annotations

import contextlib
import errno
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path

import serial
import serial.tools.list_ports

from logger.sources.base import Chunk, LinkLost, SourceError

READ_TIMEOUT_S = 0.1
WRITE_TIMEOUT_S = 1.0
"""A port that cannot take a command line in this long is stuck (flow control, hung driver): link lost."""

_BUSY = {errno.EBUSY, errno.EAGAIN, errno.EWOULDBLOCK}


MAX_READ = 65536
GATHER_S = 0.1
"""A paced read comes this long after the previous one, unless the bytes coming in say it must come sooner."""
KERNEL_BUFFER_BYTES = 4096
"""What Linux's terminal line discipline holds for a reader (``N_TTY_BUF_SIZE``). When it fills, the driver is
throttled, and a device or USB bridge without flow control then loses bytes: a paced read comes before half of
it can fill."""


class ReadPacer:
    """When the next read of a port is due: ``gather_s`` after the previous one, or sooner when the last read's
    byte rate would fill more than half of ``buffer_bytes`` in that time.

    Waking once per ``gather_s`` instead of once per USB packet (pyserial's read loop returns to Python for every
    arrival) is most of what reading costs at 1 kHz. Arrival stamps stay honest: a read is stamped when it
    returns, and the newest line in it arrived shortly before, which is what the time base fits.
    """

    def __init__(self, gather_s: float = GATHER_S, buffer_bytes: int = KERNEL_BUFFER_BYTES,
                 clock: Callable[[], float] = time.monotonic, sleep: Callable[[float], None] = time.sleep) -> None:
        self.gather_s = gather_s
        self.buffer_bytes = buffer_bytes
        self._clock, self._sleep = clock, sleep
        self._last: float | None = None
        self.interval_s = gather_s

    def pause(self) -> None:
        """Sleep until the next read is due (at once on the first read)."""
        if self._last is not None:
            left = self._last + self.interval_s - self._clock()
            if left > 0:
                self._sleep(left)

    def took(self, nbytes: int) -> None:
        """A read has returned ``nbytes``: the next one is due ``interval_s`` from now, shortened to keep up
        with the rate those bytes came at since the read before; at once after an empty read, which waited
        for the port's read timeout already."""
        now = self._clock()
        if not nbytes:
            self.interval_s = 0.0  # a silent link: the read's own timeout already waited
        elif self._last is not None and now > self._last:
            rate = nbytes / (now - self._last)
            self.interval_s = min(self.gather_s, self.buffer_bytes / 2 / rate)
        else:
            self.interval_s = self.gather_s
        self._last = now

    def restart(self) -> None:
        """A port opened afresh: its first read is not held back."""
        self._last = None
        self.interval_s = self.gather_s


class SerialSource:
    """A :class:`~logger.sources.base.Source` reading a pyserial port.

    Args:
        url: a device path (``/dev/ttyACM0``, ``COM5``) or a pyserial URL (``socket://host:7000``).
        baud: line speed; USB CDC devices ignore it, UART bridges need it to match the firmware.
    """

    def __init__(self, url: str, baud: int = 1_000_000) -> None:
        self.url = url
        self.baud = baud
        self._ser: serial.SerialBase | None = None
        self._pacer = ReadPacer() if sys.platform.startswith("linux") and "://" not in url else None
        """Reads of a Linux device path are paced; other platforms and URLs read as bytes come."""

    @property
    def name(self) -> str:
        """E.g. ``/dev/ttyACM0 @ 1000000``."""
        return f"{self.url} @ {self.baud}"

    def open(self) -> None:
        """Open the port (closing any earlier handle first); raises :class:`SourceError`."""
        self.close()
        try:
            # A device path is opened exclusively, so a second recorder on the same port is refused at once
            # instead of splitting the stream with the first (pyserial's ``exclusive``: an advisory lock on POSIX).
            local = "://" not in self.url
            self._ser = serial.serial_for_url(
                self.url, baudrate=self.baud, timeout=READ_TIMEOUT_S, write_timeout=WRITE_TIMEOUT_S,
                **({"exclusive": True} if local and os.name == "posix" else {}),
            )
        except ValueError as exc:
            raise SourceError(f"{self.url}: not a usable port name or URL ({exc})") from None
        except (serial.SerialException, OSError) as exc:
            raise SourceError(open_failure(self.url, exc)) from None
        if self._pacer is not None:
            self._pacer.restart()

    def read(self) -> Chunk | None:
        """Whatever bytes have arrived (gathering for up to 0.1 s when none had), stamped on arrival."""
        ser = self._port()
        try:
            data = self._read_paced(ser) if self._pacer is not None else self._read_as_it_comes(ser)
        except (serial.SerialException, OSError) as exc:
            self._lost()
            raise LinkLost(f"{self.url}: link lost while reading ({_detail(exc)})") from None
        now = time.monotonic()
        return Chunk(bytes(data), now, time.time() - now)

    @staticmethod
    def _read_as_it_comes(ser: serial.SerialBase) -> bytes:
        """What is waiting, in one read; when nothing (or, on socket://, an unknown amount) is, gather what
        comes within the read timeout instead of returning byte by byte."""
        waiting = ser.in_waiting
        return ser.read(waiting if waiting > 1 else MAX_READ)

    def _read_paced(self, ser: serial.SerialBase) -> bytes:
        """Wait until the pacer says, then take everything waiting in one read; when nothing is, wait up to the
        read timeout for a first byte (a silent link still returns, and an unplug is still noticed)."""
        self._pacer.pause()
        waiting = ser.in_waiting
        data = ser.read(waiting) if waiting else ser.read(1)
        if not waiting and data and ser.in_waiting:
            data += ser.read(ser.in_waiting)
        self._pacer.took(len(data))
        return data

    def write(self, data: bytes) -> None:
        """Send a command line to the device."""
        ser = self._port()
        try:
            ser.write(data)
        except (serial.SerialException, OSError) as exc:
            self._lost()
            raise LinkLost(f"{self.url}: link lost while writing ({_detail(exc)})") from None

    def close(self) -> None:
        """Release the port; safe to call twice."""
        ser, self._ser = self._ser, None
        if ser is not None:
            with contextlib.suppress(serial.SerialException, OSError):  # already gone: nothing to release
                ser.close()

    def _port(self) -> serial.SerialBase:
        if self._ser is None:
            raise LinkLost(f"{self.url}: port is not open")
        return self._ser

    def _lost(self) -> None:
        self.close()


def open_failure(url: str, exc: BaseException) -> str:
    """One line saying why ``url`` would not open and what to do about it."""
    code = getattr(exc, "errno", None)
    text = str(exc).lower()
    if code == errno.ENOENT or "filenotfounderror" in text or "cannot find the file" in text:
        return f"{url}: no such port; check the cable, or run `railtap ports` to see the ports there are"
    # Windows reports a port held by another program as "access is denied".
    if code in _BUSY or "exclusively lock" in text or "access is denied" in text:
        holders = port_holders(url)
        who = (f"it is open in {'; '.join(holders)}" if holders else
               "another program has it open (another railtap recording it, a serial monitor, a logger)")
        return f"{url}: port is busy; {who}: close it first"
    if code == errno.EACCES or "permission" in text:
        return (
            f"{url}: permission denied; add yourself to the group that owns the device "
            "(e.g. `sudo usermod -aG dialout $USER`), then log out and in again"
        )
    if url.startswith(("socket://", "rfc2217://")):
        return f"{url}: cannot connect ({_detail(exc)}); check the host, the port and that the server runs"
    return f"{url}: cannot open port ({_detail(exc)})"


def port_holders(path: str) -> list[str]:
    """The processes that hold ``path`` open, as ``pid N (command line)``: found through ``/proc`` on Linux,
    where a port is a device file; none elsewhere, or for a URL."""
    proc = Path("/proc")
    try:
        target = os.path.realpath(path)
        pids = [p for p in proc.iterdir() if p.name.isdigit() and int(p.name) != os.getpid()]
    except OSError:
        return []
    found = []
    for pid in pids:
        try:
            if not any(os.path.realpath(fd) == target for fd in (pid / "fd").iterdir()):
                continue
            command = (pid / "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace").strip()
        except OSError:  # gone, or not ours to look at
            continue
        found.append(f"pid {pid.name} ({command if len(command) <= 100 else command[:99] + '…'})")
    return found


def _detail(exc: BaseException) -> str:
    """The most specific message in a pyserial exception, on one line."""
    text = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
    return " ".join(str(text).split())


def list_ports() -> list[str]:
    """The serial ports the system knows, as a table under a header line: the port, what kind it is (a USB
    serial device is what a tap usually is; a built-in UART with nothing on it is not), its description and its
    hardware id. Empty when there are none."""
    ports = sorted(serial.tools.list_ports.comports(), key=lambda p: p.device)
    if not ports:
        return []
    rows = [("PORT", "KIND", "DESCRIPTION", "HARDWARE ID")]
    for port in ports:
        kind = (f"USB {port.vid:04x}:{port.pid:04x}, likely a tap" if port.vid is not None else
                "built-in or virtual, unlikely a tap")
        rows.append((port.device, kind, _known(port.description), _known(port.hwid)))
    widths = [max(len(row[k]) for row in rows) for k in range(3)]
    return ["  ".join(cell.ljust(width) for cell, width in zip(row[:3], widths, strict=True)) + "  " + row[3]
            for row in rows]


def _known(text: str | None) -> str:
    return "-" if not text or text == "n/a" else text


def no_ports_hint(ports: list[str] | None = None) -> str | None:
    """A hint line when no port was found (in ``ports``, or by listing them now), else ``None``."""
    if ports is None:
        ports = list_ports()
    if ports:
        return None
    return (
        "no serial ports found; plug in the tap with a data-capable USB cable, "
        "or try the simulated rig with `railtap demo`"
    )
