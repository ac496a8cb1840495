"""Wire format: CRC against published check values and a second library; decoder fuzzed with hypothesis."""

from __future__ import annotations

import binascii
import itertools

import crcmod.predefined
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from logger.wire import (
    MAX_LINE,
    Answer,
    Decoder,
    DeviceHeader,
    FrameBatch,
    crc16,
    crc16_rows,
    data_line_length,
    encode_frames,
    encode_line,
)

HEADER = DeviceHeader("tapref", "1.0", 12, 3300, 1000.0, ("out_v", "out_a"), "boot")


def test_crc_catalogue_check_value() -> None:
    # RevEng CRC catalogue, CRC-16/IBM-3740 (alias CRC-16/CCITT-FALSE): check = 0x29B1 for "123456789".
    assert crc16(b"123456789") == 0x29B1
    rows = np.frombuffer(b"123456789", dtype=np.uint8)[:, None]
    assert crc16_rows(rows)[0] == 0x29B1


@given(st.lists(st.binary(min_size=7, max_size=7), min_size=1, max_size=20))
def test_crc_agrees_with_crcmod(lines: list[bytes]) -> None:
    # Second reference: crcmod's predefined "crc-ccitt-false" (poly 0x11021, init 0xFFFF, not reflected).
    reference = crcmod.predefined.mkCrcFun("crc-ccitt-false")
    columns = np.frombuffer(b"".join(lines), dtype=np.uint8).reshape(len(lines), 7).T
    assert [int(c) for c in crc16_rows(columns)] == [reference(line) for line in lines]
    assert [crc16(line) for line in lines] == [binascii.crc_hqx(line, 0xFFFF) for line in lines]


