"""How long, on the command line: one syntax for every option that takes a duration.

A plain number is seconds (``3600``, ``0.5``); otherwise whole pieces with units, largest first or not
(``90s``, ``10m``, ``1h30m``, ``12h``, ``1d``, ``250ms``). ``--duration``, ``--before``, ``--after`` and the
offsets of ``export --from/--until`` all read it.
"""

from __future__ import annotations

import argparse
import re

_UNIT_S = {"ms": 1e-3, "s": 1.0, "min": 60.0, "m": 60.0, "h": 3600.0, "d": 86400.0}
_NUMBER = r"\d+(?:\.\d+)?"
_WHOLE = re.compile(rf"^\+?(?:{_NUMBER}|(?:{_NUMBER}(?:ms|min|s|m|h|d))+)$")
_PIECE = re.compile(rf"({_NUMBER})(ms|min|s|m|h|d)")
SYNTAX = "seconds, or a duration such as 90s, 10m, 1h30m, 12h"


def parse_duration(text: str) -> float | None:
    """Seconds in ``text``, or None when it is not a duration in the one syntax."""
    text = text.strip()
    if not _WHOLE.match(text):
        return None
    pieces = _PIECE.findall(text)
    return sum(float(n) * _UNIT_S[unit] for n, unit in pieces) if pieces else float(text.lstrip("+"))


def duration_arg(text: str) -> float:
    """An argparse ``type``: the seconds in ``text``, or a usage error that shows the syntax."""
    seconds = parse_duration(text)
    if seconds is None:
        raise argparse.ArgumentTypeError(f"{text!r}: expected {SYNTAX}")
    return seconds


def format_duration(seconds: float) -> str:
    """``seconds`` written in the same syntax, largest unit first: ``2h``, ``1h5m``, ``1m30s``, ``0.5s``."""
    whole, rest = divmod(round(seconds, 3), 1.0)
    pieces = []
    for unit, size in (("d", 86400), ("h", 3600), ("m", 60)):
        count, whole = divmod(int(whole), size)
        if count:
            pieces.append(f"{count}{unit}")
    left = int(whole) + rest
    if left or not pieces:
        pieces.append(f"{left:g}s")
    return "".join(pieces)
