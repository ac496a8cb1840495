"""The reference firmware in firmware_notes/firmware, proven against railtap's own side of the protocol.

Three kinds of proof:
- its portable C (CRC, line encoders, command replies, synthetic waveform), built with the host's gcc into a
  small harness, agrees line for line with ``logger.wire`` on shared test vectors;
- the whole firmware, built with avr-gcc, runs in qemu-system-avr (an emulated ATmega328P board) behind a
  pseudo-terminal, and railtap records it through pyserial: every sample set arrives, with the values of the
  synthetic waveform, no rejected line and no gap, and the host's commands are answered;
- the board build, whose ADC code the emulator cannot run, runs in simavr (a cycle-counting simulator) with
  known millivolts on its ADC pins, and railtap finds a known dip profile in what it sent.

The emulator ignores baud rates and runs at whatever speed the host gives it, so nothing here checks wall-clock
timing: only the content of what was sent, including the device clock inside the lines. Waits have generous
deadlines that only stop a hung run.
"""

from __future__ import annotations

import contextlib
import json
import shutil
import socket
import subprocess
import tempfile
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from logger.ingest import Pipeline, Settings
from logger.rig import parse_rig
from logger.sources.replay import ReplaySource
from logger.sources.serial_port import SerialSource
from logger.wire import Answer, Decoder, DeviceHeader, FrameBatch, crc16, encode_frames, encode_line

ROOT = Path(__file__).resolve().parents[1]
FIRMWARE = ROOT / "firmware_notes" / "firmware"
BUILD_TIMEOUT_S = 120
DEADLINE_S = 60.0
"""Longest wait for anything the emulated device should do; reached only when something hangs."""


# -- tools -----------------------------------------------------------------------------------------


def _need(tool: str, package: str) -> None:
    if shutil.which(tool) is None:
        pytest.skip(f"{tool} not found: install the Debian package {package} (apt-get install {package})")


def _make(build: Path, *targets: str, **settings: str) -> None:
    """Build firmware targets into ``build`` (never into the source folder); skip when a tool is missing."""
    _need("make", "make")
    args = ["make", "-s", "-C", str(FIRMWARE), f"BUILD={build}", *targets]
    args += [f"{key}={value}" for key, value in settings.items()]
    done = subprocess.run(args, capture_output=True, text=True, timeout=BUILD_TIMEOUT_S)
    if done.returncode and "avr/io.h" in done.stderr:
        pytest.skip("avr-libc headers not found: install the Debian package avr-libc (apt-get install avr-libc)")
    if done.returncode and "stdio.h" in done.stderr:
        pytest.skip("C library headers not found: install the Debian package libc6-dev (apt-get install libc6-dev)")
    assert done.returncode == 0, f"make {' '.join(targets)} failed:\n{done.stdout}{done.stderr}"


