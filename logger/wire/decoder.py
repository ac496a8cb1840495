"""Streaming decoder: bytes from any read size in, validated frames out as numpy arrays.

Pure: it holds at most one partial line between calls and does no I/O. Every complete line is either
accepted (its CRC and layout check out) or counted as rejected; nothing corrupt becomes a sample.
Data lines are validated and parsed together as a 2-D byte array per line length; only header and answer
lines, which are rare, are handled one by one.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from logger.wire.crc import crc16, crc16_rows
from logger.wire.frames import (
    MAX_CHANNELS,
    MAX_LINE,
    Answer,
    DeviceHeader,
    FrameBatch,
    data_line_length,
)

_NEWLINE, _CR, _SPACE, _STAR = 10, 13, 32, 42
_D, _H, _A = ord("D"), ord("H"), ord("A")

_NIBBLE = np.full(256, 0xFF, dtype=np.uint8)
for _i, _c in enumerate(b"0123456789ABCDEF"):
    _NIBBLE[_c] = _i
for _i, _c in enumerate(b"abcdef"):
    _NIBBLE[_c] = 10 + _i

_DATA_LENGTHS = {data_line_length(n): n for n in range(1, MAX_CHANNELS + 1)}

Item = FrameBatch | DeviceHeader | Answer
_BAD_CRC, _MALFORMED, _OVERLONG, _PARTIAL = 0, 1, 2, 3


OVERLONG_HEADER = (f"a header line was refused: longer than {MAX_LINE - 1} characters (at most {MAX_CHANNELS} "
                   "channels with short names fit)")


@dataclass
class DecoderCounters:
    """Running totals. ``lines == frames + headers + answers + rejected + partial`` always holds."""

    bytes_in: int = 0
    lines: int = 0
    frames: int = 0
    headers: int = 0
    answers: int = 0
    rejected: int = 0
    bad_crc: int = 0
    malformed: int = 0
    overlong: int = 0
    partial: int = 0
    """Fragments of a line cut by connecting mid-stream (see :meth:`Decoder.joined_midstream`); not errors."""

    def as_dict(self) -> dict[str, int]:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def _layout(channels: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Byte positions of separators, hex digits and CRC digits in a data line body + CRC."""
    length = data_line_length(channels)
    spaces = np.array([1, 6, *(15 + 5 * k for k in range(channels))])
    star = length - 5
    digits = np.setdiff1d(np.arange(1, star), spaces)
    return spaces, digits, np.arange(star + 1, length)


_LAYOUTS = {n: _layout(n) for n in range(1, MAX_CHANNELS + 1)}
_WEIGHTS4 = np.array([4096, 256, 16, 1], dtype=np.uint32)


def _join_nibbles(nibbles: np.ndarray) -> np.ndarray:
    """(rows, fields*4) nibbles -> (rows, fields) uint32 values."""
    rows = nibbles.shape[0]
    return nibbles.reshape(rows, -1, 4).astype(np.uint32) @ _WEIGHTS4


