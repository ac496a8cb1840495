"""A serial port as a byte source, by pyserial URL: a device path, ``socket://``, ``rfc2217://``, ``loop://``.

Reads take whatever has arrived in one call (what ``in_waiting`` reports, or, when that is nothing, whatever
comes within the 0.1 s read timeout), never a line at a time: framing is the decoder's job. On Linux a device
path is read at a steady pace (:class:`ReadPacer`): the kernel gathers the bytes between two reads, so a 1 kHz
stream costs about ten wake-ups a second, not one per USB packet. A ``socket://`` port is paced the same way on
every platform (the socket's buffer gathers, and TCP holds the sender back when it is full), and each read takes
what one receive call finds: pyserial's gathering read drops what it gathered when the peer closes during it.

Each transport is opened with only the settings it has (:func:`port_settings`). Every port failure after opening
becomes :class:`LinkLost`, so the pipeline has one path for "the cable came out" and "the server went away";
failing to open becomes a :class:`SourceError` whose one line names the port and says what to do.
"""

from __future__ import annotations

import contextlib
import errno
import os
import select
import sys
import time
from collections.abc import Callable
from pathlib import Path
from urllib.parse import urlsplit

import serial
import serial.tools.list_ports

from logger.sources.base import Chunk, LinkLost, SourceError

READ_TIMEOUT_S = 0.1
WRITE_TIMEOUT_S = 1.0
"""A port that cannot take a command line in this long is stuck (flow control, hung driver): link lost."""
REMOTE_SCHEMES = ("socket", "rfc2217")
"""The URL schemes that reach a serial port over TCP, written ``scheme://host:port``."""

