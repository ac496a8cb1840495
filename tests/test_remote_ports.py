"""Serial ports reached over TCP, end to end against real servers on loopback: an RFC 2217 server (pyserial's
own port manager) and a plain TCP bridge, each in front of the simulated rig on a pseudo-terminal. A run is
recorded through them, survives a server restart with the outage as a link_lost event, and every failure to
open is one line."""

from __future__ import annotations

import contextlib
import json
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
from fakes import journal_rows, wait_until
from remote_serial import RemoteSerialServer, rig_on_pty

import logger.sources.serial_port as serial_port
from logger.cli import main
from logger.ingest import Pipeline, Settings
from logger.sim.device import SimDevice
from logger.sim.simple import RIG_TOML, simple_rig
from logger.sources.base import LinkLost, SourceError
from logger.sources.serial_port import SerialSource, open_failure

pytestmark = [
    pytest.mark.skipif(sys.platform == "win32", reason="the served rig sits on a pseudo-terminal (POSIX)"),
    pytest.mark.filterwarnings("ignore:set(Daemon|Name)\\(\\) is deprecated:DeprecationWarning"),  # pyserial's
]

ROOT = Path(__file__).resolve().parents[1]
MODES = ["rfc2217", "socket"]
RATE_HZ = 250
"""The served rig's sample rate: a quarter of the usual. pyserial's RFC 2217 client parses every byte in Python
(about a fifth of a core at 1 kHz, `tests/bench/bench_record_cpu.py --over rfc2217`), and here the rig, the server
and often the recorder share one process on a machine whose every core may be busy."""


@contextlib.contextmanager
def serving(rfc2217: bool) -> Iterator[RemoteSerialServer]:
    """The simulated rig in real time on a pty, served over TCP as ``rfc2217://`` or ``socket://``."""
    with rig_on_pty(lambda: SimDevice(seed=4, rate_hz=RATE_HZ)) as path:
        remote = RemoteSerialServer(path, rfc2217=rfc2217).start()
        try:
            yield remote
        finally:
            remote.stop()


@pytest.fixture(params=MODES)
def server(request: pytest.FixtureRequest) -> Iterator[RemoteSerialServer]:
    """Each test that asks for it runs once against each kind of server."""
    with serving(rfc2217=request.param == "rfc2217") as remote:
        yield remote


def _rig_file(tmp_path: Path) -> Path:
    path = tmp_path / "rig.toml"
    path.write_text(RIG_TOML)
    return path


def _only_run(root: Path) -> Path:
    (run,) = [p for p in root.iterdir() if p.is_dir()]
    return run


def test_railtap_record_over_the_network_until_its_duration(server: RemoteSerialServer, tmp_path: Path) -> None:
    out = tmp_path / "runs"
    done = subprocess.run(
        [sys.executable, "-m", "logger", "record", "--port", server.url, "--rig", str(_rig_file(tmp_path)),
         "--out", str(out), "--duration", "2s", "--quiet"],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
    )
    assert done.returncode == 0, done.stderr
    run = _only_run(out)
    meta = json.loads((run / "_run.json").read_text())
    assert meta["status"] == "complete" and meta["source"] == f"{server.url} @ 1000000", meta
    df = pd.read_parquet(run)
    assert len(df) == meta["rows"] > RATE_HZ
    assert df["seq"].is_monotonic_increasing and df["utc"].is_monotonic_increasing
    span_s = (df["device_us"].iloc[-1] - df["device_us"].iloc[0]) / 1e6
    assert span_s == pytest.approx(2.0, abs=0.01)  # --duration is device time (samples 4 ms apart)
    assert server.connections == 1


def test_a_restarted_server_is_reconnected_and_the_outage_is_a_link_lost_event(
        server: RemoteSerialServer, tmp_path: Path) -> None:
    pipeline = Pipeline(SerialSource(server.url, 1_000_000), simple_rig(),
                        Settings(record_root=tmp_path, retry_s=0.05))
    pipeline.start()
    try:
        wait_until(lambda: journal_rows(tmp_path) >= 100, "rows through the server")
        server.stop()
        wait_until(lambda: pipeline.snapshot().state == "reconnecting", "the loss to be noticed")
        known_down = time.time()
        wait_until(lambda: "still retrying" in pipeline.snapshot().message, "a reconnect refused while down")
        refused = pipeline.snapshot().message
        restarted = time.time()
        server.start()
        wait_until(lambda: pipeline.reconnects == 1, "the reconnect")
        rows_back = journal_rows(tmp_path)
        wait_until(lambda: journal_rows(tmp_path) >= rows_back + 100, "more rows after the restart")
    finally:
        final = pipeline.stop()
    assert pipeline.error is None and final is not None and final["status"] == "complete", pipeline.error
    assert "\n" not in refused and server.url in refused and "connection refused" in refused
    assert server.connections >= 2  # more if an attempt on a busy machine timed out while setting up
    run = _only_run(tmp_path)
    (lost,) = pd.read_parquet(run / "_events.parquet").query("kind == 'link_lost'").itertuples()
    # The pipeline knew the link was down from before `known_down` until after `restarted` at least.
    assert lost.end - lost.start >= pd.Timedelta(seconds=restarted - known_down)
    assert lost.detail == f"{server.url}: the connection to the server ended"
    df = pd.read_parquet(run)
    assert df["seq"].is_unique and df["device_us"].is_monotonic_increasing
    assert (df["utc"] > lost.end).sum() > 0  # the run went on after the outage


