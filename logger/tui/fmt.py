"""Plain text for numbers, times and sizes, shared by the screen's widgets."""

from __future__ import annotations

from datetime import datetime

from logger.events.model import Event
from logger.textplot import value_text

__all__ = ["duration_text", "elapsed_text", "event_details", "event_title", "local_time", "size_text", "value_text"]


def local_time(utc_us: int, places: int = 3) -> str:
    """A UTC microsecond stamp as local wall-clock time, ``HH:MM:SS.mmm``."""
    text = datetime.fromtimestamp(utc_us / 1e6).astimezone().strftime("%H:%M:%S.%f")
    return text[: 9 + places] if places else text[:8]


def duration_text(seconds: float | None) -> str:
    """How long an event lasted: ms below a second, then seconds, then minutes."""
    if seconds is None:
        return "-"
    if seconds < 1.0:
        return f"{seconds * 1000:.0f} ms"
    if seconds < 120.0:
        return f"{seconds:.2f} s"
    return f"{seconds / 60:.1f} min"


def elapsed_text(seconds: float) -> str:
    """A run's age as ``H:MM:SS``."""
    whole = int(max(seconds, 0.0))
    return f"{whole // 3600}:{whole // 60 % 60:02d}:{whole % 60:02d}"


def size_text(size_bytes: int) -> str:
    """Bytes on disk in kB, MB or GB (powers of 1000, as file managers show them)."""
    for unit, scale in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if size_bytes >= scale:
            return f"{size_bytes / scale:.1f} {unit}"
    return f"{size_bytes} B"


def event_title(event: Event) -> str:
    """One short line for an event, for the banner: kind, channel, how long (once it has ended), how deep."""
    lasted = f" for {duration_text(event.duration_s)}" if event.duration_s is not None else ""
    detail = f": {event.detail}" if event.detail and event.detail != "going on" else ""
    return f"{event.kind.upper()} on {event.channel or 'link'}{lasted}{detail}"


def event_details(event: Event) -> str:
    """Every field an event has, in words, for the line under the event list."""
    where = event.channel or ("" if event.kind == "mark" else "link")
    # No number: the screen counts events as they end, the sealed run numbers them by start time.
    text = f"{event.kind}{' ' + where if where else ''} at {local_time(event.start_us)}"
    if event.end_us is not None:
        text += f", {duration_text(event.duration_s)}"
    elif event.kind not in ("mark", "device_reset"):
        text += " (going on)"
    if event.episode is not None:
        text += ", part of a flicker episode"
    return f"{text}: {event.detail}" if event.detail else text
