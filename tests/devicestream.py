"""A scripted device for end-to-end timeline tests: the wire protocol encoded on its own, with ground truth.

The encoder here is written from ``firmware_notes/PROTOCOL.md`` and shares no code with ``logger.wire``, so a
test that feeds these bytes to the pipeline checks the host against the document rather than against itself.

A scenario has two halves:

- a :class:`Device`: sample rate, crystal drift, timestamp jitter, the counters' first values, and a script of
  rail dips, silences, restarts and one inconsistent line, all placed in true time; :func:`play` turns it into
  the lines the device sends (:class:`Stream`) and what really happened (:class:`Truth`);
- a :class:`Link`: how those bytes reach the host (reads of any size, arrival delay, a backlog at the first
  read, a buffer that empties faster than real time, steps of the host's wall clock); :func:`deliver` turns a
  stream into the arrivals a port would return, and :class:`ScriptedSource` hands them to the pipeline in
  order, at once, without sleeping.

True time is the host's steady clock less ``Link.host_t0_s``: seconds from the first sample the device took.
The device clock runs ``1 + drift_ppm * 1e-6`` times as fast as true time.
"""

from __future__ import annotations

import binascii
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from logger.sources.base import Chunk

SEQ_MODULUS = 1 << 16
"""The sequence is 16 bits and wraps (PROTOCOL.md section 3)."""
CLOCK_MODULUS = 1 << 32
"""The device clock is 32 bits of microseconds and wraps every 71.58 minutes (PROTOCOL.md section 3)."""

IEC_LEVELS_PCT = (0.0, 40.0, 70.0)
"""Residual voltage of the DC immunity tests, % of nominal: interruption to 0 %, dips to 40 % and 70 %
(IEC 61000-4-29, test levels, from memory)."""
IEC_DURATIONS_S = (0.001, 0.003, 0.01, 0.03, 0.1, 0.3, 1.0)
"""Durations of those dips and interruptions, 1 ms to 1 s (IEC 61000-4-29, test levels, from memory)."""


# -- the wire format ---------------------------------------------------------------------------------------


def crc16(body: bytes) -> int:
    """CRC-16/IBM-3740 (alias CRC-16/CCITT-FALSE) of a line body.

    Source: PROTOCOL.md section 2: polynomial 0x1021, initial value 0xFFFF, no reflection, no final xor,
    computed over the body only; the document names ``binascii.crc_hqx(body, 0xFFFF)`` as the same CRC.
    """
    return binascii.crc_hqx(body, 0xFFFF)  # source: firmware_notes/PROTOCOL.md section 2 (CRC)


def frame_line(body: bytes) -> bytes:
    """``BODY*CCCC\\n``: the CRC as four upper-case hex digits, most significant first (PROTOCOL.md 1, 2)."""
    return body + b"*%04X\n" % crc16(body)


def data_line(seq: int, clock_us: int, counts: Iterable[int]) -> bytes:
    """``D SSSS TTTTTTTT C0 .. Cn-1*CCCC\\n`` (PROTOCOL.md section 3); sequence and clock taken modulo their width."""
    body = b"D %04X %08X" % (seq % SEQ_MODULUS, clock_us % CLOCK_MODULUS)
    body += b"".join(b" %04X" % int(c) for c in counts)
    return frame_line(body)


def header_line(
    channels: Sequence[str], bits: int, vref_mv: int, rate_hz: float, why: str,
    fw: str = "railtap-fw", ver: str = "0.3",
) -> bytes:
    """``H fw=.. ver=.. bits=.. vref_mv=.. rate_hz=.. ch=a,b why=..`` in the suggested key order (PROTOCOL.md 4)."""
    body = f"H fw={fw} ver={ver} bits={bits} vref_mv={vref_mv} rate_hz={rate_hz:g} ch={','.join(channels)} why={why}"
    return frame_line(body.encode("ascii"))