@pytest.fixture(scope="module")
def harness(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The firmware's portable C built with the host compiler (firmware_notes/firmware/test/harness.c)."""
    _need("gcc", "gcc")
    build = tmp_path_factory.mktemp("fw-host")
    _make(build, "harness")
    return build / "harness"


@pytest.fixture(scope="module")
def avr_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Both firmware builds, for the board and for the emulator, in a temporary folder."""
    _need("avr-gcc", "gcc-avr")
    _need("avr-objcopy", "binutils-avr")
    build = tmp_path_factory.mktemp("fw-avr")
    _make(build, "all")
    return build


def _ask(harness: Path, requests: list[str]) -> list[bytes]:
    """Run the harness on requests, one per line; its output lines, each with its newline."""
    done = subprocess.run([str(harness)], input="\n".join(requests).encode() + b"\n", capture_output=True,
                          timeout=60, check=True)
    return done.stdout.splitlines(keepends=True)


# -- the synthetic waveform, computed independently of the C ----------------------------------------


def wave_counts(n: np.ndarray) -> np.ndarray:
    """Counts of the emulation build's four channels for sample sets ``n`` (as described in wave.h)."""
    n = np.asarray(n, dtype=np.int64) % (1 << 32)
    phase16 = n % 16
    triangle = np.where(phase16 < 8, phase16, 15 - phase16)
    phase = n % 1024
    rail = np.where((phase >= 512) & (phase < 576), 600, 796 + triangle)
    load = 100 + 150 * ((n >> 8) % 4)
    return np.column_stack((rail, load, phase, 1023 - phase))


# -- the portable C against logger.wire --------------------------------------------------------------


def test_crc_check_value_and_random_bodies(harness: Path) -> None:
    rng = np.random.default_rng(11)
    bodies = ["123456789", "", "D 0100 0012D450 0A3C 01F4"]
    bodies += ["".join(map(chr, rng.integers(32, 127, rng.integers(1, 155)))) for _ in range(300)]
    got = [int(line, 16) for line in _ask(harness, [f"crc {body}" for body in bodies])]
    # CRC-16/IBM-3740 check value: CRC of the ASCII bytes "123456789" is 0x29B1 (RevEng CRC catalogue,
    # entry CRC-16/IBM-3740, field "check").
    assert got[0] == 0x29B1
    assert got[1] == 0xFFFF  # an empty body leaves the initial value (init=0xFFFF, xorout=0: same entry)
    assert got == [crc16(body.encode("ascii")) for body in bodies]


def _data_vectors() -> list[tuple[int, int, list[int]]]:
    """Sequence, clock and counts: the worked examples of PROTOCOL.md 6.2, the extremes, then random ones."""
    vectors = [(0x0100, 0x0012D450, [0x0A3C, 0x01F4]), (0x0101, 0x0012D838, [0x0A3B, 0x01F6]),
               (0x0102, 0x0012DC20, [0x0A3D, 0x01F3])]
    for channels in range(1, 9):
        vectors += [(0, 0, [0] * channels), (0xFFFF, 0xFFFFFFFF, [0xFFFF] * channels)]
    rng = np.random.default_rng(5)
    for _ in range(400):
        channels = int(rng.integers(1, 9))
        vectors.append((int(rng.integers(0, 1 << 16)), int(rng.integers(0, 1 << 32)),
                        [int(c) for c in rng.integers(0, 1 << 16, channels)]))
    return vectors


def test_data_lines_equal_the_python_encoder_and_decode_cleanly(harness: Path) -> None:
    vectors = _data_vectors()
    lines = _ask(harness, [f"data {s:X} {t:X} {' '.join(f'{c:X}' for c in counts)}" for s, t, counts in vectors])
    assert len(lines) == len(vectors)
    for (seq, t_us, counts), line in zip(vectors, lines, strict=True):
        assert line == encode_frames(np.array([seq]), np.array([t_us]), np.array([counts]))
    assert lines[0] == b"D 0100 0012D450 0A3C 01F4*B3B3\n"  # PROTOCOL.md 6.3, byte for byte

    decoder = Decoder()
    stream = b"".join(lines)
    items = [item for start in range(0, len(stream), 37) for item in decoder.feed(stream[start : start + 37])]
    frames = [row for batch in items if isinstance(batch, FrameBatch) for row in
              zip(batch.seq.tolist(), batch.device_us.tolist(), batch.counts.tolist(), strict=True)]
    assert frames == [(s, t, c) for s, t, c in vectors]
    assert decoder.counters.rejected == 0 and decoder.counters.frames == len(vectors)


def _headers() -> list[DeviceHeader]:
    return [
        DeviceHeader("railtap-fw", "0.3", 12, 3300, 1000, ("out_v", "out_a"), "boot"),  # PROTOCOL.md 6.1
        DeviceHeader("railtap-ref", "0.1", 10, 5000, 1000, ("a0", "a1", "a2", "a3"), "ask", (("adc", "avr"),)),
        DeviceHeader("railtap-ref", "0.1", 10, 1100, 2, ("a0",), "rate", (("adc", "synthetic"),)),
        DeviceHeader("x", "9", 16, 65535, 65535, tuple(f"ch{k}" for k in range(8)), "tick",
                     (("serial", "A1B2"), ("board", "r3"))),
    ]


def test_header_and_answer_lines_equal_the_python_encoder(harness: Path) -> None:
    headers = _headers()
    requests = []
    for h in headers:
        extra = " ".join(f"{k}={v}" for k, v in h.extra)
        requests.append(f"header {h.firmware} {h.version} {h.adc_bits} {h.vref_mv} {h.rate_hz:g} "
                        f"{','.join(h.channels)} {h.reason} {extra}".rstrip())
    answers = [("pong", "r42x"), ("rate", "2000"), ("err", "rate"), ("err", "cmd"), ("err", "crc"), ("word", "")]
    requests += [f"answer {word} {text}".rstrip() for word, text in answers]
    too_long = "header f v 10 5000 1000 " + ",".join(["channel_x"] * 15) + " ask"
    lines = _ask(harness, [*requests, too_long])

    assert lines[: len(headers)] == [encode_line(h.body()) for h in headers]
    assert lines[0] == b"H fw=railtap-fw ver=0.3 bits=12 vref_mv=3300 rate_hz=1000 ch=out_v,out_a why=boot*BEFC\n"
    assert lines[len(headers) : -1] == [encode_line(f"A {w} {t}".rstrip()) for w, t in answers]
    assert lines[len(headers) + 0] == b"A pong r42x*BA50\n"  # PROTOCOL.md 6.4
    # The firmware refuses a line over the 160-byte limit, as the Python encoder does.
    assert lines[-1] == b"too long\n"
    with pytest.raises(ValueError, match="160-byte limit"):
        encode_line("H fw=f ver=v bits=10 vref_mv=5000 rate_hz=1000 ch=" + ",".join(["channel_x"] * 15) + " why=ask")

    items = Decoder().feed(b"".join(lines[:-1]))
    assert [i for i in items if isinstance(i, DeviceHeader)] == headers
    assert [(a.word, a.text) for a in items if isinstance(a, Answer)] == answers


def _with_crc(body: bytes) -> bytes:
    return body + b"*%04X" % crc16(body)


# Command lines as the host sends them (without "\n", added below) and the replies of PROTOCOL.md section 5; the
# first six are its worked examples 6.4 to 6.7, CRCs included.
COMMANDS: list[tuple[bytes, list[bytes]]] = [
    (b"?P r42x*709A", [b"A pong r42x*BA50\n"]),
    (b"?H*C168", [b"header ask\n"]),
    (b"!R 2000*E3DB", [b"A rate 2000*B0A1\n", b"header rate\n"]),
    (b"!R 50000*47CA", [b"A err rate*47AE\n"]),
    (b"?X*D359", [b"A err cmd*2EA5\n"]),
    (b"?H*0000", [b"A err crc*4D0F\n"]),
    (b"?H*c168", [b"header ask\n"]),  # lower-case CRC digits are accepted (section 1)
    (b"?H*C168\r", [b"header ask\n"]),  # a "\r" before the "\n" is dropped (section 1)
    (b"", [b"none\n"]),  # an empty line gets nothing (section 5)
    (b"?H", [encode_line("A err crc")]),  # no *CCCC
    (_with_crc(b"?P 12345678"), [encode_line("A pong 12345678")]),
    (_with_crc(b"?P 123456789"), [encode_line("A err cmd")]),  # token of 9 characters
    (_with_crc(b"?P r4-2"), [encode_line("A err cmd")]),  # a character outside 0-9A-Za-z
    (_with_crc(b"?P "), [encode_line("A err cmd")]),
    (_with_crc(b"?h"), [encode_line("A err cmd")]),  # case-sensitive
    (_with_crc(b"?H x"), [encode_line("A err cmd")]),
    (_with_crc(b"!R 1"), [encode_line("A rate 1"), b"header rate\n"]),
    (_with_crc(b"!R 0"), [encode_line("A err rate")]),
    (_with_crc(b"!R 2001"), [encode_line("A err rate")]),  # above the harness's limit of 2000
    (_with_crc(b"!R 99999999999"), [encode_line("A err rate")]),  # must not wrap round into range
    (_with_crc(b"!R 1e3"), [encode_line("A err rate")]),
    (_with_crc(b"!R "), [encode_line("A err rate")]),
    (_with_crc(b"!R"), [encode_line("A err cmd")]),
    (b"?P " + b"x" * 30, [encode_line("A err cmd")]),  # longer than the 24-byte buffer: discarded
]


def test_command_replies_follow_the_protocol(harness: Path) -> None:
    requests = ["command 2000 " + (line + b"\n").hex() for line, _ in COMMANDS]
    got = _ask(harness, requests)
    expected = [reply for _, replies in COMMANDS for reply in replies]
    assert got == expected


def test_commands_split_and_joined_like_a_serial_stream(harness: Path) -> None:
    """Several commands in one stream, with a long line between them: each is answered in turn, and the
    overlong line only costs its own "A err cmd"."""
    stream = b"\n" + _with_crc(b"?P one") + b"\n" + b"#" * 100 + b"\n" + _with_crc(b"?P two") + b"\r\n"
    assert _ask(harness, [f"command 2000 {stream.hex()}"]) == [
        encode_line("A pong one"), encode_line("A err cmd"), encode_line("A pong two")]


def test_waveform_matches_its_description(harness: Path) -> None:
    starts = [(0, 4096), (0xFFFF_FF00, 0x200)]  # the start, and across the 32-bit wrap of the set counter
    lines = _ask(harness, [f"wave {n:X} {count:X}" for n, count in starts])
    got = np.array([[int(v) for v in line.split()] for line in lines])
    n = np.concatenate([np.arange(start, start + count) for start, count in starts])
    np.testing.assert_array_equal(got, wave_counts(n))


def test_firmware_builds_clean_for_every_setting(tmp_path: Path) -> None:
    """-Wall -Wextra -Werror -pedantic for 1 to 4 channels and both references, and it fits the part."""
    _need("avr-gcc", "gcc-avr")
    _need("avr-size", "binutils-avr")
    for channels in (1, 2, 3, 4):
        build = tmp_path / f"ch{channels}"
        _make(build, "all", CHANNELS=str(channels), REF_INTERNAL=str(channels % 2))
        for elf in ("railtap.elf", "railtap-emu.elf"):
            out = subprocess.run(["avr-size", str(build / elf)], capture_output=True, text=True, check=True).stdout
            text, data, bss = (int(v) for v in out.splitlines()[1].split()[:3])
            # ATmega328P: 32 KiB of flash, less 512 bytes for the Uno's serial bootloader, and 2 KiB of RAM
            # (ATmega328P datasheet, memories; the bootloader size is common practice, no source). Keep half of
            # the RAM free for the stack.
            assert text + data <= 32 * 1024 - 512
            assert data + bss <= 1024


# -- the whole firmware in the emulator ---------------------------------------------------------------


class Qmp:
    """Just enough of QEMU's machine protocol (JSON lines over a Unix socket) to find the pty and start."""

    def __init__(self, path: Path, alive: Callable[[], bool]) -> None:
        deadline = time.monotonic() + DEADLINE_S
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        while True:
            try:
                self.sock.connect(str(path))
                break
            except (FileNotFoundError, ConnectionRefusedError):
                assert alive(), "qemu-system-avr exited before opening its QMP socket"
                assert time.monotonic() < deadline, "qemu-system-avr never opened its QMP socket"
                time.sleep(0.02)
        self.sock.settimeout(DEADLINE_S)
        self.stream = self.sock.makefile("rwb")
        assert "QMP" in self._read()
        self.execute("qmp_capabilities")

    def _read(self) -> dict[str, Any]:
        line = self.stream.readline()
        assert line, "qemu-system-avr closed its QMP socket"
        return json.loads(line)

    def execute(self, command: str, **arguments: Any) -> Any:
        request = {"execute": command, **({"arguments": arguments} if arguments else {})}
        self.stream.write(json.dumps(request).encode() + b"\n")
        self.stream.flush()
        while True:
            reply = self._read()  # asynchronous events may come first; they carry neither key
            if "error" in reply:
                raise AssertionError(f"QMP {command}: {reply['error']}")
            if "return" in reply:
                return reply["return"]

    def close(self) -> None:
        with contextlib.suppress(OSError):
            self.stream.close()
            self.sock.close()


@dataclass
class Emulator:
    pty: str
    qmp: Qmp

    def cont(self) -> None:
        """Let the paused CPU run (the port must be open first, or the start of its output is lost)."""
        self.qmp.execute("cont")


@pytest.fixture
def emulator(avr_build: Path) -> Iterator[Emulator]:
    """The emulation build in qemu-system-avr on an emulated Uno, paused, its UART on a pty; always stopped."""
    _need("qemu-system-avr", "qemu-system-misc")
    folder = Path(tempfile.mkdtemp(prefix="railtap-qemu-"))  # short: a Unix socket path has a small limit
    log = open(folder / "qemu.log", "wb")  # noqa: SIM115 - closed in the finally below
    proc = subprocess.Popen(
        ["qemu-system-avr", "-machine", "uno", "-bios", str(avr_build / "railtap-emu.elf"), "-display", "none",
         "-monitor", "none", "-serial", "pty", "-qmp", f"unix:{folder / 'qmp.sock'},server=on,wait=off", "-S"],
        stdin=subprocess.DEVNULL, stdout=log, stderr=subprocess.STDOUT)
    qmp = None
    try:
        qmp = Qmp(folder / "qmp.sock", alive=lambda: proc.poll() is None)
        ptys = [c["filename"].removeprefix("pty:") for c in qmp.execute("query-chardev")
                if c["label"] == "serial0" and c["filename"].startswith("pty:")]
        assert ptys, "qemu-system-avr reported no pty for serial0"
        yield Emulator(ptys[0], qmp)
    finally:
        if qmp is not None:
            qmp.close()
        if proc.poll() is None:
            proc.terminate()
            try:
                proc.wait(10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(10)
        log.close()
        shutil.rmtree(folder, ignore_errors=True)


EMULATED_RIG = """\
# The emulation build's four synthetic channels, read as an invented rig: an 82 V rail through a 21:1
# divider (200 k over 10 k), a load current through a 50 mOhm shunt and a gain of 20, and two test ramps.
name = "emulated-tap"

[device]
baud = 1000000

[[channel]]
name = "rail_v"
role = "volts"
input = 0
divider = 21.0
nominal = 82.03125               # 800 counts x 5 V / 1024 x 21

[[channel]]
name = "load_a"
role = "amps"
input = 1
shunt_ohm = 0.05
gain = 20.0

[[channel]]
name = "ramp_up"
role = "aux"
input = 2

[[channel]]
name = "ramp_down"
role = "aux"
input = 3
"""
CHANNELS = ("rail_v", "load_a", "ramp_up", "ramp_down")


def _wait_for(ready: Callable[[], bool], what: str) -> None:
    deadline = time.monotonic() + DEADLINE_S
    while not ready():
        assert time.monotonic() < deadline, f"the emulated device never {what}"
        time.sleep(0.02)


def _answered(pipeline: Pipeline, word: str, text: str) -> Callable[[], bool]:
    return lambda: Answer(word, text) in list(pipeline.answers)


def _replayed(run: Path) -> list[Any]:
    """Every line the run received, decoded again from its raw capture, in order."""
    source = ReplaySource(run / "_raw.arrows")
    source.open()
    decoder, items = Decoder(), []
    try:
        while (chunk := source.read()) is not None:
            items += decoder.feed(chunk.data)
    finally:
        source.close()
    assert decoder.counters.rejected == 0
    return items


def test_firmware_in_the_emulator_is_recorded_whole(emulator: Emulator, tmp_path: Path) -> None:
    rig = parse_rig(EMULATED_RIG, "emulated tap")
    pipeline = Pipeline(SerialSource(emulator.pty, 1_000_000), rig,
                        Settings(record_root=tmp_path, label="emulated", keep_raw=True))
    pipeline.start()  # opens the pty and asks for a header (?H) before the CPU runs
    try:
        emulator.cont()
        frames = lambda: pipeline.decoder.counters.frames  # noqa: E731
        _wait_for(lambda: frames() >= 1100, "sent 1100 sample sets")
        pipeline.send("?P tap7")
        _wait_for(_answered(pipeline, "pong", "tap7"), "answered ?P tap7")
        pipeline.source.write(b"?H*0000\n")  # a wrong CRC
        _wait_for(_answered(pipeline, "err", "crc"), "answered a bad CRC")
        pipeline.send("!R 50000")
        _wait_for(_answered(pipeline, "err", "rate"), "refused 50000 Hz")
        pipeline.source.write(encode_line("!R 500"))
        _wait_for(_answered(pipeline, "rate", "500"), "accepted 500 Hz")
        at_new_rate = frames()  # commands go through the ingest thread's queue: count from the answer
        _wait_for(lambda: frames() >= at_new_rate + 1100, "sent 1100 sample sets at the new rate")
    finally:
        final = pipeline.stop()

    assert pipeline.error is None and final is not None and final["status"] == "complete"
    counters = pipeline.decoder.counters
    assert counters.rejected == counters.bad_crc == counters.partial == 0
    assert pipeline.timebase.counters.lost == 0 and pipeline.timebase.counters.resets == 0
    header = pipeline.header
    assert header is not None and header.firmware == "railtap-ref" and header.rate_hz == 500
    assert (header.adc_bits, header.vref_mv, header.channels) == (10, 5000, ("a0", "a1", "a2", "a3"))
    assert dict(header.extra) == {"adc": "synthetic"}

    run = Path(final["folder"])
    df = pd.read_parquet(run)
    # Every sample set from the first after start-up, in order, with exactly the synthetic waveform's counts.
    np.testing.assert_array_equal(df["seq"], np.arange(len(df)))
    assert len(df) == counters.frames
    counts = df[[f"{name}_counts" for name in CHANNELS]].to_numpy()
    np.testing.assert_array_equal(counts, wave_counts(df["seq"].to_numpy()))
    # Counts to volts: one count is Vref / 1024 at 10 bits (ATmega328P data sheet, ADC conversion result:
    # ADC = Vin x 1024 / Vref; value from memory), times the divider.
    np.testing.assert_allclose(df["rail_v"], counts[:, 0] * 5.0 / 1024 * 21.0, rtol=1e-6)

    _check_lines_in_order(_replayed(run), df)
    _check_brownouts(run, df)


def _check_lines_in_order(items: list[Any], df: pd.DataFrame) -> None:
    """The boot header comes first; ?H gets a why=ask header; "A rate 500" is followed at once by the
    why=rate header, with old-rate lines (1000 us apart on the device clock) before and new-rate lines
    (2000 us apart) after."""
    first = items[0]
    assert isinstance(first, DeviceHeader) and first.reason == "boot" and first.rate_hz == 1000
    headers = [i for i in items if isinstance(i, DeviceHeader)]
    assert "ask" in {h.reason for h in headers}
    rate_at = items.index(Answer("rate", "500"))
    after = items[rate_at + 1]
    assert isinstance(after, DeviceHeader) and after.reason == "rate" and after.rate_hz == 500
    before = sum(len(i) for i in items[:rate_at] if isinstance(i, FrameBatch))
    steps = np.diff(df["device_us"].to_numpy())
    assert (steps[: before - 1] == 1000).all()
    assert (steps[before - 1 :] == 2000).all()
    assert len(steps[before - 1 :]) > 1000


def _check_brownouts(run: Path, df: pd.DataFrame) -> None:
    """The waveform's rail dips to 75 % for 64 sample sets in every 1024; railtap finds each complete one as a
    brownout 25 % deep lasting 64 sample periods on the device clock."""
    rail = df["rail_v_counts"].to_numpy()
    low = np.flatnonzero(np.diff((rail == 600).astype(np.int8)) == 1) + 1  # first low sample of each dip
    complete = [i for i in low if i + 64 < len(df)]
    assert len(complete) >= 2
    events = pd.read_parquet(run / "_events.parquet")
    dips = events[events["kind"] == "brownout"].sort_values("start")
    device_us = df["device_us"].to_numpy()
    if len(dips) == len(complete) + 1:  # the run stopped inside a dip: it is closed at the last sample
        assert low[-1] + 64 >= len(df) and "still below when the run ended" in dips["detail"].iloc[-1]
        dips = dips.iloc[:-1]
    assert len(dips) == len(complete)
    for (_, event), start in zip(dips.iterrows(), complete, strict=True):
        period_us = device_us[start + 1] - device_us[start]
        assert event["channel"] == "rail_v"
        assert event["depth_pct"] == pytest.approx(25.0, abs=0.01)
        # On the device clock: from the first low sample to the first one back, 64 sample sets later (a dip that
        # the rate change falls inside has periods of both rates; a loaded machine makes that happen).
        assert event["duration_s"] == pytest.approx((device_us[start + 64] - device_us[start]) / 1e6,
                                                    abs=period_us / 1e6)



# -- the board build's ADC path in simavr -------------------------------------------------------------


@pytest.fixture(scope="module")
def simavr_tap(avr_build: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """firmware_notes/firmware/test/simavr_tap.c, linked with simavr's library."""
    _need("gcc", "gcc")
    if not Path("/usr/include/simavr/sim_avr.h").exists():
        pytest.skip("simavr headers not found: install the Debian package libsimavr-dev "
                    "(apt-get install libsimavr-dev)")
    build = tmp_path_factory.mktemp("fw-simavr")
    _make(build, "simavr-tap")
    return build / "simavr_tap"


RAIL_MV = 3900
"""A0's level outside the dips: 81.9 V on the rail through the 21:1 divider."""
DIPS = ((500, 64, 2700), (1200, 200, 3400))
"""(start ms, length ms, level mV) on A0: a dip to 69 % of the rail for 64 ms, and one to 87 % for 200 ms."""
SIMAVR_RIG = EMULATED_RIG.replace('name = "emulated-tap"', 'name = "simavr-tap"').replace(
    "nominal = 82.03125               # 800 counts x 5 V / 1024 x 21", "nominal = 81.9")


def test_board_build_in_simavr_reports_a_known_dip_profile(avr_build: Path, simavr_tap: Path,
                                                          tmp_path: Path) -> None:
    """Known millivolts on the ADC pins, through the firmware's own TIMER1 and ADC code, to railtap's events."""
    capture = tmp_path / "uart.bin"
    args = [str(simavr_tap), str(avr_build / "railtap.elf"), "2.0", str(RAIL_MV)]
    args += [str(v) for dip in DIPS for v in dip]
    with capture.open("wb") as out:
        subprocess.run(args, stdout=out, stderr=subprocess.PIPE, timeout=120, check=True)
    pipeline = Pipeline(ReplaySource(capture), parse_rig(SIMAVR_RIG, "simavr tap"), Settings(record_root=tmp_path))
    pipeline.start()
    assert pipeline.wait(60) and pipeline.error is None
    header, counters = pipeline.header, pipeline.decoder.counters
    assert header is not None and dict(header.extra) == {"adc": "avr"} and header.reason == "boot"
    assert counters.rejected == 0 and pipeline.timebase.counters.lost == 0 and counters.frames >= 1990

    df = pd.read_parquet(Path(pipeline.final["folder"]))
    # Counts for a pin voltage: Vin x 1024 / Vref, truncated (ATmega328P data sheet, ADC conversion result;
    # value from memory); simavr scales by 1023 instead, which can make it one count less.
    def counts(mv: int) -> set[int]:
        exact = mv * 1024 // 5000
        return {exact, exact - 1}

    for name, mv in (("load_a", 1000), ("ramp_up", 2500), ("ramp_down", 4000)):
        assert set(df[f"{name}_counts"]) <= counts(mv), name
    assert set(df["rail_v_counts"]) <= counts(RAIL_MV) | counts(2700) | counts(3400)

    events = pd.read_parquet(Path(pipeline.final["folder"]) / "_events.parquet")
    dips = events[events["kind"] == "brownout"].sort_values("start")
    assert len(dips) == len(DIPS)
    offset_us = int(df["utc"].astype("int64").iloc[0]) - int(df["device_us"].iloc[0])  # utc = device clock here
    for (_, event), (start_ms, length_ms, level_mv) in zip(dips.iterrows(), DIPS, strict=True):
        assert event["channel"] == "rail_v"
        # Depth in % of nominal (IEC 61000-4-30 "depth", as logger.events.rules uses it), within two LSB of 800.
        assert event["depth_pct"] == pytest.approx(100 * (RAIL_MV - level_mv) / RAIL_MV, abs=0.3)
        assert event["duration_s"] == pytest.approx(length_ms / 1000, abs=0.0015)  # within one 1 ms period
        start_us = int(pd.Timestamp(event["start"]).value // 1000) - offset_us
        assert start_us / 1e6 == pytest.approx(start_ms / 1000, abs=0.0015)
