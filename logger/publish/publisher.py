"""One bench published to an MQTT broker, on a thread of its own: an outlet that never holds up ingest.

The ingest thread only puts references (frozen events, read-only per-second figures, frozen snapshots) on a
bounded queue; a full queue drops, counted. The publishing thread owns everything else: the paho client (it
runs its network loop itself, so no third thread touches it), the messages waiting for the broker, and the
counters, which it shares as a frozen :class:`Progress`. While the broker is away, messages wait in bounded
buffers: per-second figures drop oldest first; events wait in a larger buffer of their own. Everything goes
with QoS 1, so what the broker has not acknowledged is sent again after a reconnect, and a message is either
counted sent, counted dropped, or still waiting: the account adds up.
"""

from __future__ import annotations

import contextlib
import math
import os
import queue
import select
import threading
import time
from collections import Counter, deque
from dataclasses import dataclass, replace
from datetime import datetime
from typing import Any

import paho.mqtt.client as mqtt

from logger.events.model import Event
from logger.ingest.outlet import SecondFigures
from logger.ingest.state import Snapshot
from logger.publish import topics
from logger.publish.address import Broker
from logger.publish.client import make_client, refusal, unreachable

KEEPALIVE_S = 5
"""The broker takes a recorder for gone after 1.5 times this without a word, and publishes its will."""
STATUS_S = 2.0
"""The retained state is sent again this often (elapsed time, link figures), and at once when it changes."""
BUFFER_SECONDS = 3600
"""Per-second messages kept while the broker is away: an hour."""
BUFFER_EVENTS = 10_000
INBOX = 4096
IN_FLIGHT = 100
"""Messages sent and not yet acknowledged, at most."""
IDLE_S = 1.0
"""With nothing to do, the publishing thread wakes this often to keep the connection alive (pings every
``KEEPALIVE_S``) or to try the broker again."""
SETTLE_S = 2.0
"""How long the run's account waits for the publishing thread to file what it was handed."""
CLOSE_S = 3.0
"""At the end of a run, how long to wait for the broker to take what is left."""
RETRY_S = (0.5, 1.0, 2.0, 5.0)


@dataclass(frozen=True)
class Progress:
    """What the publishing thread has done so far (swapped whole; read by any thread)."""

    connected: bool = False
    seconds_sent: int = 0
    events_sent: int = 0
    seconds_dropped: int = 0
    events_dropped: int = 0
    waiting: int = 0
    connects: int = 0
    away_since: float | None = None
    """Steady-clock time the broker went away (or since the start, before the first connection)."""
    error: str | None = None


class Publisher:
    """Publishes a bench's per-second figures, events and state under ``PREFIX/BENCH/``.

    Args:
        broker: where, and how to log in.
        bench: the bench's name, one topic level (``address.bench_name``).
        rig: the rig's name, shown by watchers.
        rails: the rig's rail names (the ``j`` figures of a ``second`` message).
    """

    name = "publish"

    def __init__(self, broker: Broker, bench: str, rig: str, rails: tuple[str, ...] = (), *,
                 buffer_seconds: int = BUFFER_SECONDS, buffer_events: int = BUFFER_EVENTS) -> None:
        self.broker, self.bench, self.rig, self.rails = broker, bench, rig, rails
        self.progress = Progress(away_since=time.monotonic())
        self._inbox: queue.Queue[tuple[str, Any]] = queue.Queue(maxsize=INBOX)
        self._closed = False
        self._wake_r, self._wake_w = os.pipe()
        os.set_blocking(self._wake_r, False)
        os.set_blocking(self._wake_w, False)
        # The ingest thread's own: when the state was last handed over, and what the full queue dropped.
        self._handed_state: tuple[str, bool, float] = ("", False, -math.inf)
        self._handoff_dropped = Counter[str]()
        self._thread = threading.Thread(target=_Courier(self, buffer_seconds, buffer_events).run,
                                        name="railtap-publish", daemon=True)
        self._thread.start()

    # -- the ingest thread's side (each returns at once) -----------------------------------------------

    def event_started(self, event: Event) -> None:
        self._hand("begin", event)

    def event_ended(self, event: Event) -> None:
        self._hand("end", event)

    def seconds(self, figures: SecondFigures) -> None:
        self._hand("second", figures)

    def status(self, snapshot: Snapshot) -> None:
        """Hand the state over when it changes, else every ``STATUS_S``."""
        now = time.monotonic()
        word = topics.bench_state(snapshot)
        was, recording, at = self._handed_state
        if word != was or now - at >= STATUS_S:
            self._handed_state = (word, recording, now)
            self._hand("state", snapshot)

    def summary(self) -> str:
        p = self.progress
        lost = p.seconds_dropped + p.events_dropped + sum(self._handoff_dropped.values())
        if p.connected:
            how = f"connected, {p.seconds_sent + p.events_sent:,} sent"
        else:
            away = time.monotonic() - (p.away_since or time.monotonic())
            how = f"broker away {away:.0f} s, {p.waiting:,} waiting" + (f" ({p.error})" if p.error else "")
        return f"{self.broker.url}/{self.bench}: {how}, {lost:,} dropped"

    def account(self) -> dict[str, Any]:
        """Sent, dropped and still waiting, once the publishing thread has filed all it was handed (at the end of
        a run, so the three add up to what the run produced)."""
        if self._thread.is_alive():
            settled = threading.Event()
            self._hand("settle", settled)
            settled.wait(SETTLE_S)
        p = self.progress
        return {"broker": self.broker.url, "bench": self.bench, "connects": p.connects,
                "sent": {"seconds": p.seconds_sent, "events": p.events_sent},
                "dropped": {"seconds": p.seconds_dropped + self._handoff_dropped["second"],
                            "events": p.events_dropped + self._handoff_dropped["begin"]
                            + self._handoff_dropped["end"]},
                "waiting_at_end": p.waiting, "last_error": p.error}

    def close(self) -> None:
        """Send the last state and what waits, for up to ``CLOSE_S``, and disconnect cleanly (no will)."""
        if self._closed:
            return
        self._inbox.put(("close", None))
        with contextlib.suppress(BlockingIOError):
            os.write(self._wake_w, b"!")
        self._closed = True
        self._thread.join(CLOSE_S + 2.0)
        if not self._thread.is_alive():
            os.close(self._wake_r)
            os.close(self._wake_w)

    def _hand(self, what: str, item: Any) -> None:
        if self._closed:
            return
        try:
            self._inbox.put_nowait((what, item))
        except queue.Full:
            self._handoff_dropped[what] += 1
            return
        with contextlib.suppress(BlockingIOError):  # a full pipe is already waking the publishing thread
            os.write(self._wake_w, b"!")