# -- the rig -----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RailTap:
    """How the project's simple rig (``logger.sim.simple.RIG_TOML``) reads a 12 V rail and its current.

    ``out_v`` (input 0) sees the rail through a divider of 11; ``out_a`` (input 1) sees the current through a
    0.01 ohm shunt and an amplifier gain of 50; a 12-bit converter with a 3300 mV reference. Counts are
    ``pin volts / LSB`` rounded, with LSB = Vref / 2**bits, the scaling the rig applies the other way.
    """

    nominal_v: float = 12.0
    divider: float = 11.0
    shunt_ohm: float = 0.01
    amp_gain: float = 50.0
    bits: int = 12
    vref_mv: int = 3300
    channels: tuple[str, ...] = ("out_v", "out_a")

    @property
    def lsb_v(self) -> float:
        """Volts per count at the pin: Vref / 2**bits (Analog Devices MT-001)."""
        return self.vref_mv / 1000.0 / (1 << self.bits)

    def _counts(self, pin_v: np.ndarray) -> np.ndarray:
        return np.clip(np.rint(pin_v / self.lsb_v), 0, (1 << self.bits) - 1).astype(np.uint16)

    def volts_counts(self, rail_v: np.ndarray | float) -> np.ndarray:
        """Counts on ``out_v`` for rail volts."""
        return self._counts(np.asarray(rail_v, dtype=np.float64) / self.divider)

    def amps_counts(self, amps: np.ndarray | float) -> np.ndarray:
        """Counts on ``out_a`` for load amps."""
        return self._counts(np.asarray(amps, dtype=np.float64) * self.shunt_ohm * self.amp_gain)

    def volts(self, counts: np.ndarray | float) -> np.ndarray:
        """Rail volts that counts on ``out_v`` calibrate to."""
        return np.asarray(counts, dtype=np.float64) * self.lsb_v * self.divider

    def amps(self, counts: np.ndarray | float) -> np.ndarray:
        """Load amps that counts on ``out_a`` calibrate to."""
        return np.asarray(counts, dtype=np.float64) * self.lsb_v / (self.shunt_ohm * self.amp_gain)


# -- the script --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Dip:
    """The rail held at ``level_pct`` of nominal from ``at_s`` for ``duration_s``, both in true time."""

    at_s: float
    duration_s: float
    level_pct: float

    @property
    def kind(self) -> str:
        """``dropout`` for an interruption (0 %), ``brownout`` for a dip that keeps some voltage (40 %, 70 %)."""
        return "dropout" if self.level_pct < 10.0 else "brownout"


@dataclass(frozen=True)
class Silence:
    """The device sends nothing but keeps sampling: sequence and clock run on and jump when lines come back.

    ``duration_s`` is the device-clock time from the last line before it to the first line after it, so
    ``round(duration_s * rate_hz) - 1`` sample sets are never sent. It starts at the first sample at or after
    ``at_s`` (true time).
    """

    at_s: float
    duration_s: float


@dataclass(frozen=True)
class Reboot:
    """The device stops at ``at_s`` (true time) and takes its next sample ``off_s`` later, counting again.

    The new boot segment's sequence starts at 0 and its clock at ``boot_clock_us`` (near zero). At start-up
    the firmware sends a lone newline, then the boot header when ``header`` (PROTOCOL.md sections 6.13 and 9).
    ``cut_line`` sends the first half of a data line just before stopping, the fragment section 6.13 shows.
    """

    at_s: float
    off_s: float
    header: bool = True
    boot_clock_us: int = 50_000
    cut_line: bool = False


@dataclass(frozen=True)
class Inconsistent:
    """One data line, with a valid CRC, whose clock is off by ``error_us`` while its sequence steps by one.

    It is the first sample at or after ``at_s`` (true time).
    """

    at_s: float
    error_us: int = 8168


Scripted = Dip | Silence | Reboot | Inconsistent


