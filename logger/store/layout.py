"""Names inside a run folder, and the name of a run folder itself.

::

    20261201T215800Z-bench-30v/
        part-00000.parquet ...     sealed sample parts (what any Parquet reader sees)
        _journal-00001.arrows      journal of the part being recorded
        _events.arrows             events while recording, _events.parquet after close
        _run.json                  run metadata, readable
        _run.lock                  held by the live writer

Files starting with ``_`` are skipped by pyarrow dataset discovery (and so by ``pandas.read_parquet``), which
is why everything but the sealed parts starts with one.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime
from pathlib import Path

EVENTS_JOURNAL = "_events.arrows"
EVENTS_PARQUET = "_events.parquet"

_PART = re.compile(r"^part-(\d{5,})\.parquet$")
_JOURNAL = re.compile(r"^_journal-(\d{5,})\.arrows$")
_LABEL_JUNK = re.compile(r"[^A-Za-z0-9._-]+")
MAX_LABEL = 60


def part_name(index: int) -> str:
    """``part-00003.parquet`` for index 3."""
    return f"part-{index:05d}.parquet"


def journal_name(index: int) -> str:
    """``_journal-00003.arrows`` for index 3."""
    return f"_journal-{index:05d}.arrows"


def _indexed(folder: Path, pattern: re.Pattern[str]) -> list[tuple[int, Path]]:
    found = []
    for path in folder.iterdir():
        match = pattern.match(path.name)
        if match and path.is_file():
            found.append((int(match.group(1)), path))
    return sorted(found)


def parts_in(folder: Path) -> list[tuple[int, Path]]:
    """Sealed parts of a run as ``(index, path)``, in order."""
    return _indexed(folder, _PART)


def journals_in(folder: Path) -> list[tuple[int, Path]]:
    """Sample journals of a run as ``(index, path)``, in order."""
    return _indexed(folder, _JOURNAL)


def temp_files_in(folder: Path) -> list[Path]:
    """Leftover ``_*.tmp`` files of an interrupted seal or metadata write (they hold no unique data)."""
    return sorted(p for p in folder.glob("_*.tmp") if p.is_file())


def run_folder_name(start_utc: datetime, label: str = "") -> str:
    """Folder name of a run: start time in compact ISO form plus a sanitised label.

    Args:
        start_utc: Start of the run; must be timezone-aware (it is converted to UTC).
        label: Free text from the user; anything but letters, digits, '.', '_' and '-' becomes '-'.

    Returns:
        For example ``20261201T215800Z-bench-30v``, or just the time when the label is empty.

    Raises:
        ValueError: ``start_utc`` has no timezone.
    """
    if start_utc.tzinfo is None:
        raise ValueError("run_folder_name needs a timezone-aware start time")
    stamp = start_utc.astimezone(UTC).strftime("%Y%m%dT%H%M%SZ")
    clean = _LABEL_JUNK.sub("-", label).strip("-._")[:MAX_LABEL].strip("-._")
    return f"{stamp}-{clean}" if clean else stamp
