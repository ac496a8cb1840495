"""Remote serial ports on loopback, for tests: a serial port (a pseudo-terminal) behind a TCP server, as a
serial server on a bench computer would offer a tap to the network.

Two kinds of server: one speaking RFC 2217 (telnet with the COM port option, driven by pyserial's own
``serial.rfc2217.PortManager``), which ``rfc2217://`` URLs open, and a plain bridge passing bytes both ways,
which ``socket://`` URLs open. Either serves one client at a time, on 127.0.0.1, on a free port that
:meth:`RemoteSerialServer.start` keeps when started again after :meth:`RemoteSerialServer.stop` (a server
restarted in place). The serial port is opened while the server runs and closed when it stops; while no client
is connected, what it sends is dropped.
"""

from __future__ import annotations

import contextlib
import queue
import random
import select
import socket
import threading
from collections.abc import Callable, Iterator
from pathlib import Path

import serial
import serial.rfc2217

from logger.sim.device import SimDevice
from logger.sources.pty_server import serve_on_pty

POLL_S = 0.05
"""How often the server's threads look whether they are asked to stop."""


class PtyPort(serial.Serial):
    """The slave side of a pseudo-terminal as a serial port.

    A pty has no modem lines: the ioctls that read and set them fail (ENOTTY), and the RFC 2217 port
    manager reads them as soon as a client agrees to the COM port option. So this port answers as a
    three-wire cable does: the inputs a device would assert (CTS, DSR, CD) are on, the ring indicator is off,
    and DTR and RTS go nowhere.
    """

    cts = dsr = cd = property(lambda self: True)
    ri = property(lambda self: False)

    def _update_dtr_state(self) -> None:
        pass

    def _update_rts_state(self) -> None:
        pass


def _listen(port: int) -> socket.socket:
    """A listening socket on 127.0.0.1:``port``."""
    listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    # The connections of a stopped server linger in TIME_WAIT on this port; a restart may listen anyway.
    listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        listener.bind(("127.0.0.1", port))
        listener.listen(1)
    except OSError:
        listener.close()
        raise
    return listener


def _listen_outside_ephemeral_ports() -> socket.socket:
    """Listen on a free port below the range the system hands out to outgoing connections (Linux's
    ``ip_local_port_range``). A client retrying a port in that range while nothing listens on it can be given
    that very port as its own and connect to itself (TCP's simultaneous open), and would then hold the port a
    restarted server needs. Elsewhere, any free port."""
    try:
        low = int(Path("/proc/sys/net/ipv4/ip_local_port_range").read_text().split()[0])
    except (OSError, ValueError, IndexError):
        return _listen(0)
    below = range(10_000, low)
    for port in random.sample(below, min(200, len(below))):
        with contextlib.suppress(OSError):
            return _listen(port)
    return _listen(0)


class _Connection:
    """A client's socket with the one thread-safe ``write`` both the port manager and the pump call."""

    def __init__(self, sock: socket.socket) -> None:
        self.sock = sock
        self._lock = threading.Lock()

    def write(self, data: bytes) -> None:
        with self._lock:
            self.sock.sendall(data)


