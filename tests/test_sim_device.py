"""The simulated device speaks the wire protocol exactly, and its ground truth matches what a decoder sees."""

from __future__ import annotations

import numpy as np
import pytest

from logger.sim import LinkFaults, ScriptedFault, SimDevice, SimpleRail
from logger.sim.simple import simple_rig
from logger.wire import Answer, Decoder, DeviceHeader, FrameBatch, encode_line


def decode(data: bytes) -> tuple[list, Decoder]:
    decoder = Decoder()
    return decoder.feed(data), decoder


def frames_of(items: list) -> FrameBatch:
    batches = [i for i in items if isinstance(i, FrameBatch)]
    return FrameBatch(
        seq=np.concatenate([b.seq for b in batches]),
        device_us=np.concatenate([b.device_us for b in batches]),
        counts=np.concatenate([b.counts for b in batches]),
    )


def texts_of(items: list) -> list:
    return [i for i in items if not isinstance(i, FrameBatch)]


def test_boot_header_first_and_matches_demo_rig() -> None:
    device = SimDevice(seed=1)
    items, decoder = decode(device.generate(0.05))
    assert isinstance(items[0], DeviceHeader)
    header = items[0]
    assert header.reason == "boot"
    assert (header.adc_bits, header.vref_mv, header.rate_hz) == (12, 3300, 1000.0)
    rig = simple_rig()
    assert header.channels == tuple(ch.name for ch in sorted(rig.channels, key=lambda c: c.input))
    model = device.model
    assert isinstance(model, SimpleRail)
    assert model.divider == rig.channel("out_v").divider
    assert (model.shunt_ohm, model.amp_gain) == (rig.channel("out_a").shunt_ohm, rig.channel("out_a").gain)
    assert decoder.counters.rejected == 0
    assert len(frames_of(items)) == 51  # samples at 0, 1, ... 50 ms of device time


def test_periodic_headers_every_ten_device_seconds() -> None:
    items, _ = decode(SimDevice(seed=2).generate(35.0))
    reasons = [h.reason for h in texts_of(items)]
    assert reasons == ["boot", "tick", "tick", "tick"]


def test_clock_drift_sequence_and_wrap() -> None:
    device = SimDevice(seed=3, drift_ppm=35.0, clock_start_us=(1 << 32) - 5000)
    frames = frames_of(decode(device.generate(100.0))[0])
    # 1000 Hz by a clock running 35 ppm fast: 100 s of true time holds 100 003.5 device milliseconds.
    assert len(frames) in (100_003, 100_004)
    assert np.all(np.diff(frames.seq.astype(np.int64)) % (1 << 16) == 1)
    assert np.all(np.diff(frames.device_us.astype(np.int64)) % (1 << 32) == 1000)
    assert frames.device_us[0] == (1 << 32) - 5000 and frames.device_us[10] == 5000
    true_slope = (device.clock_us(100.0) - device.clock_us(0.0)) / 100e6
    assert true_slope == pytest.approx(1 + 35e-6, abs=1e-12)


def test_commands_are_answered() -> None:
    # Commands, answers and error cases as firmware_notes/PROTOCOL.md section 5 lays them down.
    device = SimDevice(seed=4)
    device.generate(1.0)
    device.write(encode_line("?P 7f3a") + encode_line("?H") + b"\n")
    device.write(b"?P nocrc\n" + b"?P 1*0000\n" + encode_line("?Z") + encode_line("?P bad-token"))
    device.write(encode_line("?P " + "x" * 40) + encode_line("!R 99999") + encode_line("!R 12.5"))
    device.write(encode_line("!R 500")[:5])
    device.write(encode_line("!R 500")[5:])
    items = decode(device.generate(1.1))[0]
    texts = texts_of(items)
    assert texts[0] == Answer("pong", "7f3a")
    assert isinstance(texts[1], DeviceHeader) and texts[1].reason == "ask"
    err = [Answer("err", w) for w in ("crc", "crc", "cmd", "cmd", "cmd", "rate", "rate")]
    assert texts[2:9] == err
    assert texts[9] == Answer("rate", "500")
    assert isinstance(texts[10], DeviceHeader) and (texts[10].reason, texts[10].rate_hz) == ("rate", 500.0)
    assert len(texts) == 11
    assert not any(isinstance(x, FrameBatch) for x in items[:11])  # answers come ahead of later data
    frames = frames_of(items)
    assert 49 <= len(frames) <= 51
    assert np.all(np.diff(frames.device_us.astype(np.int64)) == 2000)
    assert frames.seq[0] == 1001  # the sequence runs on across a rate change