@dataclass(frozen=True)
class Device:
    """A tap on a 12 V rail drawing a constant current, and what its firmware sends.

    Args:
        rate_hz: sample sets per second; its period must be a whole number of microseconds.
        duration_s: true time from the first sample to the end of the stream.
        drift_ppm: the device clock runs this many parts per million fast (negative: slow).
        first_seq: sequence of the first sample set (the counter wraps at 65536).
        first_clock_us: device clock at the first sample set (it wraps at 2**32).
        jitter_us: each sent timestamp is off by a whole number of microseconds in [-jitter_us, jitter_us],
            as firmware that reads the timer a little late or early would send it; sampling itself is regular.
        boot_header: send a newline and the boot header before the first line.
        tick_s: send the header (``why=tick``) this often, counted from each boot; None for never.
        amps_a: load current; counts on ``out_a`` are fixed at the nearest count.
        noise_lsb: standard deviation of the converter's noise on ``out_v``, in counts.
        script: dips, silences, reboots and inconsistent lines, in true time.
        seed: seed of the jitter and noise.
        tap: how volts and amps become counts.
    """

    rate_hz: float = 1000.0
    duration_s: float = 3.0
    drift_ppm: float = 0.0
    first_seq: int = 0
    first_clock_us: int = 1_000_000
    jitter_us: int = 0
    boot_header: bool = True
    tick_s: float | None = None
    amps_a: float = 1.0
    noise_lsb: float = 0.0
    script: tuple[Scripted, ...] = ()
    seed: int = 0
    tap: RailTap = field(default_factory=RailTap)

    @property
    def period_us(self) -> int:
        period = 1e6 / self.rate_hz
        if abs(period - round(period)) > 1e-9:
            raise ValueError(f"rate {self.rate_hz:g} Hz: the period must be a whole number of microseconds")
        return round(period)

    @property
    def speed(self) -> float:
        """Device-clock seconds per true second."""
        return 1.0 + self.drift_ppm * 1e-6

    def header(self, why: str) -> bytes:
        """This device's header line."""
        tap = self.tap
        return header_line(tap.channels, tap.bits, tap.vref_mv, self.rate_hz, why)


# -- ground truth ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FrameTruth:
    """Every sample set the device took, in order, whether or not its line was sent (one row each)."""

    seq: np.ndarray
    """uint16 sequence as sent."""
    clock_us: np.ndarray
    """uint32 device clock as sent: jitter and any scripted error included."""
    device_us: np.ndarray
    """int64 device clock without jitter or error, unwrapped within its boot segment."""
    true_s: np.ndarray
    """float64 true time of the sample, seconds from the first sample of the stream."""
    segment: np.ndarray
    """int32 boot segment: 0 first, one more at each restart."""
    delivered: np.ndarray
    """bool: its line was sent whole."""
    inconsistent: np.ndarray
    """bool: its line carries a clock that disagrees with its sequence step."""
    counts: np.ndarray
    """uint16 counts, shape (frames, channels)."""

    @property
    def recorded(self) -> np.ndarray:
        """bool: what a host should keep as a sample (sent whole, and consistent)."""
        return self.delivered & ~self.inconsistent


@dataclass(frozen=True)
class EventTruth:
    """A scripted dip, as the host should report it."""

    kind: str
    level_pct: float
    segment: int
    start_s: float
    """Device-clock seconds from the first delivered sample of its boot segment to the dip's true start."""
    duration_s: float
    """Device-clock seconds the dip lasted."""
    true_start_s: float
    true_duration_s: float
    samples: int
    """Sample sets taken during the dip (at least one)."""


@dataclass(frozen=True)
class Truth:
    """What happened on the device, to compare with what the host recorded."""

    rate_hz: float
    period_us: int
    drift_ppm: float
    jitter_us: int
    frames: FrameTruth
    events: tuple[EventTruth, ...]
    """Every scripted dip, in time order."""
    delivered: int
    """Data lines sent whole."""
    rows: tuple[int, ...]
    """Per boot segment: the samples a host should record (delivered, consistent)."""
    spans: tuple[int, ...]
    """Per boot segment: last minus first sequence of the recorded samples (unwrapped), plus one."""
    reboot_gaps_s: tuple[float, ...]
    """True time from the last sample of each segment to the first of the next."""
    silences: tuple[int, ...]
    """Sample sets never sent in each silence."""
    inconsistent: int
    headers: int
    """Header lines sent (boot and tick; answers to ``?H`` are the source's)."""
    amps_a: float
    """What ``out_a`` calibrates to."""
    volts_v: float
    """What ``out_v`` calibrates to outside a dip (before noise)."""

    @property
    def segments(self) -> int:
        return len(self.rows)

    @property
    def lost(self) -> tuple[int, ...]:
        """Per segment: frames a host should count as lost (never sent, or dropped as inconsistent)."""
        return tuple(s - r for s, r in zip(self.spans, self.rows, strict=True))

    @property
    def span(self) -> int:
        return sum(self.spans)

    @property
    def period_s(self) -> float:
        return self.period_us / 1e6


