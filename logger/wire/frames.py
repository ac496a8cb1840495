"""Line format of the wire protocol (see ``firmware_notes/PROTOCOL.md``) and its encoders.

Every line is ``BODY*CCCC\\n``: ASCII, at most :data:`MAX_LINE` bytes, with ``CCCC`` the CRC of ``BODY`` in
four upper-case hex digits. The first byte of the body says what the line is:

- ``D`` data: ``D SSSS TTTTTTTT C0 C1 ...``, fixed-width hex: sequence (16 bit), device clock in
  microseconds (32 bit), then 1 to 8 raw ADC counts of 4 digits each. A data line's length follows from its
  channel count, so a batch of them decodes as one 2-D array.
- ``H`` header: ``H key=value ...`` (firmware, ADC bits, reference, rate, channel names, why it was sent).
- ``A`` answer to a host command: ``A word [text]``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from logger.wire.crc import crc16, crc16_rows

MAX_LINE = 160
"""Longest line accepted, newline included; anything longer is dropped and counted."""

MAX_CHANNELS = 8
MIN_RATE_HZ = 0.001
MAX_RATE_HZ = 100_000.0
"""A full-speed USB link carries about 1 MB/s, fewer than 40,000 of the shortest data lines a second; a header
claiming more (or a rate that is not a number) is refused rather than believed."""
MAX_VREF_MV = 65_535
"""The largest reference a firmware keeps in 16 bits; no ADC reference comes near it."""
SEQ_MODULUS = 1 << 16
CLOCK_MODULUS = 1 << 32

_DATA_FIXED = len("D SSSS TTTTTTTT") + len("*CCCC")
_HEX = np.frombuffer(b"0123456789ABCDEF", dtype=np.uint8)


def data_line_length(channels: int) -> int:
    """Length of a data line with ``channels`` counts, without its newline."""
    return _DATA_FIXED + 5 * channels


@dataclass(frozen=True)
class FrameBatch:
    """Consecutive data frames with a valid CRC, as arrays (one row per frame)."""

    seq: np.ndarray
    """uint16 sequence numbers as sent (they wrap)."""
    device_us: np.ndarray
    """uint32 device clock in microseconds as sent (it wraps every 71.6 minutes)."""
    counts: np.ndarray
    """uint16 raw ADC counts, shape (frames, channels)."""

    def __len__(self) -> int:
        return len(self.seq)

    @property
    def channels(self) -> int:
        return self.counts.shape[1]


@dataclass(frozen=True)
class DeviceHeader:
    """What the device says about itself; sent at boot, on request, after a rate change and periodically."""

    firmware: str
    version: str
    adc_bits: int
    vref_mv: int
    rate_hz: float
    channels: tuple[str, ...]
    reason: str = "ask"
    extra: tuple[tuple[str, str], ...] = ()

    REQUIRED = ("fw", "ver", "bits", "vref_mv", "rate_hz", "ch")

    def body(self) -> str:
        """The header line's body, as a device sends it."""
        rate = f"{self.rate_hz:.10g}"
        fields = [
            f"fw={self.firmware}",
            f"ver={self.version}",
            f"bits={self.adc_bits}",
            f"vref_mv={self.vref_mv}",
            f"rate_hz={rate}",
            f"ch={','.join(self.channels)}",
            f"why={self.reason}",
            *(f"{k}={v}" for k, v in self.extra),
        ]
        return "H " + " ".join(fields)

    @classmethod
    def parse(cls, body: str) -> DeviceHeader:
        """Read a header body; raises ValueError naming the missing or bad field."""
        if not body.startswith("H "):
            raise ValueError("header body must start with 'H '")
        fields: dict[str, str] = {}
        for token in body.split()[1:]:
            key, sep, value = token.partition("=")
            if not sep or not key:
                raise ValueError(f"header field {token!r} is not key=value")
            if key in fields:
                raise ValueError(f"header repeats {key!r}")
            fields[key] = value
        missing = [key for key in cls.REQUIRED if key not in fields]
        if missing:
            raise ValueError(f"header lacks {', '.join(missing)}")
        channels = tuple(fields["ch"].split(","))
        bits, vref_mv, rate_hz = int(fields["bits"]), int(fields["vref_mv"]), float(fields["rate_hz"])
        if not 1 <= len(channels) <= MAX_CHANNELS or not all(channels) or len(set(channels)) != len(channels):
            raise ValueError(f"header channels {fields['ch']!r}: 1 to {MAX_CHANNELS} distinct names expected")
        if not 1 <= bits <= 16:
            raise ValueError(f"header bits={bits}: 1 to 16 expected (counts are 16-bit hex)")
        if not 1 <= vref_mv <= MAX_VREF_MV:
            raise ValueError(f"header vref_mv={vref_mv}: 1 to {MAX_VREF_MV} expected")
        if not MIN_RATE_HZ <= rate_hz <= MAX_RATE_HZ:
            raise ValueError(f"header rate_hz={fields['rate_hz']}: {MIN_RATE_HZ:g} to {MAX_RATE_HZ:g} expected")
        known = {*cls.REQUIRED, "why"}
        extra = tuple((k, v) for k, v in fields.items() if k not in known)
        return cls(
            firmware=fields["fw"],
            version=fields["ver"],
            adc_bits=bits,
            vref_mv=vref_mv,
            rate_hz=rate_hz,
            channels=channels,
            reason=fields.get("why", "ask"),
            extra=extra,
        )