class _Courier:
    """The publishing thread: owns the paho client, the buffers and the counters."""

    def __init__(self, owner: Publisher, buffer_seconds: int, buffer_events: int) -> None:
        self.owner = owner
        b = owner.broker
        self.state_topic = topics.topic(b.prefix, owner.bench, topics.STATE)
        self.second_topic = topics.topic(b.prefix, owner.bench, topics.SECOND)
        self.event_topic = topics.topic(b.prefix, owner.bench, topics.EVENT)
        self.client = make_client(b, f"bench-{owner.bench}", will=(self.state_topic, topics.encode(topics.OFFLINE)))
        self.client.max_inflight_messages_set(IN_FLIGHT)
        self.client.on_connect = self._on_connect
        self.client.on_disconnect = self._on_disconnect
        self.client.on_publish = self._on_publish
        self.seconds: deque[bytes] = deque()
        self.events: deque[bytes] = deque()
        self.buffer_seconds, self.buffer_events = buffer_seconds, buffer_events
        self.unacked: dict[int, str] = {}
        """Message ids sent and not yet acknowledged, and which leaf they were."""
        self.state: bytes | None = None
        self.snapshot: Snapshot | None = None
        self.today: tuple[str, Counter[str]] = ("", Counter())
        self.total = 0
        self.last_event: dict[str, Any] | None = None
        self.open = False
        """The socket is open (the client's loop must run)."""
        self.connected = False
        """The broker has accepted the connection (messages may go)."""
        self.next_try = 0.0
        self.tries = 0
        self.leaving = False
        self.p = owner.progress

    def run(self) -> None:
        self.client.connect_async(self.owner.broker.host, self.owner.broker.port, KEEPALIVE_S)
        closing_at: float | None = None
        while True:
            if self._take() and closing_at is None:
                closing_at = time.monotonic() + CLOSE_S
            now = time.monotonic()
            if not self.open and now >= self.next_try:
                self._connect(now)
            if self.connected:
                self._send()
            self._share()
            if closing_at is not None and (now >= closing_at or self._all_sent()):
                break
            self._wait(0.05 if closing_at is not None else IDLE_S if self.open else self.next_try - now)
        if self.open:
            self.leaving = True
            self.client.disconnect()  # a clean goodbye: the broker keeps the last state, not the will
            self.client.loop(timeout=0.1)
        self._share()

    # -- taking from the ingest thread -------------------------------------------------------------------

    def _wait(self, timeout: float) -> None:
        """Sleep until the broker's socket has something, the ingest thread hands something over (a byte on the
        wake-up pipe), or ``timeout``; then let the client read, write and keep the connection alive. Waking
        only then, not twenty times a second, is most of what publishing costs a quiet recorder."""
        sock = self.client.socket() if self.open else None
        pending = sock is not None and hasattr(sock, "pending") and sock.pending() > 0  # TLS bytes already read
        readable = [self.owner._wake_r, *([sock] if sock is not None else [])]
        writable = [sock] if sock is not None and self.client.want_write() else []
        try:
            ready, able, _ = select.select(readable, writable, [], 0.0 if pending else max(0.0, min(timeout, IDLE_S)))
        except (OSError, ValueError, TypeError):  # the socket closed under us: the client notices below
            ready, able = [], []
        if self.owner._wake_r in ready:
            with contextlib.suppress(BlockingIOError):
                os.read(self.owner._wake_r, 4096)
        if sock is not None:
            if sock in ready or pending:
                self.client.loop_read()
            if self.client.socket() is not None and sock in able:
                self.client.loop_write()
            if self.client.socket() is not None:
                self.client.loop_misc()
            elif self.open:  # the client closed its socket (a read error, a missed ping): the link is lost
                self._on_disconnect(self.client, None, None, "connection lost", None)

    def _take(self) -> bool:
        """Move what the ingest thread handed over into the buffers; True once it has said the run is over."""
        closing = False
        try:
            item = self.owner._inbox.get_nowait()
            while True:
                closing |= self._file(*item)
                item = self.owner._inbox.get_nowait()
        except queue.Empty:
            return closing

    def _file(self, what: str, item: Any) -> bool:
        if what == "second":
            for message in topics.second_messages(item):
                if len(self.seconds) >= self.buffer_seconds:
                    self.seconds.popleft()
                    self.p = replace(self.p, seconds_dropped=self.p.seconds_dropped + 1)
                self.seconds.append(message)
        elif what in ("begin", "end"):
            if what == "end":
                self._count(item)
            if len(self.events) >= self.buffer_events:
                self.events.popleft()
                self.p = replace(self.p, events_dropped=self.p.events_dropped + 1)
            self.events.append(topics.encode(topics.event_doc(item, what)))
        elif what == "state":
            self.snapshot = item
            self.state = self._state_message()
        elif what == "settle":
            self._share()
            item.set()
        return what == "close"

    def _count(self, event: Event) -> None:
        """Events ended today (the recorder's local date) by kind, the total, and the last one."""
        day = datetime.fromtimestamp(event.start_us / 1e6).date().isoformat()
        if day != self.today[0]:
            self.today = (day, Counter())
        self.today[1][event.kind] += 1
        self.total += 1
        self.last_event = topics.event_doc(event, "end")
        if self.snapshot is not None:
            self.state = self._state_message()

    def _state_message(self) -> bytes:
        events = {"day": self.today[0], "today": dict(self.today[1]), "total": self.total, "last": self.last_event}
        dropped = {"seconds": self.p.seconds_dropped, "events": self.p.events_dropped}
        return topics.encode(topics.state_doc(self.snapshot, self.owner.rig, self.owner.rails, events, dropped))

    # -- the broker ----------------------------------------------------------------------------------------

    def _connect(self, now: float) -> None:
        try:
            self.client.reconnect()
        except (OSError, ValueError) as exc:
            self.p = replace(self.p, error=unreachable(self.owner.broker, exc))
            self.next_try = now + RETRY_S[min(self.tries, len(RETRY_S) - 1)]
            self.tries += 1
            return
        self.open = True  # the broker's answer decides whether messages may go (_on_connect)

    def _on_connect(self, client: mqtt.Client, userdata: Any, flags: Any, reason: Any, properties: Any) -> None:
        if reason.is_failure:
            self.p = replace(self.p, error=refusal(reason))
            self.next_try = time.monotonic() + RETRY_S[-1]
            return
        self.connected = True
        self.tries = 0
        self.p = replace(self.p, connected=True, connects=self.p.connects + 1, away_since=None, error=None)
        if self.snapshot is not None:
            self.state = self._state_message()  # replaces the will's "offline" at once

    def _on_disconnect(self, client: mqtt.Client, userdata: Any, flags: Any, reason: Any, properties: Any) -> None:
        self.open = self.connected = False
        self.next_try = max(self.next_try, time.monotonic() + RETRY_S[0])
        if self.p.connected:
            error = None if self.leaving else f"link to the broker lost ({reason})"
            self.p = replace(self.p, connected=False, away_since=time.monotonic(), error=error)

    def _on_publish(self, client: mqtt.Client, userdata: Any, mid: int, reason: Any, properties: Any) -> None:
        leaf = self.unacked.pop(mid, None)
        if leaf == topics.EVENT:
            self.p = replace(self.p, events_sent=self.p.events_sent + 1)
        elif leaf == topics.SECOND:
            self.p = replace(self.p, seconds_sent=self.p.seconds_sent + 1)

    def _send(self) -> None:
        """Hand waiting messages to the client, up to ``IN_FLIGHT`` unacknowledged: the state, then events, then
        per-second figures, oldest first."""
        if self.state is not None:
            if self.client.publish(self.state_topic, self.state, qos=1, retain=True).rc != mqtt.MQTT_ERR_SUCCESS:
                return
            self.state = None
        for waiting, leaf, name in ((self.events, topics.EVENT, self.event_topic),
                                    (self.seconds, topics.SECOND, self.second_topic)):
            while waiting and len(self.unacked) < IN_FLIGHT:
                info = self.client.publish(name, waiting[0], qos=1)
                if info.rc != mqtt.MQTT_ERR_SUCCESS:
                    return
                waiting.popleft()
                self.unacked[info.mid] = leaf

    def _all_sent(self) -> bool:
        return self.connected and not (self.seconds or self.events or self.unacked or self.state is not None)

    def _share(self) -> None:
        self.p = replace(self.p, waiting=len(self.seconds) + len(self.events) + len(self.unacked))
        self.owner.progress = self.p
