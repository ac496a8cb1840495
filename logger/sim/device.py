"""The device side of the simulated tap: exactly the bytes a real tap's firmware would send.

:class:`SimDevice` keeps what firmware keeps (a sequence number, a free-running 32-bit microsecond clock
that drifts against true time, the sample rate) and answers host commands. What it measures comes from a
separate physics model (:class:`RigModel`), so a more detailed model can replace the simple one without
touching the protocol side. Link faults (lost lines, corrupted or missing bytes) are applied to the data
lines after encoding, and every one is counted in :class:`LinkTruth` so tests can compare a decoder's
counters with what really happened.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace
from typing import Protocol

import numpy as np

from logger.sim.simple import SimpleRail
from logger.wire import DeviceHeader, crc16, data_line_length, encode_frames, encode_line

CLOCK_MODULUS = 1 << 32
_BLOCK = 1 << 16
"""Most frames encoded at once, to bound memory at high rates or long steps."""
_HEX = np.frombuffer(b"0123456789ABCDEF", dtype=np.uint8)
_HEX_VALUE = np.zeros(256, dtype=np.int64)
_HEX_VALUE[_HEX] = np.arange(16)
_HEX_DIGITS = frozenset(b"0123456789ABCDEFabcdef")
_TOKEN = re.compile(r"[0-9A-Za-z]{1,8}")
COMMAND_BUFFER = 32
"""Receive buffer for one command line, in bytes (the longest command is 17)."""


class RigModel(Protocol):
    """What the device needs from a physics model: its channels, ADC and counts at given true times."""

    channels: tuple[str, ...]
    adc_bits: int
    vref_mv: int

    def counts(self, t_s: np.ndarray) -> np.ndarray:
        """uint16 counts, shape (len(t_s), channels), at true times in seconds (called in time order)."""
        ...


@dataclass(frozen=True)
class LinkFaults:
    """Chance, per data line, of each kind of damage on the link (at most one kind per line)."""

    drop_line: float = 0.0
    """The whole line never arrives."""
    corrupt_byte: float = 0.0
    """One byte (not the newline) arrives changed; the line fails its check."""
    drop_byte: float = 0.0
    """One byte (not the newline) is lost; the line arrives short and fails its check."""


@dataclass
class LinkTruth:
    """Ground truth of what the device produced and what the link did to it."""

    frames: int = 0
    """Data lines produced, whatever happened to them."""
    frames_dropped: int = 0
    frames_corrupted: int = 0
    frames_byte_dropped: int = 0
    frames_unheard: int = 0
    """Produced while no host was connected (see :meth:`SimDevice.drain`)."""
    headers: int = 0
    answers: int = 0
    resets: int = 0
    bytes_out: int = 0

    @property
    def frames_delivered(self) -> int:
        """Data lines that reach the host intact."""
        lost = self.frames_dropped + self.frames_corrupted + self.frames_byte_dropped + self.frames_unheard
        return self.frames - lost

    @property
    def lines_damaged(self) -> int:
        """Lines that reach the host damaged: a decoder must reject exactly these."""
        return self.frames_corrupted + self.frames_byte_dropped


class SimDevice:
    """A simulated tap: sampling, device clock, headers, host commands and link faults.

    Time is simulated: :meth:`generate` advances it and returns every line sent meanwhile. Commands
    written with :meth:`write` are answered at the current simulated time, ahead of later data.

    Args:
        model: the physics behind the counts; the simple 12 V rail when omitted.
        rate_hz: sample rate after boot.
        drift_ppm: how fast the device clock runs against true time (+35: 35 us per second fast).
        clock_start_us: device clock at boot; random when ``None``, as a free-running counter would be.
        seed: seed for the link faults and random clock start (and for the default model).
        faults: link fault rates.
        header_period_s: device seconds between unprompted headers.
        max_rate_hz: highest rate ``!R`` accepts.
    """

    firmware = "railsim"
    version = "1.0"

    def __init__(
        self,
        model: RigModel | None = None,
        *,
        rate_hz: float = 1000.0,
        drift_ppm: float = 35.0,
        clock_start_us: int | None = None,
        seed: int | None = 0,
        faults: LinkFaults | None = None,
        header_period_s: float = 10.0,
        max_rate_hz: int = 2000,
    ) -> None:
        self.model: RigModel = model if model is not None else SimpleRail(seed=seed)
        self.faults = faults or LinkFaults()
        self.truth = LinkTruth()
        self.boot_rate_hz = rate_hz
        self.drift_ppm = drift_ppm
        self.header_period_us = header_period_s * 1e6
        self.max_rate_hz = max_rate_hz
        link_seed, clock_seed = np.random.SeedSequence(seed).spawn(2)
        self._rng_link = np.random.default_rng(link_seed)
        self._rng_clock = np.random.default_rng(clock_seed)
        self._fixed_clock_start = clock_start_us
        self._now_s = 0.0
        self._cmd = bytearray()
        self._cmd_overflow = False
        self._boot()

    # -- state -------------------------------------------------------------------------------------

    def _boot(self) -> None:
        start = self._fixed_clock_start
        if start is None:
            start = int(self._rng_clock.integers(0, CLOCK_MODULUS))
        self._clock_start_us = start
        self._t_boot = self._now_s
        self._seq = 0
        self._set_schedule(self.boot_rate_hz, 0.0)
        self._next_header_us = self.header_period_us
        self._pending: list[bytes] = [b"\n"]  # ends any line cut short by the restart
        self._cmd.clear()
        self._cmd_overflow = False
        self._queue_header("boot")

    def reset(self, at_s: float | None = None) -> None:
        """Reboot: sequence from 0, clock restarts, boot rate, boot header.

        Args:
            at_s: when the device comes back; the time since :attr:`now_s` passes with the device off
                (nothing sampled, nothing sent). Now when ``None``.
        """
        self.truth.resets += 1
        self._now_s = max(self._now_s, at_s if at_s is not None else self._now_s)
        self._boot()

    def drain(self, until_s: float) -> int:
        """Run to ``until_s`` with nobody listening: the frames are counted as unheard, bytes discarded.

        Returns:
            The number of bytes that went nowhere.
        """
        before = replace(self.truth)
        lost = len(self.generate(until_s))
        self.truth.frames_dropped = before.frames_dropped
        self.truth.frames_corrupted = before.frames_corrupted
        self.truth.frames_byte_dropped = before.frames_byte_dropped
        self.truth.frames_unheard += self.truth.frames - before.frames
        return lost

    @property
    def now_s(self) -> float:
        """Simulated time (seconds since the device was created) up to which lines have been produced."""
        return self._now_s

    @property
    def rate_hz(self) -> float:
        """Current sample rate (the boot rate until ``!R`` changes it)."""
        return self._rate_hz

    @property
    def line_bytes(self) -> int:
        """Bytes in one data line, newline included."""
        return data_line_length(len(self.model.channels)) + 1

    def header(self, reason: str = "ask") -> DeviceHeader:
        """The header the device would send now."""
        return DeviceHeader(
            firmware=self.firmware,
            version=self.version,
            adc_bits=self.model.adc_bits,
            vref_mv=self.model.vref_mv,
            rate_hz=self._rate_hz,
            channels=tuple(self.model.channels),
            reason=reason,
        )

    def clock_us(self, t_s: np.ndarray | float) -> np.ndarray:
        """Ground truth: the device clock (not wrapped, float microseconds) at true times since boot."""
        return self._clock_start_us + self._elapsed_us(np.asarray(t_s, dtype=np.float64))

    def _elapsed_us(self, t_s: np.ndarray | float) -> np.ndarray:
        return (t_s - self._t_boot) * 1e6 * (1.0 + self.drift_ppm * 1e-6)

    def _set_schedule(self, rate_hz: float, origin_us: float) -> None:
        """Sample ``i`` from now on is taken at device time ``origin_us + i / rate_hz`` since boot."""
        self._rate_hz = rate_hz
        self._period_us = 1e6 / rate_hz
        self._origin_us = origin_us
        self._next_i = 0

    # -- output ------------------------------------------------------------------------------------

    def generate(self, until_s: float) -> bytes:
        """Advance simulated time to ``until_s`` and return every byte sent on the way.

        Samples are taken, encoded and damaged in numpy blocks; the only Python loop is over periodic
        headers and blocks of up to 65536 frames.
        """
        parts, self._pending = self._pending, []
        until_us = float(self._elapsed_us(until_s))
        while True:
            stop_us = min(until_us, self._next_header_us)
            end_i = max(self._next_i, math.ceil((stop_us - self._origin_us) / self._period_us))
            while self._next_i < end_i:
                block_end = min(end_i, self._next_i + _BLOCK)
                parts.append(self._data(self._next_i, block_end))
                self._next_i = block_end
            if self._next_header_us > until_us:
                break
            self._next_header_us += self.header_period_us
            parts.append(self._header_line("tick"))
        self._now_s = max(self._now_s, until_s)
        out = b"".join(parts)
        self.truth.bytes_out += len(out)
        return out

    def _data(self, first: int, end: int) -> bytes:
        index = np.arange(first, end, dtype=np.float64)
        elapsed_us = self._origin_us + index * self._period_us
        t_s = self._t_boot + elapsed_us / (1e6 * (1.0 + self.drift_ppm * 1e-6))
        counts = self.model.counts(t_s)
        n = end - first
        seq = self._seq + np.arange(n, dtype=np.int64)
        clock = (self._clock_start_us + np.floor(elapsed_us).astype(np.int64)) % CLOCK_MODULUS
        self._seq += n
        self.truth.frames += n
        return self._damage(encode_frames(seq, clock, counts), n)

    def _damage(self, raw: bytes, n: int) -> bytes:
        """Apply the link faults to ``n`` equal-length lines; one uniform triple is drawn per line."""
        f = self.faults
        if not (f.drop_line or f.corrupt_byte or f.drop_byte):
            return raw
        width = len(raw) // n
        lines = np.frombuffer(raw, dtype=np.uint8).reshape(n, width).copy()
        draw = self._rng_link.random((n, 3))
        bounds = np.cumsum([f.drop_line, f.corrupt_byte, f.drop_byte])
        kind = np.searchsorted(bounds, draw[:, 0], side="right")
        pos = (draw[:, 1] * (width - 1)).astype(np.int64)
        dropped, corrupted, cut = (np.flatnonzero(kind == k) for k in range(3))
        # A different upper-case hex digit: a changed body byte breaks the CRC, a changed CRC digit no
        # longer matches, and a changed separator breaks the layout, so the line is always rejected.
        original = lines[corrupted, pos[corrupted]]
        shift = 1 + (draw[corrupted, 2] * 15).astype(np.int64)
        lines[corrupted, pos[corrupted]] = _HEX[(_HEX_VALUE[original] + shift) % 16]
        keep = np.ones(lines.shape, dtype=bool)
        keep[dropped] = False
        keep[cut, pos[cut]] = False
        self.truth.frames_dropped += len(dropped)
        self.truth.frames_corrupted += len(corrupted)
        self.truth.frames_byte_dropped += len(cut)
        return lines[keep].tobytes()

    def _header_line(self, reason: str) -> bytes:
        self.truth.headers += 1
        return encode_line(self.header(reason).body())

    def _queue_header(self, reason: str) -> None:
        self._next_header_us = float(self._elapsed_us(self._now_s)) + self.header_period_us
        self._pending.append(self._header_line(reason))

    def _answer(self, text: str) -> None:
        self.truth.answers += 1
        self._pending.append(encode_line(f"A {text}"))

    # -- input -------------------------------------------------------------------------------------

    def write(self, data: bytes) -> None:
        """Take bytes from the host; each complete command line is answered at the current time.

        Like firmware with a small receive buffer, a line longer than :data:`COMMAND_BUFFER` bytes is
        discarded up to its newline and answered with ``A err cmd``; empty lines are ignored.
        """
        self._cmd += data
        while (end := self._cmd.find(b"\n")) >= 0:
            line = bytes(self._cmd[:end]).rstrip(b"\r")
            del self._cmd[: end + 1]
            overflowed, self._cmd_overflow = self._cmd_overflow or len(line) > COMMAND_BUFFER, False
            if overflowed:
                self._answer("err cmd")
            elif line:
                self._command(line)
        if len(self._cmd) > COMMAND_BUFFER:
            self._cmd.clear()
            self._cmd_overflow = True

    def _command(self, line: bytes) -> None:
        body, star, sent = line.rpartition(b"*")
        if not star or len(sent) != 4 or not set(sent) <= _HEX_DIGITS or crc16(body) != int(sent, 16):
            self._answer("err crc")
            return
        text = body.decode("ascii", "replace")
        if text == "?H":
            self._queue_header("ask")
        elif text.startswith("?P ") and _TOKEN.fullmatch(text[3:]):
            self._answer(f"pong {text[3:]}")
        elif text.startswith("!R "):
            self._change_rate(text[3:])
        else:
            self._answer("err cmd")

    def _change_rate(self, arg: str) -> None:
        """Accept a decimal integer rate the device can do; the next sample follows one new period on."""
        if not (arg.isascii() and arg.isdigit()) or not 1 <= int(arg) <= self.max_rate_hz:
            self._answer("err rate")
            return
        rate_hz = int(arg)
        self._set_schedule(rate_hz, float(self._elapsed_us(self._now_s)) + 1e6 / rate_hz)
        self._answer(f"rate {rate_hz}")
        self._queue_header("rate")