@dataclass(frozen=True)
class Answer:
    """A device's answer to a host command, for example ``A pong 3F`` or ``A err rate``."""

    word: str
    text: str = ""

    @classmethod
    def parse(cls, body: str) -> Answer:
        if not body.startswith("A "):
            raise ValueError("answer body must start with 'A '")
        rest = body[2:]
        word, _, text = rest.partition(" ")
        if not word:
            raise ValueError("answer without a word")
        return cls(word=word, text=text)


def encode_line(body: str) -> bytes:
    """Frame one body as a complete line: ``BODY*CCCC\\n``."""
    raw = body.encode("ascii")
    line = raw + b"*%04X\n" % crc16(raw)
    if len(line) > MAX_LINE:
        raise ValueError(f"line of {len(line)} bytes exceeds the {MAX_LINE}-byte limit")
    return line


def _hex_columns(values: np.ndarray, digits: int) -> np.ndarray:
    """Upper-case hex digits of unsigned values, most significant first: shape (digits, rows)."""
    shifts = np.arange(digits - 1, -1, -1, dtype=np.uint64)[:, None] * 4
    return _HEX[(values.astype(np.uint64)[None, :] >> shifts) & 0xF]


def encode_frames(seq: np.ndarray, device_us: np.ndarray, counts: np.ndarray) -> bytes:
    """Encode many data frames at once, exactly as the firmware would send them.

    Args:
        seq: sequence numbers (taken modulo 2**16).
        device_us: device clock in microseconds (taken modulo 2**32).
        counts: raw counts, shape (frames, channels), each 0..65535.

    Returns:
        The lines, concatenated.
    """
    counts = np.asarray(counts)
    rows, channels = counts.shape
    if not 1 <= channels <= MAX_CHANNELS:
        raise ValueError(f"{channels} channels; 1 to {MAX_CHANNELS} expected")
    if rows == 0:
        return b""
    length = data_line_length(channels)
    out = np.empty((length + 1, rows), dtype=np.uint8)
    out[0] = ord("D")
    pos = 1
    fields = [(np.asarray(seq) % SEQ_MODULUS, 4), (np.asarray(device_us) % CLOCK_MODULUS, 8)]
    fields += [(counts[:, k], 4) for k in range(channels)]
    for values, digits in fields:
        out[pos] = ord(" ")
        out[pos + 1 : pos + 1 + digits] = _hex_columns(np.asarray(values), digits)
        pos += 1 + digits
    crc = crc16_rows(out[:pos])
    out[pos] = ord("*")
    out[pos + 1 : pos + 5] = _hex_columns(crc, 4)
    out[pos + 5] = ord("\n")
    return out.T.tobytes()
