"""Byte sources behind one small protocol: serial ports by pyserial URL, the simulated rig, capture replay."""

from logger.sources.base import Chunk, LinkLost, Source, SourceError

__all__ = ["Chunk", "LinkLost", "Source", "SourceError"]
