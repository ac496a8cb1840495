"""CRC-16/IBM-3740 (also known as CRC-16/CCITT-FALSE): poly 0x1021, init 0xFFFF, no reflection, no final xor.

One line at a time goes through :func:`binascii.crc_hqx`; many equal-length lines at once go through a
table-driven loop over byte columns, so a batch of frames costs a dozen or so numpy operations, not one
Python call per line. Because the register is 16 bits wide, two message bytes can be folded in per step with
a 65536-entry table: after xoring 16 message bits into the register, the register alone decides the result.
"""

from __future__ import annotations

import binascii

import numpy as np

POLY = 0x1021
INIT = 0xFFFF


def _table() -> np.ndarray:
    table = np.zeros(256, dtype=np.uint16)
    for byte in range(256):
        crc = byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ POLY) if crc & 0x8000 else (crc << 1)
        table[byte] = crc & 0xFFFF
    return table


TABLE = _table()


def _pair_table() -> np.ndarray:
    """Register after clocking 16 zero bits through it, for every starting value."""
    x = np.arange(1 << 16, dtype=np.uint32)
    once = (x << 8) & 0xFFFF ^ TABLE[x >> 8]
    return (((once << 8) & 0xFFFF) ^ TABLE[once >> 8]).astype(np.uint16)


PAIR_TABLE = _pair_table()


def crc16(data: bytes) -> int:
    """CRC of one byte string."""
    return binascii.crc_hqx(data, INIT)


def crc16_rows(columns: np.ndarray) -> np.ndarray:
    """CRC of many equal-length byte strings at once.

    Args:
        columns: uint8 array of shape (length, rows): byte ``j`` of every row is ``columns[j]``.

    Returns:
        uint16 array with one CRC per row.
    """
    crc = np.full(columns.shape[1], INIT, dtype=np.uint16)
    pairs = len(columns) // 2
    if pairs:
        words = (columns[0 : 2 * pairs : 2].astype(np.uint16) << 8) | columns[1 : 2 * pairs : 2]
        for word in words:
            crc = PAIR_TABLE[crc ^ word]
    if len(columns) % 2:
        crc = (crc << 8) ^ TABLE[(crc >> 8) ^ columns[-1]]
    return crc
