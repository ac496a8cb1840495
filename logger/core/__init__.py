"""The processing core: one synchronous, I/O-free path from counts to values, events and per-second figures,
shared by the live ingest, replay, recovery, recal, review and the tests."""

from __future__ import annotations

from logger.core.gaps import GAP_S, gap_rows, integrated
from logger.core.processor import Block, Change, Processed, Processor
from logger.core.seconds import Pair, Seconds

__all__ = ["GAP_S", "Block", "Change", "Pair", "Processed", "Processor", "Seconds", "gap_rows", "integrated"]