@dataclass(frozen=True)
class Stream:
    """The lines a device sent, when each left it (true time), and the truth behind them."""

    lines: tuple[bytes, ...]
    sent_s: np.ndarray
    truth: Truth
    device: Device

    @property
    def data(self) -> bytes:
        return b"".join(self.lines)


def play(device: Device) -> Stream:
    """Run the device's script: every sample set it takes, the lines it sends, and the truth.

    Raises:
        ValueError: the script cannot be checked as written (a dip with no sample in it or next to a silence,
            a restart or an inconsistent line; a silence running past the end of its boot segment; ...).
    """
    period_us, speed = device.period_us, device.speed
    true_period_s = period_us / 1e6 / speed
    rng = np.random.default_rng(device.seed)
    reboots = sorted((s for s in device.script if isinstance(s, Reboot)), key=lambda r: r.at_s)

    # Boot segments in true time: [begin, end), and their counters' first values.
    bounds: list[tuple[float, float, int, int]] = []
    begin, seq0, clock0 = 0.0, device.first_seq, device.first_clock_us
    for r in reboots:
        bounds.append((begin, r.at_s, seq0, clock0))
        begin, seq0, clock0 = r.at_s + r.off_s, 0, r.boot_clock_us
    bounds.append((begin, device.duration_s, seq0, clock0))

    parts: list[tuple[np.ndarray, ...]] = []
    for k, (t0, t1, s0, c0) in enumerate(bounds):
        n = max(0, math.ceil((t1 - t0) / true_period_s - 1e-9))
        if n < 2:
            raise ValueError(f"boot segment {k} ({t0:g} s to {t1:g} s) holds fewer than two samples")
        idx = np.arange(n, dtype=np.int64)
        device_us = c0 + idx * period_us
        parts.append((idx + s0, device_us, t0 + idx * true_period_s, np.full(n, k, dtype=np.int32)))
    seq_u, device_us, true_s, segment = (np.concatenate(p) for p in zip(*parts, strict=True))
    total = len(seq_u)
    if 2 * device.jitter_us >= period_us:
        raise ValueError("timestamp jitter must stay under half a sample period")
    jitter = rng.integers(-device.jitter_us, device.jitter_us + 1, total) if device.jitter_us else 0
    clock_sent = device_us + jitter
    delivered = np.ones(total, dtype=bool)
    inconsistent = np.zeros(total, dtype=bool)

    def first_at(at_s: float, what: str) -> int:
        i = int(np.searchsorted(true_s, at_s, side="left"))
        if i >= total:
            raise ValueError(f"{what} at {at_s:g} s: after the last sample")
        return i

    silences = []
    for s in (s for s in device.script if isinstance(s, Silence)):
        a = first_at(s.at_s, "silence")
        steps = round(s.duration_s * device.rate_hz)
        b = a + steps - 1  # first line after the silence
        if steps < 2 or a == 0 or b >= total or segment[a - 1] != segment[b]:
            raise ValueError(f"silence at {s.at_s:g} s for {s.duration_s:g} s must lie inside one boot segment")
        delivered[a:b] = False
        silences.append(steps - 1)
    for s in (s for s in device.script if isinstance(s, Inconsistent)):
        i = first_at(s.at_s, "inconsistent line")
        if i == 0 or i + 1 >= total or segment[i - 1] != segment[i + 1] or not delivered[i - 1 : i + 2].all():
            raise ValueError(f"inconsistent line at {s.at_s:g} s needs a sent line on either side")
        inconsistent[i] = True
        clock_sent[i] += s.error_us

    volts = np.full(total, device.tap.nominal_v)
    dips = sorted((s for s in device.script if isinstance(s, Dip)), key=lambda d: d.at_s)
    for d in dips:
        volts[(true_s >= d.at_s) & (true_s < d.at_s + d.duration_s)] = device.tap.nominal_v * d.level_pct / 100.0
    v_counts = device.tap.volts_counts(volts)
    if device.noise_lsb:
        noisy = v_counts + rng.standard_normal(total) * device.noise_lsb
        v_counts = np.clip(np.rint(noisy), 0, (1 << device.tap.bits) - 1).astype(np.uint16)
    a_counts = np.full(total, device.tap.amps_counts(device.amps_a), dtype=np.uint16)
    counts = np.column_stack((v_counts, a_counts))

    frames = FrameTruth(
        seq=(seq_u % SEQ_MODULUS).astype(np.uint16),
        clock_us=(clock_sent % CLOCK_MODULUS).astype(np.uint32),
        device_us=device_us,
        true_s=true_s,
        segment=segment,
        delivered=delivered,
        inconsistent=inconsistent,
        counts=counts,
    )
    recorded = frames.recorded
    first_recorded = {k: int(np.flatnonzero(recorded & (segment == k))[0]) for k in range(len(bounds))}
    events = tuple(_dip_truth(d, frames, first_recorded, speed) for d in dips)
    lines, sent_s, headers = _lines(device, frames, bounds, reboots)
    rows, spans = [], []
    for k in range(len(bounds)):
        kept = np.flatnonzero(recorded & (segment == k))
        rows.append(len(kept))
        spans.append(int(seq_u[kept[-1]] - seq_u[kept[0]] + 1))
    gaps = []
    for k in range(len(bounds) - 1):
        last = np.flatnonzero(segment == k)[-1]
        gaps.append(float(true_s[last + 1] - true_s[last]))
    truth = Truth(
        rate_hz=device.rate_hz,
        period_us=period_us,
        drift_ppm=device.drift_ppm,
        jitter_us=device.jitter_us,
        frames=frames,
        events=events,
        delivered=int(delivered.sum()),
        rows=tuple(rows),
        spans=tuple(spans),
        reboot_gaps_s=tuple(gaps),
        silences=tuple(silences),
        inconsistent=int(inconsistent.sum()),
        headers=headers,
        amps_a=float(device.tap.amps(a_counts[0])),
        volts_v=float(device.tap.volts(device.tap.volts_counts(device.tap.nominal_v))),
    )
    return Stream(tuple(lines), np.asarray(sent_s, dtype=np.float64), truth, device)


