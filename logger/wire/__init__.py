"""The wire protocol: line format, CRC, encoding and the streaming decoder (pure, no I/O)."""

from logger.wire.crc import crc16, crc16_rows
from logger.wire.decoder import Decoder, DecoderCounters
from logger.wire.frames import (
    MAX_CHANNELS,
    MAX_LINE,
    Answer,
    DeviceHeader,
    FrameBatch,
    data_line_length,
    encode_frames,
    encode_line,
)

__all__ = [
    "MAX_CHANNELS",
    "MAX_LINE",
    "Answer",
    "Decoder",
    "DecoderCounters",
    "DeviceHeader",
    "FrameBatch",
    "crc16",
    "crc16_rows",
    "data_line_length",
    "encode_frames",
    "encode_line",
]