def test_reset_restarts_sequence_and_sends_boot_header() -> None:
    device = SimDevice(seed=5, clock_start_us=1_000)
    before = device.generate(2.0)
    device.reset(at_s=3.0)
    after = device.generate(3.01)
    # A reset cuts the line on its way; the lone newline sent at start-up ends the fragment, so the
    # boot header survives (firmware_notes/PROTOCOL.md, 6.13).
    items, decoder = decode(before[:-10] + after)
    assert decoder.counters.rejected == 1 and decoder.counters.headers == 2
    items = decode(after)[0]
    assert isinstance(items[0], DeviceHeader) and items[0].reason == "boot"
    frames = frames_of(items)
    assert frames.seq[0] == 0 and frames.device_us[0] == 1_000
    assert device.truth.resets == 1 and device.truth.frames == 2001 + 11


def test_output_does_not_depend_on_how_time_is_sliced() -> None:
    faults = LinkFaults(drop_line=0.01, corrupt_byte=0.01, drop_byte=0.01)
    whole = SimDevice(seed=6, faults=faults).generate(25.0)
    sliced = SimDevice(seed=6, faults=faults)
    steps = np.cumsum(np.random.default_rng(0).uniform(0.0, 0.7, 200))
    parts = [sliced.generate(float(t)) for t in steps[steps < 25.0]]
    parts.append(sliced.generate(25.0))
    assert b"".join(parts) == whole


def test_decoder_counts_match_ground_truth() -> None:
    device = SimDevice(seed=7, faults=LinkFaults(drop_line=0.02, corrupt_byte=0.02, drop_byte=0.02))
    data = device.generate(30.0)
    decoder = Decoder()
    cuts = np.sort(np.random.default_rng(1).integers(0, len(data), 500))
    items = [i for part in np.split(np.frombuffer(data, np.uint8), cuts) for i in decoder.feed(part.tobytes())]
    truth = device.truth
    assert truth.frames_dropped > 0 and truth.frames_corrupted > 0 and truth.frames_byte_dropped > 0
    # Every damaged line must be rejected: a single changed byte is a burst of at most 8 bits, and a
    # CRC of degree 16 detects every burst of 16 bits or fewer (Peterson and Brown, "Cyclic Codes for
    # Error Detection", Proc. IRE 49(1), 1961, burst-error theorem).
    assert decoder.counters.rejected == truth.lines_damaged
    assert decoder.counters.frames == truth.frames_delivered
    frames = frames_of(items)
    missing = int(((np.diff(frames.seq.astype(np.int64)) % (1 << 16)) - 1).sum())
    assert missing == truth.frames_dropped + truth.lines_damaged


def test_drain_counts_unheard_frames() -> None:
    device = SimDevice(seed=8, faults=LinkFaults(drop_line=0.05))
    heard = device.generate(1.0)
    assert device.drain(2.0) > 0
    heard += device.generate(3.0)
    decoder = Decoder()
    decoder.feed(heard)
    assert device.truth.frames_unheard in (1000, 1001)
    assert decoder.counters.frames == device.truth.frames_delivered


def test_simple_rail_true_values_and_faults() -> None:
    rail = SimpleRail(seed=0, noise_lsb=0.0)
    t = np.array([1.0, 8.0, 15.0, 30.2, 50.1, 90.1])
    values = rail.true_values(t)
    # Steady rail: setpoint minus I * R; the ripple sine is zero on whole milliseconds of 100 Hz.
    assert values[:3, 0] == pytest.approx([12.0 - 0.5 * 0.15, 12.0 - 2.0 * 0.15, 12.0 - 3.5 * 0.15], abs=1e-9)
    assert values[:3, 1] == pytest.approx([0.5, 2.0, 3.5])
    assert values[3:, 0] == pytest.approx([9.5, 0.3, 9.5])
    assert rail.faults(130.0) == [
        ScriptedFault("brownout", 30.0, 0.4, 9.5),
        ScriptedFault("dropout", 50.0, 0.15, 0.3),
        ScriptedFault("brownout", 90.0, 0.4, 9.5),
        ScriptedFault("dropout", 110.0, 0.15, 0.3),
    ]
    assert [f.start_s for f in rail.faults(100.0, since_s=60.0)] == [90.0]


def test_counts_scale_round_and_clip() -> None:
    rail = SimpleRail(seed=0, noise_lsb=0.0, load_steps_a=(2.0,), source_ohm=0.0, ripple_pp_v=0.0, script=())
    counts = rail.counts(np.array([1.0]))
    # Ideal ADC transfer: code = pin volts / reference * 2**bits (common practice, no source).
    assert counts.tolist() == [[round(12.0 / 11.0 / 3.3 * 4096), round(2.0 * 0.01 * 50.0 / 3.3 * 4096)]]
    high = SimpleRail(seed=0, noise_lsb=0.0, setpoint_v=40.0, script=())
    assert high.counts(np.array([1.0]))[0, 0] == 4095
    noisy = SimpleRail(seed=0, noise_lsb=1.5, ripple_pp_v=0.0, script=())
    spread = noisy.counts(np.linspace(0.0, 6.0, 5000))[:, 0].astype(float)
    assert 1.0 < spread.std() < 2.0