class Decoder:
    """Turns a byte stream into an ordered list of frame batches, headers and answers per call."""

    def __init__(self) -> None:
        self.counters = DecoderCounters()
        self.refused: str | None = None
        """Why the latest header line with a good CRC was refused (a value out of range), if one was."""
        self._tail = b""
        self._skipping = False
        self._joined = False

    def joined_midstream(self) -> None:
        """The next bytes may start in the middle of a line (a port just opened on a running device): forget
        any partial line, and if the first complete line fails its checks, count it as a fragment, not an
        error."""
        self._tail = b""
        self._skipping = False
        self._joined = True

    def feed(self, data: bytes) -> list[Item]:
        """Decode everything complete in ``data`` (plus what was left over from the last call)."""
        self.counters.bytes_in += len(data)
        buf = self._tail + data if self._tail else bytes(data)
        arr = np.frombuffer(buf, dtype=np.uint8)
        newlines = np.flatnonzero(arr == _NEWLINE)
        was_skipping = self._skipping
        if len(newlines) == 0:
            self._hold(buf)
            return []
        self._skipping = False
        self._hold(buf[newlines[-1] + 1 :])
        starts = np.concatenate(([0], newlines[:-1] + 1))
        ends = newlines.copy()
        if was_skipping:  # the rest of an overlong line, already counted
            starts, ends = starts[1:], ends[1:]
        overlong = ends - starts >= MAX_LINE  # the limit counts the whole line, CR and LF included
        has_cr = (ends > starts) & (arr[np.maximum(ends - 1, 0)] == _CR)
        ends[has_cr] -= 1
        lengths = ends - starts
        keep = lengths > 0
        return self._decode_lines(buf, arr, starts[keep], lengths[keep], overlong[keep])

    def _hold(self, tail: bytes) -> None:
        """Keep an incomplete line; one that is already too long is counted once and skipped."""
        if self._skipping:
            tail = b""
        elif len(tail) >= MAX_LINE:
            self._count_rejects(overlong=1)
            self.counters.lines += 1
            self._skipping = True
            if tail[:1] == b"H":
                self.refused = OVERLONG_HEADER
            tail = b""
        self._tail = tail

    def _count_rejects(self, bad_crc: int = 0, malformed: int = 0, overlong: int = 0) -> None:
        c = self.counters
        c.bad_crc += bad_crc
        c.malformed += malformed
        c.overlong += overlong
        c.rejected += bad_crc + malformed + overlong

    def _decode_lines(
        self, buf: bytes, arr: np.ndarray, starts: np.ndarray, lengths: np.ndarray, overlong: np.ndarray
    ) -> list[Item]:
        n = len(starts)
        self.counters.lines += n
        kind = np.zeros(n, dtype=np.int8)  # 0 rejected, 1..8 data with that many channels, -1 text item
        why = np.where(overlong, _OVERLONG, _MALFORMED).astype(np.int8)  # reason, for rejected rows
        if (overlong & (arr[starts] == _H)).any():
            self.refused = OVERLONG_HEADER
        first = np.where(overlong, 0, arr[starts])
        data_rows = np.flatnonzero(first == _D)
        for length in np.unique(lengths[data_rows]):
            channels = _DATA_LENGTHS.get(int(length))
            rows = data_rows[lengths[data_rows] == length]
            if channels is not None:
                layout_ok, crc_ok = self._check_data(arr, starts[rows], channels)
                kind[rows[layout_ok & crc_ok]] = channels
                why[rows[layout_ok & ~crc_ok]] = _BAD_CRC
        parsed: dict[int, DeviceHeader | Answer] = {}
        for row in np.flatnonzero(((first == _H) | (first == _A)) & ~overlong):
            item = self._parse_text(buf[starts[row] : starts[row] + lengths[row]])
            if isinstance(item, str):
                why[row] = _BAD_CRC if item == "crc" else _MALFORMED
            else:
                parsed[int(row)] = item
                kind[row] = -1
        if self._joined and n:
            if kind[0] == 0:
                why[0] = _PARTIAL
            self._joined = False
        tally = np.bincount(why[kind == 0], minlength=4)
        self.counters.partial += int(tally[_PARTIAL])
        self._count_rejects(int(tally[_BAD_CRC]), int(tally[_MALFORMED]), int(tally[_OVERLONG]))
        return self._assemble(arr, starts, kind, parsed)

    @staticmethod
    def _check_data(arr: np.ndarray, starts: np.ndarray, channels: int) -> tuple[np.ndarray, np.ndarray]:
        """For equal-length data lines: is the layout sound, and does the CRC match."""
        spaces, digits, crc_digits = _LAYOUTS[channels]
        star = crc_digits[0] - 1
        grid = arr[np.arange(data_line_length(channels))[:, None] + starts[None, :]]
        nibbles = _NIBBLE[grid[crc_digits]]
        layout_ok = (grid[spaces] == _SPACE).all(axis=0) & (grid[star] == _STAR)
        layout_ok &= (_NIBBLE[grid[digits]] != 0xFF).all(axis=0) & (nibbles != 0xFF).all(axis=0)
        sent = _join_nibbles(nibbles.T)[:, 0]
        return layout_ok, crc16_rows(grid[:star]) == sent

    def _parse_text(self, line: bytes) -> DeviceHeader | Answer | str:
        """A header or answer, or the reason it was rejected ("crc" or "malformed")."""
        body, star, sent = line.rpartition(b"*")
        if not star or len(sent) != 4 or any(_NIBBLE[b] == 0xFF for b in sent):
            return "malformed"
        if crc16(body) != int(sent, 16):
            return "crc"
        try:
            text = body.decode("ascii")
            if body[:1] == b"H":
                header = DeviceHeader.parse(text)
                self.counters.headers += 1
                return header
            answer = Answer.parse(text)
            self.counters.answers += 1
            return answer
        except UnicodeDecodeError:
            return "malformed"
        except ValueError as exc:
            if body[:1] == b"H":
                self.refused = f"a header line was refused: {exc}"
            return "malformed"

    def _assemble(
        self, arr: np.ndarray, starts: np.ndarray, kind: np.ndarray, parsed: dict[int, DeviceHeader | Answer]
    ) -> list[Item]:
        """Group accepted lines, in order, into runs of same-width frames separated by text items."""
        accepted = np.flatnonzero(kind != 0)
        if len(accepted) == 0:
            return []
        k = kind[accepted]
        breaks = np.flatnonzero((np.diff(k) != 0) | (k[1:] == -1)) + 1
        items: list[Item] = []
        for run in np.split(accepted, breaks):
            channels = int(kind[run[0]])
            if channels == -1:
                items.append(parsed[int(run[0])])
            else:
                items.append(self._frames(arr, starts[run], channels))
                self.counters.frames += len(run)
        return items

    @staticmethod
    def _frames(arr: np.ndarray, starts: np.ndarray, channels: int) -> FrameBatch:
        _, digits, _ = _LAYOUTS[channels]
        values = _join_nibbles(_NIBBLE[arr[starts[:, None] + digits[None, :]]])
        return FrameBatch(
            seq=values[:, 0].astype(np.uint16),
            device_us=((values[:, 1] << 16) | values[:, 2]).astype(np.uint32),
            counts=values[:, 3:].astype(np.uint16),
        )