_BUSY = {errno.EBUSY, errno.EAGAIN, errno.EWOULDBLOCK}
_CONNECTION_ENDED = ("socket disconnected", "reader thread died", "reset by peer", "forcibly closed", "broken pipe")
"""pyserial's words for a TCP connection the far end closed (``socket://``, ``rfc2217://``), and the operating
systems' for one it reset (Linux and macOS, Windows) or that can no longer be written."""


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
        baud: line speed; USB CDC devices ignore it, UART bridges need it to match the firmware (an RFC 2217
            server sets its port to it; a plain ``socket://`` bridge cannot be told).
    """

    def __init__(self, url: str, baud: int = 1_000_000) -> None:
        self.url = url
        self.baud = baud
        self._ser: serial.SerialBase | None = None
        # A Linux device path and a socket are read at a steady pace; other platforms and URLs as bytes come.
        # A socket's pace is shortened only to keep each read within one receive call's MAX_READ.
        self._pacer: ReadPacer | None = None
        self._read: Callable[[serial.SerialBase], bytes] = self._read_as_it_comes
        scheme = _scheme(url)
        if scheme == "socket":
            self._pacer, self._read = ReadPacer(buffer_bytes=2 * MAX_READ), self._read_socket
        elif not scheme and sys.platform.startswith("linux"):
            self._pacer, self._read = ReadPacer(), self._read_paced

    @property
    def name(self) -> str:
        """E.g. ``/dev/ttyACM0 @ 1000000``."""
        return f"{self.url} @ {self.baud}"

    def open(self) -> None:
        """Open the port (closing any earlier handle first); raises :class:`SourceError`."""
        self.close()
        check_url(self.url)
        try:
            self._ser = serial.serial_for_url(self.url, baudrate=self.baud, **port_settings(self.url))
        except NotImplementedError as exc:
            raise SourceError(f"{self.url}: this kind of port cannot do what railtap asks of it ({_detail(exc)}); "
                              "please report it, and meanwhile try another way to reach the port") from None
        except ValueError as exc:
            raise SourceError(f"{self.url}: not a usable port name or URL ({_detail(exc)})") from None
        except (serial.SerialException, OSError) as exc:
            raise SourceError(open_failure(self.url, exc)) from None
        if self._pacer is not None:
            self._pacer.restart()

    def read(self) -> Chunk | None:
        """Whatever bytes have arrived (gathering for up to 0.1 s when none had), stamped on arrival."""
        ser = self._port()
        try:
            data = self._read(ser)
        except (serial.SerialException, OSError) as exc:
            raise self._lost("reading", exc) from None
        now = time.monotonic()
        return Chunk(bytes(data), now, time.time() - now)

    @staticmethod
    def _read_as_it_comes(ser: serial.SerialBase) -> bytes:
        """What is waiting, in one read; when nothing (or one byte) is, gather what comes within the read
        timeout instead of returning byte by byte."""
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

    def _read_socket(self, ser: serial.SerialBase) -> bytes:
        """Wait until the pacer says, then up to the read timeout for the socket to have something, and take
        what one receive call finds (the port is non-blocking). The end of the stream is something too: the
        read then raises, with nothing gathered in it to lose."""
        self._pacer.pause()
        readable, _, _ = select.select([ser], [], [], READ_TIMEOUT_S)  # pyserial's socket port has fileno()
        data = ser.read(MAX_READ) if readable else b""
        self._pacer.took(len(data))
        return data

    def write(self, data: bytes) -> None:
        """Send a command line to the device."""
        ser = self._port()
        try:
            ser.write(data)
        except (serial.SerialException, OSError) as exc:
            raise self._lost("writing", exc) from None

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

    def _lost(self, doing: str, exc: BaseException) -> LinkLost:
        """Close the port and say why it was lost: for a remote port whose connection ended (closed or reset
        by the far end), in those words rather than pyserial's."""
        self.close()
        detail = _detail(exc)
        if _scheme(self.url) in REMOTE_SCHEMES and any(words in detail.lower() for words in _CONNECTION_ENDED):
            return LinkLost(f"{self.url}: the connection to the server ended")
        return LinkLost(f"{self.url}: link lost while {doing} ({detail})")


def port_settings(url: str) -> dict[str, object]:
    """The pyserial settings ``url`` is opened with besides its baud rate, each only where its transport has it.

    Every port gets the read timeout, except ``socket://``, which is read without blocking once the socket has
    something (:meth:`SerialSource._read_socket`). A write timeout ends a command line stuck behind flow
    control; pyserial's RFC 2217 client refuses one (``NotImplementedError``), and its socket's own timeout
    of a few seconds ends a stuck write there instead. A device path on POSIX is opened exclusively, so a
    second recorder on the same port is refused at once instead of splitting the stream with the first
    (pyserial's ``exclusive``: an advisory lock).
    """
    scheme = _scheme(url)
    settings: dict[str, object] = {"timeout": 0 if scheme == "socket" else READ_TIMEOUT_S}
    if scheme != "rfc2217":
        settings["write_timeout"] = WRITE_TIMEOUT_S
    if not scheme and os.name == "posix":
        settings["exclusive"] = True
    return settings


def check_url(url: str) -> None:
    """Raise :class:`SourceError` when a remote port's URL lacks its host or a usable TCP port number; pyserial
    says so only in terms of its own code."""
    scheme = _scheme(url)
    if scheme not in REMOTE_SCHEMES:
        return
    form = f"write it {scheme}://HOST:PORT, e.g. {scheme}://192.168.1.20:4000"
    parts = urlsplit(url)
    try:
        port = parts.port
    except ValueError:
        raise SourceError(f"{url}: the TCP port is not a number from 0 to 65535; {form}") from None
    if not parts.hostname or port is None:
        raise SourceError(f"{url}: a remote port needs a host and a TCP port; {form}")


def _scheme(url: str) -> str:
    """``socket`` for ``socket://host:7000``; empty for a device path."""
    return url.split("://", 1)[0].lower() if "://" in url else ""


def open_failure(url: str, exc: BaseException) -> str:
    """One line saying why ``url`` would not open and what to do about it."""
    if _scheme(url) in REMOTE_SCHEMES:
        return remote_failure(url, exc)
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
    return f"{url}: cannot open port ({_detail(exc)})"


def remote_failure(url: str, exc: BaseException) -> str:
    """One line saying why the remote port at ``url`` would not open and what to do. pyserial keeps only the
    text of the socket's error, so the cause is read from it (Linux, macOS and Windows wordings)."""
    detail = _detail(exc)
    prefix = f"could not open port {url}: "
    if detail.lower().startswith(prefix.lower()):
        detail = detail[len(prefix):]
    text = detail.lower()
    if "refused" in text:
        return (f"{url}: nothing answers on that port (connection refused); start the serial server there, "
                "or check the host and port")
    if any(words in text for words in ("name or service not known", "nodename nor servname", "getaddrinfo",
                                       "name resolution", "no address associated")):
        return f"{url}: no such host ({detail}); check the host name or use its IP address"
    if "timed out" in text or "unreachable" in text:
        return f"{url}: the host does not answer ({detail}); check that it is up and on this network"
    if any(words in text for words in ("broken pipe", "reset by peer", "forcibly closed")):
        return (f"{url}: the server closed the connection as it opened ({detail}); it may be serving another "
                "client already: close that one, or look at the server's log")
    if "does not seem to support rfc2217" in text:
        return (f"{url}: the server there did not take up RFC 2217; if it passes raw bytes, use "
                f"socket://{urlsplit(url).netloc}; if it is only slow, give it longer with ?timeout=10")
    if "timeout while waiting for option" in text:
        return (f"{url}: the server was slow to set up the port ({detail}); try again, or give it longer with "
                "?timeout=10 on the URL")
    if "does not accept parameter change" in text:
        return f"{url}: the server refused the port's settings; check --baud (or device.baud in the rig file)"
    if "expected a string in the form" in text:
        return f"{url}: not a usable URL ({detail})"
    return f"{url}: cannot connect ({detail}); check the host, the port and that the server runs"


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