def test_a_server_going_away_is_link_lost_and_a_socket_loses_no_byte_it_was_sent(
        server: RemoteSerialServer) -> None:
    source = SerialSource(server.url)
    source.open()
    received = 0
    try:
        deadline = time.monotonic() + 60
        while received < 5_000:
            assert time.monotonic() < deadline, "no data through the server"
            received += len(source.read().data)
        server.stop()
        with pytest.raises(LinkLost, match="the connection to the server ended"):
            while time.monotonic() < deadline:
                received += len(source.read().data)
    finally:
        source.close()
    if not server.rfc2217:
        # Every byte sent before the server closed arrives; pyserial's RFC 2217 client drops what its reader
        # thread had queued when the connection ends, so only the socket is held to it.
        assert received == server.sent
    with pytest.raises(LinkLost, match="not open"):
        source.read()


@pytest.mark.parametrize("scheme", MODES)
def test_a_refused_connection_is_one_line_and_a_usage_exit(scheme: str, tmp_path: Path, capsys) -> None:
    with socket.socket() as unused:  # bound, never listening: a connection to it is refused
        unused.bind(("127.0.0.1", 0))
        url = f"{scheme}://127.0.0.1:{unused.getsockname()[1]}"
        code = main(["record", "--port", url, "--rig", str(_rig_file(tmp_path)), "--out", str(tmp_path / "runs")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2  # cli.main: a source that cannot open is a usage/configuration error
    assert len(err) == 1 and err[0].startswith(f"railtap: {url}: nothing answers on that port"), err
    assert "start the serial server" in err[0]


def test_an_rfc2217_url_to_a_plain_bridge_says_to_use_socket() -> None:
    with serving(rfc2217=False) as plain:
        # pyserial's own URL option: give up on the telnet negotiation after half a second, not three.
        url = f"rfc2217://127.0.0.1:{plain.port}?timeout=0.5"
        with pytest.raises(SourceError) as caught:
            SerialSource(url).open()
    message = str(caught.value)
    assert "\n" not in message and message.startswith(url)
    assert f"socket://127.0.0.1:{plain.port}" in message


@pytest.mark.parametrize("scheme", MODES)
def test_a_server_that_hangs_up_at_once_is_one_line_or_link_lost(scheme: str) -> None:
    """A server that accepts and closes at once (one busy with another client may): RFC 2217 cannot be set up,
    which is one line; a plain socket opens, and its first read finds the end of the stream."""
    listener = socket.create_server(("127.0.0.1", 0))
    hang_up = threading.Thread(target=lambda: listener.accept()[0].close(), daemon=True)
    hang_up.start()
    url = f"{scheme}://127.0.0.1:{listener.getsockname()[1]}" + ("?timeout=0.5" if scheme == "rfc2217" else "")
    source = SerialSource(url)
    try:
        if scheme == "rfc2217":
            with pytest.raises(SourceError) as caught:
                source.open()
            message = str(caught.value)
            assert "\n" not in message and message.startswith(f"{url}: the server ")
        else:
            source.open()
            with pytest.raises(LinkLost, match="the connection to the server ended"):
                deadline = time.monotonic() + 60
                while time.monotonic() < deadline:
                    source.read()
    finally:
        source.close()
        hang_up.join(30)
        listener.close()


def test_an_option_a_transport_refuses_is_one_line(monkeypatch) -> None:
    """Should a setting reach a transport that does not have it, pyserial raises NotImplementedError (its
    RFC 2217 client does for a write timeout): one line, not a traceback."""
    monkeypatch.setattr(serial_port, "port_settings", lambda url: {"timeout": 0.1, "write_timeout": 1.0})
    with serving(rfc2217=True) as server, pytest.raises(SourceError) as caught:
        SerialSource(server.url).open()
    message = str(caught.value)
    assert "\n" not in message and message.startswith(server.url) and "write_timeout" in message


@pytest.mark.parametrize(
    ("url", "words"),
    [
        ("rfc2217://127.0.0.1", "needs a host and a TCP port"),
        ("socket://:4000", "needs a host and a TCP port"),
        ("rfc2217://bench:port", "not a number"),
        ("socket://bench:70000", "not a number"),
        ("rfc2217://127.0.0.1:1?no_such_option", "not a usable URL"),
        ("nosuchscheme://bench:4000", "not a usable port name or URL"),
    ],
)
def test_a_bad_url_is_one_line_naming_it(url: str, words: str) -> None:
    with pytest.raises(SourceError) as caught:
        SerialSource(url).open()
    message = str(caught.value)
    assert "\n" not in message and message.startswith(url) and words in message


@pytest.mark.parametrize(
    "text",
    [
        "[Errno -2] Name or service not known",  # glibc's gai_strerror(EAI_NONAME)
        "[Errno 8] nodename nor servname provided, or not known",  # macOS's gai_strerror(EAI_NONAME)
        "[Errno 11001] getaddrinfo failed",  # Windows, WSAHOST_NOT_FOUND as Python words it
    ],
)
def test_an_unknown_host_says_so(text: str) -> None:
    url = "rfc2217://bench-pi:4000"
    message = open_failure(url, OSError(f"Could not open port {url}: {text}"))
    assert message.startswith(f"{url}: no such host") and "\n" not in message


def test_remote_ports_get_only_the_settings_their_transport_has() -> None:
    rfc2217, plain = serial_port.port_settings("rfc2217://h:1"), serial_port.port_settings("socket://h:1")
    assert "write_timeout" not in rfc2217 and "exclusive" not in rfc2217
    assert plain["timeout"] == 0 and "exclusive" not in plain  # read when select says so, without blocking
    assert serial_port.port_settings("/dev/ttyACM0")["timeout"] == serial_port.READ_TIMEOUT_S
    assert plain["write_timeout"] == serial_port.WRITE_TIMEOUT_S
