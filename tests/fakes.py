"""Stand-ins shared by tests (sources that misbehave in one particular way) and waits on conditions."""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from logger.sources.base import Chunk


class WrongBaud:
    """A port opened at the wrong baud rate: bytes keep coming, none of them a valid line."""

    name = "/dev/ttyFAKE @ 9600"

    def __init__(self, seed: int = 5) -> None:
        self.rng = np.random.default_rng(seed)

    def open(self) -> None:
        pass

    def read(self) -> Chunk:
        time.sleep(0.02)
        return Chunk(self.rng.integers(0, 256, 200, dtype=np.uint8).tobytes(), time.time())

    def write(self, data: bytes) -> None:
        pass

    def close(self) -> None:
        pass


def wait_until(ready: Callable[[], object], what: str, deadline_s: float = 60.0) -> None:
    """Poll ``ready`` until it is true: a generous deadline for a busy machine, never a fixed sleep."""
    deadline = time.monotonic() + deadline_s
    while not ready():
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(0.02)


def journal_rows(root: Path) -> int:
    """Rows readable now from the newest journal under ``root`` (a run folder or a folder of runs)."""
    from logger.store.journal import read_journal_table

    journals = sorted(root.glob("_journal-*.arrows")) + sorted(root.glob("*/_journal-*.arrows"))
    table = read_journal_table(journals[-1]) if journals else None
    return 0 if table is None else table.num_rows


def flip_page_bytes(part: Path) -> None:
    """Damage a data page of a sample part in place (every 7th byte of its first value column's first page
    flipped), leaving its footer whole: only the page's checksum can tell."""
    import pyarrow.parquet as pq

    column = pq.read_metadata(part).row_group(0).column(4)
    data = bytearray(part.read_bytes())
    start = column.dictionary_page_offset or column.data_page_offset
    for i in range(start + 40, min(start + column.total_compressed_size, len(data)) - 8, 7):
        data[i] ^= 0x5A
    part.write_bytes(bytes(data))
