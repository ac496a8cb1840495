"""Keeps firmware_notes/PROTOCOL.md true to the code: every example line, CRC and number in it is re-checked.

Conventions of the document that this test relies on:
- example lines live in fenced code blocks, one wire line per line, without the newline;
- in exchanges a line may carry a direction prefix, ``host `` or ``dev  ``, which is not on the wire;
- blocks tagged ``corrupted`` hold lines that are wrong on purpose: their CRC must *not* match.
"""

from __future__ import annotations

import binascii
import re
from pathlib import Path

import pytest

from logger.wire import MAX_CHANNELS, MAX_LINE, Answer, Decoder, DeviceHeader, data_line_length

DOC = Path(__file__).resolve().parents[1] / "firmware_notes" / "PROTOCOL.md"
WIRE_LINE = re.compile(r"^[DHA?!].*\*[0-9A-F]{4}$")
PREFIX = re.compile(r"^(?:host|dev) +")
ENDS_IN_CRC = re.compile(r"\*[0-9A-Fa-f]{4}$")
STANDARD_BAUDS = (115200, 230400, 460800, 921600, 1000000, 2000000)
RATES_HZ = (100, 500, 1000, 2000)


def _blocks(text: str) -> list[tuple[str, list[str]]]:
    """Fenced code blocks as (info string, lines)."""
    blocks: list[tuple[str, list[str]]] = []
    info: str | None = None
    lines: list[str] = []
    for line in text.splitlines():
        if line.startswith("```"):
            if info is None:
                info, lines = line[3:].strip(), []
            else:
                blocks.append((info, lines))
                info = None
        elif info is not None:
            lines.append(line)
    assert info is None, "unclosed code block"
    return blocks


def _examples(corrupted: bool) -> list[str]:
    found = []
    for info, lines in _blocks(DOC.read_text(encoding="utf-8")):
        if info == "c" or (info == "corrupted") != corrupted:
            continue
        for line in lines:
            line = PREFIX.sub("", line)
            if WIRE_LINE.match(line):
                found.append(line)
            else:
                assert not ENDS_IN_CRC.search(line), f"example line not in the expected form: {line!r}"
    return found


def _crc_ok(line: str) -> bool:
    body, _, sent = line.rpartition("*")
    return binascii.crc_hqx(body.encode("ascii"), 0xFFFF) == int(sent, 16)


def _section(title_start: str) -> str:
    text = DOC.read_text(encoding="utf-8")
    start = text.index(f"\n## {title_start}")
    end = text.find("\n## ", start + 1)
    return text[start : end if end > 0 else None]


GOOD = _examples(corrupted=False)
BAD = _examples(corrupted=True)


def test_document_has_plenty_of_examples() -> None:
    assert len(GOOD) >= 40
    assert {line[0] for line in GOOD} == set("DHA?!")
    assert len(BAD) >= 2


@pytest.mark.parametrize("line", GOOD)
def test_example_crc_matches(line: str) -> None:
    assert _crc_ok(line), f"stale CRC in PROTOCOL.md: {line}"
    assert len(line) + 1 <= MAX_LINE


@pytest.mark.parametrize("line", BAD)
def test_corrupted_example_really_is_corrupted(line: str) -> None:
    assert not _crc_ok(line)
    body = line.rpartition("*")[0].encode("ascii")
    right = f"`{binascii.crc_hqx(body, 0xFFFF):04X}`"
    assert right in DOC.read_text(encoding="utf-8"), f"the text should name the right CRC, {right}"


def test_device_examples_decode_cleanly() -> None:
    device_lines = [line for line in GOOD if line[0] in "DHA"]
    decoder = Decoder()
    items = decoder.feed("".join(f"{line}\n" for line in device_lines).encode("ascii"))
    c = decoder.counters
    assert c.rejected == 0
    assert c.frames == sum(line[0] == "D" for line in device_lines)
    assert c.headers == sum(line[0] == "H" for line in device_lines)
    assert c.answers == sum(line[0] == "A" for line in device_lines)
    assert any(isinstance(item, DeviceHeader) for item in items)
    assert {item.word for item in items if isinstance(item, Answer)} == {"pong", "rate", "err"}


def test_data_examples_have_the_documented_length() -> None:
    for line in GOOD:
        if line[0] == "D":
            channels = (len(line) - 20) // 5
            assert 1 <= channels <= MAX_CHANNELS
            assert len(line) == data_line_length(channels) == 20 + 5 * channels


def test_corrupted_device_examples_are_counted_as_bad_crc() -> None:
    device_lines = [line for line in BAD if line[0] in "DHA"]
    decoder = Decoder()
    assert decoder.feed("".join(f"{line}\n" for line in device_lines).encode("ascii")) == []
    assert decoder.counters.bad_crc == len(device_lines) > 0


def test_crc_facts() -> None:
    text = DOC.read_text(encoding="utf-8")
    assert binascii.crc_hqx(b"123456789", 0xFFFF) == 0x29B1
    assert "0x29B1** (RevEng CRC catalogue, CRC-16/IBM-3740)" in text
    assert f"`MAX_LINE` = {MAX_LINE} bytes" in text
    assert f"`MAX_CHANNELS` = {MAX_CHANNELS}" in text


def test_baud_tables() -> None:
    rows = re.findall(r"^\| (\d) \| (\d+) \| (\d+) \| (\d+) \| (\d+) \| (\d+) \|$", _section("8."), re.M)
    assert len(rows) == 8, "two tables of four rows expected"
    minimum, standard = rows[:4], rows[4:]
    for table in (minimum, standard):
        assert [int(row[0]) for row in table] == [1, 2, 4, 8]
    for (channels, size, *cells), (_, size2, *picks) in zip(minimum, standard, strict=True):
        line_bytes = data_line_length(int(channels)) + 1
        assert int(size) == int(size2) == line_bytes
        for rate, cell, pick in zip(RATES_HZ, cells, picks, strict=True):
            load = line_bytes * 10 * rate
            assert int(cell) == load
            assert int(pick) == min(b for b in STANDARD_BAUDS if load <= 0.8 * b)
