"""An event as environment variables for a command: one variable per field, under a prefix of our own.

A command run for an event reads what happened from its environment (``RAILTAP_KIND``, ``RAILTAP_CHANNEL``,
``RAILTAP_START`` ...), never from a command line a shell would have to split. Values are plain text: numbers
as Python writes them (enough digits to read back the same value), times as ISO 8601 UTC, a missing value as an
empty string, so a script can test ``[ -n "$RAILTAP_END" ]`` whatever the kind.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

PREFIX = "RAILTAP_"
_NOT_NAME = re.compile(r"[^A-Z0-9_]")


def variable_name(field: str) -> str:
    """``depth_pct`` -> ``RAILTAP_DEPTH_PCT``; anything but letters, digits and ``_`` becomes ``_``."""
    return PREFIX + _NOT_NAME.sub("_", field.upper())


def variable_text(value: Any) -> str:
    """A field's value as the text of its variable (see the module's docstring)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "1" if value else "0"
    if isinstance(value, datetime):
        return iso_utc(value)
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    return str(value)


def iso_utc(moment: datetime) -> str:
    """``2026-12-01T22:04:12.250000Z``: microseconds always written, so every value has one width."""
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def environment(kind: str, fields: Mapping[str, Any], inherited: Mapping[str, str]) -> dict[str, str]:
    """The environment a command runs with: ``inherited`` without any variable of our prefix (a railtap run
    by a command of another railtap must not see stale values), then ``RAILTAP_KIND`` and one variable per
    field of the event."""
    env = {name: value for name, value in inherited.items() if not name.startswith(PREFIX)}
    for field, value in fields.items():
        env[variable_name(field)] = variable_text(value)
    env[variable_name("kind")] = kind
    return env
