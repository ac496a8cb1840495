"""A real MQTT broker for the tests: Mosquitto on a free loopback port, with a config file written here.

It keeps sessions on disk (``persistence true``, as Debian's own config does), so a watcher's session and the
messages queued for it survive a broker restart, the way a lab's broker behaves.
"""

from __future__ import annotations

import getpass
import json
import shutil
import socket
import subprocess
import threading
from pathlib import Path

import paho.mqtt.client as mqtt
import pytest
from fakes import wait_until

MOSQUITTO = shutil.which("mosquitto") or next(
    (p for p in ("/usr/sbin/mosquitto", "/usr/local/sbin/mosquitto") if Path(p).exists()), None)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Broker:
    """Mosquitto in a folder of its own; :meth:`stop` and :meth:`start` again keep the same port."""

    def __init__(self, folder: Path, users: dict[str, str] | None = None, tls: bool = False) -> None:
        if MOSQUITTO is None:
            pytest.skip("no mosquitto: apt-get install mosquitto (.ci/run does)")
        self.folder = folder
        folder.mkdir(parents=True, exist_ok=True)
        self.port = free_port()
        self.conf = folder / "mosquitto.conf"
        login = "allow_anonymous true\n"
        if users:
            passwords = folder / "passwords"
            for user, password in users.items():
                subprocess.run(["mosquitto_passwd", "-b", *(["-c"] if not passwords.exists() else []), str(passwords),
                                user, password], check=True, capture_output=True)
            login = f"allow_anonymous false\npassword_file {passwords}\n"
        self.tls_port = free_port() if tls else None
        secure = _tls_listener(folder, self.tls_port) if tls else ""
        self.conf.write_text(f"listener {self.port} 127.0.0.1\n{secure}{login}persistence true\n"
                             f"persistence_location {folder}/\nautosave_interval 1\n"
                             f"log_dest file {folder}/mosquitto.log\nmax_queued_messages 100000\n"
                             f"user {getpass.getuser()}\n")  # as root it would switch to a user who cannot write here
        self.process: subprocess.Popen | None = None
        self.start()

    @property
    def url(self) -> str:
        return f"mqtt://127.0.0.1:{self.port}"

    def start(self) -> None:
        self.process = subprocess.Popen([MOSQUITTO, "-c", str(self.conf)], stdout=subprocess.DEVNULL,
                                        stderr=subprocess.DEVNULL)
        wait_until(self._listening, "mosquitto to listen", 30)

    def stop(self) -> None:
        if self.process is not None and self.process.poll() is None:
            self.process.terminate()
            self.process.wait(30)
        self.process = None

    def _listening(self) -> bool:
        if self.process.poll() is not None:
            raise RuntimeError(f"mosquitto ended: {(self.folder / 'mosquitto.log').read_text()[-500:]}")
        try:
            socket.create_connection(("127.0.0.1", self.port), timeout=1).close()
            return True
        except OSError:
            return False


class Listener:
    """A test's own subscriber: keeps every message under a prefix, in arrival order, decoded."""

    def __init__(self, broker: Broker, prefix: str) -> None:
        self.messages: list[tuple[str, dict]] = []
        self.retained: dict[str, dict] = {}
        self._lock = threading.Lock()
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=f"test-listener-{id(self)}",
                                  protocol=mqtt.MQTTv5)
        self.client.on_connect = lambda c, u, f, r, p: c.subscribe(f"{prefix}/#", qos=1)
        self.client.on_message = self._on_message
        self.client.reconnect_delay_set(0.2, 1)
        self.client.connect("127.0.0.1", broker.port, keepalive=5, clean_start=False,
                            properties=_session(300))
        self.client.loop_start()

    def _on_message(self, client, userdata, message) -> None:
        with self._lock:
            doc = json.loads(message.payload)
            self.messages.append((message.topic, doc))
            if message.retain or message.topic.endswith("/state"):
                self.retained[message.topic] = doc

    def of(self, leaf: str) -> list[dict]:
        with self._lock:
            return [doc for topic, doc in self.messages if topic.endswith(f"/{leaf}")]

    def state(self, topic: str) -> str | None:
        with self._lock:
            return self.retained.get(topic, {}).get("state")

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()


def _tls_listener(folder: Path, port: int) -> str:
    """A CA and a server certificate for 127.0.0.1 made with openssl, and a listener that uses them."""
    if shutil.which("openssl") is None:
        pytest.skip("no openssl: apt-get install openssl")

    def run(*args: str) -> None:
        subprocess.run(["openssl", *args], check=True, capture_output=True, cwd=folder)

    run("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout", "ca.key", "-out", "ca.pem", "-days", "2",
        "-subj", "/CN=railtap test CA")
    run("req", "-newkey", "rsa:2048", "-nodes", "-keyout", "server.key", "-out", "server.csr", "-subj", "/CN=127.0.0.1")
    (folder / "san.ext").write_text("subjectAltName=IP:127.0.0.1\n")
    run("x509", "-req", "-in", "server.csr", "-CA", "ca.pem", "-CAkey", "ca.key", "-CAcreateserial", "-out",
        "server.pem", "-days", "2", "-extfile", "san.ext")
    return (f"listener {port} 127.0.0.1\ncafile {folder}/ca.pem\ncertfile {folder}/server.pem\n"
            f"keyfile {folder}/server.key\n")


def _session(expiry_s: int):
    from paho.mqtt.packettypes import PacketTypes
    from paho.mqtt.properties import Properties

    props = Properties(PacketTypes.CONNECT)
    props.SessionExpiryInterval = expiry_s
    return props