def _dip_truth(dip: Dip, frames: FrameTruth, first_recorded: dict[int, int], speed: float) -> EventTruth:
    """Where a dip falls on the device clock; refuses dips the host could not time to one sample."""
    inside = np.flatnonzero((frames.true_s >= dip.at_s) & (frames.true_s < dip.at_s + dip.duration_s))
    if len(inside) == 0:
        raise ValueError(f"dip at {dip.at_s:g} s for {dip.duration_s:g} s holds no sample")
    lo, hi = int(inside[0]) - 1, int(inside[-1]) + 1
    if lo < 0 or hi >= len(frames.seq):
        raise ValueError(f"dip at {dip.at_s:g} s needs a sample before and after it")
    around = slice(lo, hi + 1)
    if len(set(frames.segment[around].tolist())) != 1 or not frames.recorded[around].all():
        raise ValueError(f"dip at {dip.at_s:g} s touches a silence, a restart or an inconsistent line")
    k = int(frames.segment[lo])
    return EventTruth(
        kind=dip.kind,
        level_pct=dip.level_pct,
        segment=k,
        start_s=(dip.at_s - float(frames.true_s[first_recorded[k]])) * speed,
        duration_s=dip.duration_s * speed,
        true_start_s=dip.at_s,
        true_duration_s=dip.duration_s,
        samples=len(inside),
    )