class RemoteSerialServer:
    """A TCP server on 127.0.0.1 in front of the serial port at ``device_path``.

    Args:
        device_path: the port to serve (a pty's slave path).
        rfc2217: speak RFC 2217 (for ``rfc2217://``); else pass bytes as they are (for ``socket://``).
        port: the TCP port; 0 takes a free one (outside the ephemeral range), kept for later starts.
    """

    def __init__(self, device_path: str, rfc2217: bool, port: int = 0) -> None:
        self.device_path = device_path
        self.rfc2217 = rfc2217
        self.port = port
        self.connections = 0
        """Clients served so far."""
        self.sent = 0
        """Bytes of the port's data sent to the latest client (before any telnet escaping)."""
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._listener: socket.socket | None = None
        self._serial: PtyPort | None = None

    @property
    def url(self) -> str:
        """What railtap's ``--port`` takes to reach this server."""
        return f"{'rfc2217' if self.rfc2217 else 'socket'}://127.0.0.1:{self.port}"

    def start(self) -> RemoteSerialServer:
        """Open the serial port and listen (on the same TCP port as before, when started again)."""
        self._listener = _listen(self.port) if self.port else _listen_outside_ephemeral_ports()
        self.port = self._listener.getsockname()[1]
        self._serial = PtyPort(self.device_path, baudrate=1_000_000, timeout=POLL_S)
        self._stop.clear()
        self._thread = threading.Thread(target=self._serve, name="remote-serial-server", daemon=True)
        self._thread.start()
        return self

    def stop(self) -> None:
        """Stop as a server going down does: the client's connection closed, then the port and the listener."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join(30)
            assert not self._thread.is_alive(), "the remote serial server did not stop"
        for closable in (self._listener, self._serial):
            if closable is not None:
                closable.close()
        self._listener = self._serial = None

    def _serve(self) -> None:
        """Accept one client at a time until stopped. While none is connected, what the port sends goes nowhere
        (read and dropped), so a client that connects gets the device's bytes from then on, not a backlog."""
        while not self._stop.is_set():
            ready, _, _ = select.select([self._listener, self._serial], [], [], POLL_S)
            if self._serial in ready:
                try:
                    self._serial.read(self._serial.in_waiting or 1)
                except OSError:  # the device side of the pty is gone: nothing left to serve
                    return
            if self._listener in ready:
                sock, _ = self._listener.accept()
                self.connections += 1
                self.sent = 0
                try:
                    self._session(sock)
                finally:
                    with contextlib.suppress(OSError):
                        sock.shutdown(socket.SHUT_WR)  # what was sent arrives, then the end of the stream
                    sock.close()

    def _session(self, sock: socket.socket) -> None:
        """Pass the port's bytes to the client and the client's to the port until either end goes."""
        conn = _Connection(sock)
        manager = serial.rfc2217.PortManager(self._serial, conn) if self.rfc2217 else None
        self._serial.reset_input_buffer()  # what the port held before this client came is not the client's
        done = threading.Event()
        pump = threading.Thread(target=self._pump, args=(conn, manager, done), daemon=True)
        pump.start()
        try:
            while not self._stop.is_set() and not done.is_set():
                ready, _, _ = select.select([sock], [], [], POLL_S)
                if not ready:
                    continue
                data = sock.recv(4096)
                if not data:
                    break
                self._serial.write(b"".join(manager.filter(data)) if manager is not None else data)
        except OSError:
            pass  # the client went away
        finally:
            done.set()
            pump.join()

    def _pump(self, conn: _Connection, manager: serial.rfc2217.PortManager | None, done: threading.Event) -> None:
        """The port's bytes to the client, escaped for telnet under RFC 2217."""
        try:
            while not done.is_set():
                data = self._serial.read(self._serial.in_waiting or 1)
                if data:
                    conn.write(b"".join(manager.escape(data)) if manager is not None else data)
                    self.sent += len(data)
        except OSError:
            done.set()


TAP_BUFFER_BYTES = 8192
"""What the served rig holds back for a port nobody reads (a stopped server) before dropping it, of the order of
a tap's transmit buffer; the simulator's default holds two seconds at 1 kHz, for benches whose reader is slow to
wake. Held back, it would come in one burst when a client connects, and pyserial's RFC 2217 client parses a
burst byte by byte before it reaches the answers to its own opening requests, each of which it awaits for 3 s by
default (the URL's ``?timeout=``): on a loaded machine a large burst can outlast that."""


@contextlib.contextmanager
def rig_on_pty(device: Callable[[], SimDevice], speed: float = 1.0) -> Iterator[str]:
    """The simulated rig served on a new pseudo-terminal (``railtap sim --pty``'s machinery) while the block
    runs; yields the pty's path."""
    stop = threading.Event()
    ready: queue.Queue[str] = queue.Queue()
    server = threading.Thread(target=serve_on_pty, args=(device, speed, stop, ready.put),
                              kwargs={"backlog_limit": TAP_BUFFER_BYTES}, name="pty-rig", daemon=True)
    server.start()
    try:
        yield ready.get(timeout=30)
    finally:
        stop.set()
        server.join(30)


def main() -> None:
    """Serve a port by hand: ``python tests/remote_serial.py rfc2217|socket TCP_PORT [DEVICE]`` until Ctrl-C or
    SIGTERM; the simulated rig on a pty of its own when no device is named, and a TCP port of 0 takes a free
    one. The first line printed ends with the URL to record (``railtap record --port URL``)."""
    import signal
    import sys

    kind, port = sys.argv[1], int(sys.argv[2])
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    with contextlib.ExitStack() as stack:
        path = sys.argv[3] if len(sys.argv) > 3 else stack.enter_context(rig_on_pty(lambda: SimDevice(seed=1)))
        server = RemoteSerialServer(path, rfc2217=kind == "rfc2217", port=port).start()
        stack.callback(server.stop)
        print(f"{path} served at {server.url}", flush=True)
        with contextlib.suppress(KeyboardInterrupt):
            stop.wait()


if __name__ == "__main__":
    main()