def _frames(n: int, channels: int = 2, seed: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    seq = np.arange(n) % 65536
    dev = (np.arange(n) * 1000 + 123) % 2**32
    counts = rng.integers(0, 65536, size=(n, channels))
    return seq, dev, counts


def _collect(items: list) -> tuple[list[tuple[int, ...]], list]:
    rows: list[tuple[int, ...]] = []
    other = []
    for item in items:
        if isinstance(item, FrameBatch):
            for k in range(len(item)):
                rows.append((int(item.seq[k]), int(item.device_us[k]), *map(int, item.counts[k])))
        else:
            other.append(item)
    return rows, other


def _balanced(d: Decoder) -> bool:
    c = d.counters
    lines_add_up = c.lines == c.frames + c.headers + c.answers + c.rejected + c.partial
    return lines_add_up and c.rejected == c.bad_crc + c.malformed + c.overlong


def test_encoded_lines_look_as_documented() -> None:
    line = encode_frames(np.array([1]), np.array([0x000F4240]), np.array([[0x0800, 0x0FFF]]))
    assert line.startswith(b"D 0001 000F4240 0800 0FFF*") and line.endswith(b"\n")
    assert len(line) == data_line_length(2) + 1 == 31
    assert crc16(line[:25]) == int(line[26:30], 16)


def test_round_trip_all_channel_counts() -> None:
    for channels in range(1, 9):
        seq, dev, counts = _frames(500, channels)
        d = Decoder()
        rows, _ = _collect(d.feed(encode_frames(seq, dev, counts)))
        assert rows == [(s, t, *c) for s, t, c in zip(seq, dev, counts.tolist(), strict=True)]
        assert _balanced(d) and d.counters.rejected == 0


def test_header_and_answers_keep_their_place() -> None:
    seq, dev, counts = _frames(6)
    stream = (
        encode_line(HEADER.body()) + encode_frames(seq[:3], dev[:3], counts[:3]) + encode_line("A pong 7F")
        + encode_frames(seq[3:], dev[3:], counts[3:])
    )
    items = Decoder().feed(stream)
    assert [type(i) for i in items] == [DeviceHeader, FrameBatch, Answer, FrameBatch]
    assert items[0] == HEADER and items[2] == Answer("pong", "7F")


def test_header_missing_a_field_is_rejected_even_with_good_crc() -> None:
    d = Decoder()
    assert d.feed(encode_line("H fw=x ver=1 bits=12 rate_hz=1000 ch=a")) == []
    assert d.counters.malformed == 1 and _balanced(d)


def test_crlf_and_lower_case_hex_are_accepted() -> None:
    line = encode_frames(np.array([10]), np.array([0xABCDEF]), np.array([[0xABC, 0xDEF]]))
    body = line[:25].lower().replace(b"d ", b"D ", 1)
    lower = body + b"*%04x\r\n" % crc16(body)
    rows, _ = _collect(Decoder().feed(lower))
    assert rows == [(10, 0xABCDEF, 0xABC, 0xDEF)]


def test_overlong_garbage_is_counted_once_then_resyncs() -> None:
    seq, dev, counts = _frames(3)
    d = Decoder()
    good = encode_frames(seq, dev, counts)
    out = d.feed(b"\xff" * (MAX_LINE * 3))
    out += d.feed(b"\xfe" * 500)
    out += d.feed(b"junk\n" + good)
    rows, _ = _collect(out)
    assert len(rows) == 3
    assert d.counters.overlong == 1 and d.counters.rejected == 1 and _balanced(d)


def test_bit_flip_is_rejected_as_bad_crc() -> None:
    seq, dev, counts = _frames(1)
    line = bytearray(encode_frames(seq, dev, counts))
    line[10] ^= 0x01  # '0'..'9' and 'A'..'F' stay hex digits under this flip in most places
    d = Decoder()
    assert _collect(d.feed(bytes(line)))[0] == []
    assert d.counters.rejected == 1 and _balanced(d)


@settings(max_examples=200, deadline=None)
@given(data=st.binary(max_size=2000), cuts=st.lists(st.integers(0, 2000), max_size=10))
def test_random_bytes_never_raise_and_counts_balance(data: bytes, cuts: list[int]) -> None:
    d = Decoder()
    bounds = [0, *sorted(cuts), len(data)]
    for a, b in itertools.pairwise(bounds):
        d.feed(data[a:b])
    assert _balanced(d)


@st.composite
def damaged_stream(draw: st.DrawFn) -> tuple[bytes, set[tuple[int, ...]], list[int]]:
    channels = draw(st.integers(1, 8))
    n = draw(st.integers(1, 60))
    seq, dev, counts = _frames(n, channels, seed=draw(st.integers(0, 1000)))
    stream = bytearray(encode_line(HEADER.body()) + encode_frames(seq, dev, counts))
    # At most three flipped bits: CRC-16/CCITT detects every 1-3 bit error at these lengths
    # (Hamming distance 4 up to 32751 bits; common practice, no source).
    for _ in range(draw(st.integers(0, 3))):
        pos = draw(st.integers(0, len(stream) - 1))
        stream[pos] ^= 1 << draw(st.integers(0, 7))
    for _ in range(draw(st.integers(0, 3))):
        if stream:
            del stream[draw(st.integers(0, len(stream) - 1))]
    if draw(st.booleans()):
        stream = stream[: draw(st.integers(0, len(stream)))]
    cuts = draw(st.lists(st.integers(0, len(stream)), max_size=8))
    originals = {(s, t, *c) for s, t, c in zip(seq.tolist(), dev.tolist(), counts.tolist(), strict=True)}
    return bytes(stream), originals, cuts


@settings(max_examples=300, deadline=None)
@given(damaged_stream())
def test_damaged_streams_never_yield_a_corrupt_frame(case: tuple[bytes, set, list[int]]) -> None:
    stream, originals, cuts = case
    d = Decoder()
    bounds = [0, *sorted(cuts), len(stream)]
    items = []
    for a, b in itertools.pairwise(bounds):
        items += d.feed(stream[a:b])
    rows, _ = _collect(items)
    assert set(rows) <= originals
    assert _balanced(d)
    whole = Decoder()
    assert _collect(whole.feed(stream))[0] == rows  # the same whatever the read sizes
    assert whole.counters == d.counters


def test_decoding_is_the_same_for_any_read_size() -> None:
    seq, dev, counts = _frames(2000)
    stream = encode_line(HEADER.body()) + encode_frames(seq, dev, counts)
    reference = _collect(Decoder().feed(stream))
    for size in (1, 7, 31, 64, 4096):
        d = Decoder()
        items = []
        for i in range(0, len(stream), size):
            items += d.feed(stream[i : i + size])
        assert _collect(items) == reference


def test_device_header_round_trip_and_limits() -> None:
    assert DeviceHeader.parse(HEADER.body()) == HEADER
    with pytest.raises(ValueError, match="channels"):
        DeviceHeader.parse("H fw=a ver=1 bits=12 vref_mv=3300 rate_hz=10 ch=" + ",".join("abcdefghi"))


def test_line_limit_counts_cr_and_lf_wherever_the_read_splits() -> None:
    body = "A note " + "x" * (MAX_LINE - 13)
    line = encode_line(body).replace(b"\n", b"\r\n")  # MAX_LINE + 1 bytes with the CR
    assert len(line) == MAX_LINE + 1
    for cut in range(len(line) + 1):
        d = Decoder()
        assert d.feed(line[:cut]) + d.feed(line[cut:]) == []
        assert d.counters.overlong == 1 and _balanced(d)


@pytest.mark.parametrize(
    "body",
    [
        "H fw=a ver=1 bits=12 vref_mv=3300 rate_hz=inf ch=v",
        "H fw=a ver=1 bits=12 vref_mv=3300 rate_hz=10 ch=v,v",
        "H fw=a ver=1 bits=12 bits=10 vref_mv=3300 rate_hz=10 ch=v",
        "Hfw=a ver=1 bits=12 vref_mv=3300 rate_hz=10 ch=v",
    ],
)
def test_bad_headers_are_refused(body: str) -> None:
    with pytest.raises(ValueError):
        DeviceHeader.parse(body)


@pytest.mark.parametrize("split", [False, True])
def test_an_overlong_header_is_refused_with_its_reason(split: bool) -> None:
    """A header naming 100 channels is longer than a line may be (the protocol's MAX_LINE): dropped and counted
    as any overlong line (its CRC is never looked at), and the refusal says why, whether it came whole or in
    pieces (held as a tail)."""
    names = ",".join(f"c{i}" for i in range(100))
    line = f"H fw=a ver=1 bits=12 vref_mv=3300 rate_hz=1000 ch={names} why=boot*0000\n".encode()
    d = Decoder()
    d.feed(b"\n")
    items = d.feed(line[:200]) + d.feed(line[200:]) if split else d.feed(line)
    assert items == [] and d.counters.overlong == 1 and _balanced(d)
    assert d.refused is not None and f"longer than {MAX_LINE - 1} characters" in d.refused


def test_fragment_after_joining_midstream_is_not_an_error() -> None:
    seq, dev, counts = _frames(3)
    stream = encode_frames(seq, dev, counts)
    d = Decoder()
    d.joined_midstream()
    rows, _ = _collect(d.feed(stream[7:]))
    assert len(rows) == 2 and d.counters.partial == 1 and d.counters.rejected == 0 and _balanced(d)
    d.joined_midstream()
    rows, _ = _collect(d.feed(stream))  # joined exactly at a line start: nothing is lost
    assert len(rows) == 3 and d.counters.partial == 1
    d.feed(b"junk\n")
    assert d.counters.rejected == 1  # only the first line after joining is given the benefit of the doubt
