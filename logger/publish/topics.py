"""The topic tree benches publish under, and its messages: JSON, one schema version, written and read here only.

Under a prefix (``railtap`` unless the URL names another), each bench has three topics:

``PREFIX/BENCH/state``   retained, QoS 1: what the bench is doing (``recording``, ``watching``, ``no data``,
                         ``disconnected``, ``stopped``, ``failed``), its channels, run, device time elapsed,
                         link and event counts;
                         the broker replaces it with ``{"state": "offline"}`` when the recorder vanishes.
``PREFIX/BENCH/second``  QoS 1: one message per second of the device clock: each channel's min, mean, max
                         and standard deviation within it, and each rail's energy in joules.
``PREFIX/BENCH/event``   QoS 1: an event as it begins (``phase: begin``) and when it ends (``phase: end``); the
                         two share a ``key``.

Times are ISO 8601 UTC labels with microseconds; durations are measured on the device clock.
"""

from __future__ import annotations

import json
import math
import time
from dataclasses import dataclass
from typing import Any

from logger.events.model import Event
from logger.ingest.outlet import SecondFigures, event_key
from logger.ingest.state import Snapshot
from logger.store.files import utc_text

VERSION = 1
STATE, SECOND, EVENT = "state", "second", "event"
STATS = ("min", "mean", "max", "sd")
"""The order of each channel's figures in a ``second`` message."""
OFFLINE = {"v": VERSION, "state": "offline"}


def topic(prefix: str, bench: str, leaf: str) -> str:
    return f"{prefix}/{bench}/{leaf}"


def subscription(prefix: str) -> str:
    """The one subscription that hears every bench under ``prefix``."""
    return f"{prefix}/+/+"


def encode(doc: dict[str, Any]) -> bytes:
    return json.dumps(doc, separators=(",", ":"), allow_nan=False).encode()


def _num(x: float) -> float | None:
    """A float for JSON: rounded to what a float32 sample holds, NaN as null."""
    x = float(x)
    return None if math.isnan(x) or math.isinf(x) else float(f"{x:.7g}")


def second_messages(figures: SecondFigures) -> list[bytes]:
    """One ``second`` message per row of ``figures``."""
    out = []
    for i in range(len(figures)):
        channels = {name: [_num(figures.minimum[i, k]), _num(figures.mean[i, k]), _num(figures.maximum[i, k]),
                           _num(figures.sd[i, k])] for k, name in enumerate(figures.channels)}
        rails = {name: _num(figures.joules[i, j]) for j, name in enumerate(figures.rails)}
        out.append(encode({"v": VERSION, "utc": utc_text(int(figures.utc_us[i])), "device_s": int(figures.device_s[i]),
                           "count": int(figures.count[i]), "ch": channels, "j": rails}))
    return out


def event_doc(event: Event, phase: str) -> dict[str, Any]:
    """An event as a ``event`` message's document (``phase``: ``begin`` or ``end``)."""
    doc: dict[str, Any] = {"v": VERSION, "phase": phase, "key": event_key(event), "kind": event.kind,
                           "channel": event.channel, "start": utc_text(event.start_us)}
    if phase == "end":
        doc.update(id=event.id, end=utc_text(event.end_us), duration_s=_opt(event.duration_s))
    for name in ("value", "depth_pct", "count", "rate_hz"):
        value = getattr(event, name)
        if value is not None:
            doc[name] = _num(value)
    if event.detail and event.detail != "going on":
        doc["detail"] = event.detail
    return doc


def _opt(x: float | None) -> float | None:
    return None if x is None else _num(x)


@dataclass(frozen=True)
class Message:
    """A message read off the tree: which bench, which leaf, and its document."""

    bench: str
    leaf: str
    doc: dict[str, Any]


def read_message(prefix: str, topic_name: str, payload: bytes) -> Message | None:
    """The message, or None for anything that is not one of ours (another schema, a stray publisher): a watcher
    counts those and carries on."""
    head, _, rest = topic_name.partition(f"{prefix}/") if topic_name.startswith(f"{prefix}/") else ("", "", "")
    if head or rest.count("/") != 1:
        return None
    bench, leaf = rest.split("/")
    if leaf not in (STATE, SECOND, EVENT):
        return None
    try:
        doc = json.loads(payload)
    except (ValueError, UnicodeDecodeError):
        return None
    if not isinstance(doc, dict) or doc.get("v") != VERSION or not _valid(leaf, doc):
        return None
    return Message(bench, leaf, doc)


def _valid(leaf: str, doc: dict[str, Any]) -> bool:
    if leaf == STATE:
        return isinstance(doc.get("state"), str)
    if leaf == SECOND:
        return isinstance(doc.get("utc"), str) and isinstance(doc.get("ch"), dict) and all(
            isinstance(v, list) and len(v) == len(STATS) for v in doc["ch"].values())
    return doc.get("phase") in ("begin", "end") and isinstance(doc.get("kind"), str) and isinstance(doc.get("key"), str)


def bench_state(snapshot: Snapshot) -> str:
    """The bench's state word from the run's: what a watcher sorts and colours by."""
    if snapshot.state == "running":
        return "recording" if snapshot.recording is not None else "watching"
    if snapshot.state == "reconnecting":
        return "disconnected"
    if snapshot.state in ("stopped", "failed"):
        return snapshot.state
    return "no data"  # waiting for a header, silent, or bytes that make no lines


def state_doc(snapshot: Snapshot, rig: str, rails: tuple[str, ...], events: dict[str, Any],
              dropped: dict[str, int]) -> dict[str, Any]:
    """The retained ``state`` message: the bench as a watcher shows it."""
    link = snapshot.link
    recording = snapshot.recording
    return {
        "v": VERSION, "state": bench_state(snapshot), "message": snapshot.message, "rig": rig,
        "channels": [{"name": n, "unit": u} for n, u in zip(snapshot.channels, snapshot.units, strict=True)],
        "rails": list(rails),
        "run": recording.folder if recording is not None else None,
        "elapsed_s": None if snapshot.elapsed_s is None else round(snapshot.elapsed_s, 1),
        "link": {"source": link.source, "connected": link.connected, "rate_hz": _num(link.rate_hz),
                 "lost": link.lost, "rejected": link.rejected, "reconnects": link.reconnects},
        "events": events, "dropped": dropped, "sent": utc_text(int(time.time() * 1e6)),
    }