def _lines(
    device: Device, frames: FrameTruth, bounds: list[tuple[float, float, int, int]], reboots: list[Reboot]
) -> tuple[list[bytes], list[float], int]:
    """The lines in the order they leave the device, with the true time each is sent."""
    lines: list[bytes] = []
    sent: list[float] = []
    headers = 0
    for k, (t0, _, _, _) in enumerate(bounds):
        rows = np.flatnonzero(frames.segment == k)
        booted = device.boot_header if k == 0 else reboots[k - 1].header
        if k > 0 or device.boot_header:
            lines.append(b"\n")  # the firmware's first act at start-up (PROTOCOL.md sections 6.13 and 9)
            sent.append(t0)
        if booted:
            lines.append(device.header("boot"))
            sent.append(t0)
            headers += 1
        ticks: list[float] = []
        if device.tick_s:
            end = float(frames.true_s[rows[-1]])
            ticks = [t0 + j * device.tick_s for j in range(1, int((end - t0) / device.tick_s) + 1)]
        tick_at = np.searchsorted(frames.true_s[rows], ticks, side="left")
        due = 0
        for pos, i in enumerate(rows.tolist()):
            if not frames.delivered[i]:
                continue
            if due < len(ticks) and tick_at[due] <= pos:  # ticks missed in a silence make one header
                lines.append(device.header("tick"))
                sent.append(float(frames.true_s[i]))
                headers += 1
                due = int(np.searchsorted(tick_at, pos, side="right"))
            lines.append(data_line(int(frames.seq[i]), int(frames.clock_us[i]), frames.counts[i].tolist()))
            sent.append(float(frames.true_s[i]))
        if k < len(reboots) and reboots[k].cut_line:
            last = rows[-1]
            whole = data_line(int(frames.seq[last]) + 1, int(frames.clock_us[last]) + device.period_us,
                              frames.counts[last].tolist())
            lines.append(whole[: len(whole) // 2])
            sent.append(reboots[k].at_s)
    return lines, sent, headers


# -- the link ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Burst:
    """The device's transmit buffer holds lines from ``at_s`` for ``hold_s`` (a stalled USB endpoint, say),
    then empties ``drain_x`` times faster than real time."""

    at_s: float
    hold_s: float
    drain_x: float = 10.0


@dataclass(frozen=True)
class WallStep:
    """The host's wall clock is stepped by ``step_s`` at true time ``at_s``; its steady clock is not."""

    at_s: float
    step_s: float


@dataclass(frozen=True)
class Link:
    """How the device's bytes reach the host's reads.

    Args:
        read_s: mean time between reads while bytes flow (each is 0.5 to 1.5 times this).
        idle_s: a read that finds nothing returns empty after this long (PROTOCOL reads wait about 0.1 s).
        latency_s: fixed delay from the port to the read returning.
        jitter_s: each read returns a further 0 to ``jitter_s`` late (uniform); arrivals never come early.
        backlog_s: the port is opened this long after the first line was sent: the first read returns it all.
        bursts: the device's buffer holds lines and then empties them faster than real time.
        split: reads also return at random byte positions inside lines, not only between them.
        wall_steps: steps of the host's wall clock (``wall_offset`` changes, ``host_time`` does not).
        baud: bytes take ``10 / baud`` s each on the wire (8N1).
        host_t0_s: the host's steady clock at true time 0.
        utc0_s: UTC at true time 0, before any wall step.
        seed: seed of the read times, jitter and split points.
    """

    read_s: float = 0.01
    idle_s: float = 0.1
    latency_s: float = 0.002
    jitter_s: float = 0.0
    backlog_s: float = 0.0
    bursts: tuple[Burst, ...] = ()
    split: bool = True
    wall_steps: tuple[WallStep, ...] = ()
    baud: int = 921600
    host_t0_s: float = 5000.0
    utc0_s: float = 1_800_000_000.0
    seed: int = 0

    def wall_offset(self, true_s: float) -> float:
        """UTC minus steady clock at a true time."""
        stepped = sum(w.step_s for w in self.wall_steps if w.at_s <= true_s)
        return self.utc0_s - self.host_t0_s + stepped


class Arrival(NamedTuple):
    """One read: the host's steady time it returned, the offset to UTC then, and the bytes."""

    host_time: float
    wall_offset: float
    data: bytes


def line_arrivals_s(stream: Stream, link: Link) -> np.ndarray:
    """True time at which each line's last byte is at the host's port (before the read returns it)."""
    sizes = np.array([len(line) for line in stream.lines], dtype=np.float64)
    ready = stream.sent_s + sizes * 10.0 / link.baud
    for b in link.bursts:
        held = (stream.sent_s >= b.at_s) & (stream.sent_s < b.at_s + b.hold_s)
        ready[held] = b.at_s + b.hold_s + (stream.sent_s[held] - b.at_s) / b.drain_x
    return np.maximum.accumulate(ready)


def deliver(stream: Stream, link: Link) -> list[Arrival]:
    """The reads a host makes of this stream over this link, in order; together they hold every byte once."""
    rng = np.random.default_rng(link.seed)
    data = stream.data
    sizes = np.array([len(line) for line in stream.lines], dtype=np.int64)
    ends = np.cumsum(sizes)
    ready = line_arrivals_s(stream, link)
    tx_s = sizes * 10.0 / link.baud
    arrivals: list[Arrival] = []
    pos, last_host = 0, -math.inf
    r = float(stream.sent_s[0]) + link.backlog_s
    while pos < len(data):
        done = int(np.searchsorted(ready, r, side="right"))  # lines whole at the port by r
        end = int(ends[done - 1]) if done else 0
        if link.split and done < len(sizes):  # the next line may be on its way
            started = ready[done] - tx_s[done]
            if r > started:
                end += int(sizes[done] * (r - started) / tx_s[done])
        end = max(end, pos)
        host = max(last_host, link.host_t0_s + r + link.latency_s + float(rng.uniform(0.0, link.jitter_s)))
        offset = link.wall_offset(r)
        piece = data[pos:end]
        if link.split and len(piece) > 2 and rng.random() < 0.3:  # one read's bytes returned by two reads
            cut = int(rng.integers(1, len(piece)))
            arrivals.append(Arrival(host, offset, piece[:cut]))
            piece = piece[cut:]
        arrivals.append(Arrival(host, offset, piece))
        pos, last_host = end, host
        if pos >= len(data):
            break
        next_ready = ready[done] - (tx_s[done] if link.split else 0.0) if done < len(sizes) else math.inf
        step = link.read_s * float(rng.uniform(0.5, 1.5))
        wait = next_ready - r
        # While bytes flow, reads come every step; otherwise a read returns soon after bytes come, or empty.
        r += step if wait <= step else min(link.idle_s, wait + step)
    return arrivals


# -- the source --------------------------------------------------------------------------------------------


class ScriptedSource:
    """The project's ``Source`` over a fixed list of arrivals: each read returns the next as a ``Chunk``, then
    ``None``. It never sleeps: the arrival times are the scripted ones.

    When ``answer`` is given (the device's header, ``why=ask``), a ``?H`` the host writes is answered the
    way the firmware does: the header goes out after the lines already on their way, so it is put after the
    last newline of the next read that has one, never inside a line.
    """

    def __init__(self, arrivals: Sequence[Arrival], *, answer: bytes | None = None,
                 name: str = "scripted device") -> None:
        self.arrivals = list(arrivals)
        self.answer = answer
        self._name = name
        self.written: list[bytes] = []
        self.answered = 0
        self.reads = 0
        self.is_open = False
        self._next = 0
        self._asked = False

    @property
    def name(self) -> str:
        return self._name

    def open(self) -> None:
        self.is_open = True

    def read(self) -> Chunk | None:
        if self._next >= len(self.arrivals):
            return None
        host_time, wall_offset, data = self.arrivals[self._next]
        self._next += 1
        self.reads += 1
        if self._asked and self.answer is not None and b"\n" in data:
            cut = data.rindex(b"\n") + 1
            data = data[:cut] + self.answer + data[cut:]
            self._asked = False
            self.answered += 1
        return Chunk(data, host_time, wall_offset)

    def write(self, data: bytes) -> None:
        self.written.append(data)
        if data.startswith(b"?H"):
            self._asked = True

    def close(self) -> None:
        self.is_open = False


def make_source(device: Device, link: Link | None = None, *, answer: bool = True) -> tuple[ScriptedSource, Stream]:
    """The device played over the link, as a source for the pipeline, with the stream and its truth."""
    stream = play(device)
    source = ScriptedSource(deliver(stream, link or Link()), answer=device.header("ask") if answer else None)
    return source, stream
