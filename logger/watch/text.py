"""The lab screen's words and colours: a bench's readings, its last event, its age."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from rich.text import Text

from logger.textplot import value_text
from logger.tui.fmt import duration_text, elapsed_text
from logger.watch.model import Row

STATE_STYLES = {"offline": "bold magenta", "failed": "bold red", "disconnected": "red", "no data": "yellow",
                "event": "bold dark_orange", "recording": "green", "watching": "cyan", "stopped": "dim"}


def channels_text(row: Row) -> Text:
    """Each channel on a line of its own: its latest value and, in brackets, its range over the last minute."""
    text = Text(no_wrap=True, overflow="ellipsis")
    for k, (name, now, low, high, unit) in enumerate(row.channels):
        if k:
            text.append("\n")
        text.append(f"{name:<8.8} ", "dim")
        text.append(f"{_value(now)}{unit}", "bold")
        if low is not None and high is not None:
            text.append(f" [{_value(low)}-{_value(high)}]", "dim")
    return text


def _value(x: float | None) -> str:
    return "-" if x is None else value_text(x, signed=x < 0)


def event_text(doc: dict[str, Any] | None) -> Text:
    """The last event in a few words: local time, kind, channel, how long (or that it goes on)."""
    if not doc:
        return Text("-", "dim")
    when = _local(doc.get("start"))
    lasted = duration_text(doc.get("duration_s")) if doc.get("phase") == "end" else "going on"
    style = "bold red" if doc.get("kind") == "dropout" else "bold dark_orange" if doc.get("kind") == "brownout" else ""
    return Text.assemble(f"{when} ", (str(doc.get("kind", "?")), style), f"\n{doc.get('channel') or 'link'}, {lasted}")


def _local(utc: Any) -> str:
    try:
        return datetime.fromisoformat(str(utc).replace("Z", "+00:00")).astimezone().strftime("%H:%M:%S")
    except ValueError:
        return "?"


def elapsed(seconds: float | None) -> str:
    return "-" if seconds is None else elapsed_text(seconds)
