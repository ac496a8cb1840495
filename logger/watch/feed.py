"""What a watcher hears from the broker: every message under a prefix, queued for the screen's thread.

The client's network thread (paho's own) only puts onto a queue; it touches nothing else. A watcher resumes its
session after a broker restart (MQTT 5 clean start on the first connection only, the session kept for
``SESSION_S``), so messages published while it reconnects are still delivered, if the broker keeps sessions.
"""

from __future__ import annotations

import queue
import time
from dataclasses import dataclass

import paho.mqtt.client as mqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from logger.publish.address import Broker
from logger.publish.client import make_client, refusal
from logger.publish.topics import subscription

SESSION_S = 600
KEEPALIVE_S = 10


@dataclass(frozen=True)
class Heard:
    """One message as it arrived, or (``topic`` None) news of the link to the broker in ``text``."""

    topic: str | None
    payload: bytes
    at: float
    text: str = ""


class Feed:
    """A subscription to every bench under the broker's prefix; :meth:`take` drains what has arrived."""

    def __init__(self, broker: Broker) -> None:
        self.broker = broker
        self.inbox: queue.SimpleQueue[Heard] = queue.SimpleQueue()
        self.client = make_client(broker, "watch", protocol=mqtt.MQTTv5)
        self.client.on_connect = self._on_connect
        self.client.on_disconnect = self._on_disconnect
        self.client.on_connect_fail = self._on_connect_fail
        self.client.on_message = self._on_message
        self.client.reconnect_delay_set(0.5, 5)

    def start(self) -> None:
        """Connect in the background (a broker that is not there yet is retried)."""
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = SESSION_S
        self.client.connect_async(self.broker.host, self.broker.port, KEEPALIVE_S,
                                  clean_start=mqtt.MQTT_CLEAN_START_FIRST_ONLY, properties=props)
        self.client.loop_start()

    def stop(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()

    def take(self, limit: int = 10_000) -> list[Heard]:
        out = []
        try:
            while len(out) < limit:
                out.append(self.inbox.get_nowait())
        except queue.Empty:
            pass
        return out

    def _news(self, text: str) -> None:
        self.inbox.put(Heard(None, b"", time.time(), text))

    def _on_connect(self, client, userdata, flags, reason, properties) -> None:
        if reason.is_failure:
            self._news(refusal(reason))
            return
        client.subscribe(subscription(self.broker.prefix), qos=1)
        self._news(f"connected to {self.broker.url}")

    def _on_disconnect(self, client, userdata, flags, reason, properties) -> None:
        self._news(f"broker {self.broker.url} lost ({reason}); retrying")

    def _on_connect_fail(self, client, userdata) -> None:
        self._news(f"cannot reach the broker at {self.broker.url}; retrying")

    def _on_message(self, client, userdata, message) -> None:
        self.inbox.put(Heard(message.topic, message.payload, time.time()))
