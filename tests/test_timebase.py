"""The time base: sequence and clock unwrapped and checked against each other, restarts, silences, one odd line;
UTC labels fitted on the host's steady clock, bounded, slewed, strictly increasing."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from logger.timebase import TimeBase
from logger.timebase.labels import Labeler
from logger.timebase.unwrap import Unwrapper
from logger.wire.frames import DeviceHeader, FrameBatch

CLOCK_WRAP_S = 2**32 / 1e6  # 4294.967296 s = 71.58 min (a 32-bit microsecond counter; arithmetic)
START = 1.8e9  # an arbitrary UTC moment in 2027


def _device(n: int, rate_hz: float, start_us: int = 0, start_seq: int = 0):
    k = np.arange(n)
    period = int(1e6 / rate_hz)
    return (start_seq + k) % 65536, (start_us + k * period) % 2**32


def _header(rate_hz: float = 1000.0, why: str = "ask") -> DeviceHeader:
    return DeviceHeader("tap", "1", 12, 3300, rate_hz, ("a",), why)


def _batch(seq, dev) -> FrameBatch:
    seq, dev = np.asarray(seq), np.asarray(dev)
    return FrameBatch(seq.astype(np.uint16), dev.astype(np.uint32), np.zeros((len(seq), 1), dtype=np.uint16))


def _feed_in_chunks(u: Unwrapper, seq, dev, size: int, t0: float = 0.0, rate_hz: float = 1000.0):
    seqs, devs = [], []
    for i in range(0, len(seq), size):
        last = min(i + size, len(seq)) - 1
        r = u.feed(seq[i : i + size], dev[i : i + size], t0 + last / rate_hz)
        seqs.append(r.seq)
        devs.append(r.device_us)
    return np.concatenate(seqs), np.concatenate(devs)


def test_sequence_wraps_several_times() -> None:
    seq, dev = _device(300_000, 1000.0)  # 4.6 wraps of the 16-bit sequence
    s, d = _feed_in_chunks(Unwrapper(1000.0), seq, dev, 997)
    assert (np.diff(s) == 1).all() and (np.diff(d) == 1000).all()


def test_clock_wraps_several_times() -> None:
    seq, dev = _device(20_000, 1.0, start_us=2**32 - 5_000_000)  # 20000 s: 4.6 clock wraps
    s, d = _feed_in_chunks(Unwrapper(1.0), seq, dev, 50, rate_hz=1.0)
    assert (np.diff(s) == 1).all() and (np.diff(d) == 1_000_000).all()
    assert d[-1] - d[0] == 19_999 * 1_000_000
    assert round(CLOCK_WRAP_S / 60, 1) == 71.6


def test_lost_frames_are_counted_and_located() -> None:
    seq, dev = _device(5000, 1000.0)
    keep = np.ones(5000, dtype=bool)
    keep[1000:1040] = False
    keep[3000] = False
    u = Unwrapper(1000.0)
    r = u.feed(seq[keep], dev[keep], 5.0)
    assert u.counters.lost == 41 and u.counters.rows == len(r.seq)
    assert r.gaps == ((1000, 40), (2960, 1))
    assert (r.seq - r.seq[0] == np.flatnonzero(keep)).all()


def test_silence_that_wraps_the_sequence_is_counted_in_full() -> None:
    """100 s of silence at 1 kHz: 100,000 periods, so the 16-bit sequence wrapped once (65,536) in it."""
    u = Unwrapper(1000.0)
    seq, dev = _device(1000, 1000.0)
    u.feed(seq, dev, 1.0)
    later = 999 + 100_000
    seq2, dev2 = _device(1000, 1000.0, start_us=later * 1000, start_seq=later)
    r = u.feed(seq2, dev2, 102.0)
    assert r.resets == () and r.gaps == ((0, 99_999),)
    assert u.counters.lost == 99_999


def test_silence_longer_than_a_clock_wrap_is_measured_by_the_host() -> None:
    u = Unwrapper(1000.0)
    seq, dev = _device(100, 1000.0)
    first = u.feed(seq, dev, 100.0)
    silence_s = 2 * 3600.0  # unplugged for two hours while the device kept counting
    later = 99 + int(silence_s * 1000)
    seq2, dev2 = _device(100, 1000.0, start_us=later * 1000, start_seq=later)
    r = u.feed(seq2, dev2, 100.0 + silence_s)
    assert r.resets == ()
    assert r.device_us[0] - first.device_us[-1] == (later - 99) * 1000
    assert u.counters.lost == later - 100


def test_one_inconsistent_line_is_rejected_and_moves_nothing() -> None:
    """A valid-CRC line whose clock is 8168 µs ahead while its sequence steps by one: the neighbours agree
    with each other, so the odd line goes, counted, and no later stamp moves."""
    seq, dev = _device(3000, 1000.0)
    bad = dev.copy()
    bad[1500] += 8168
    u = Unwrapper(1000.0)
    _, d = _feed_in_chunks(u, seq, bad, 256)
    assert u.counters.inconsistent == 1 and u.counters.resets == 0
    assert len(d) == 2999 and (d - d[0] == np.delete(dev, 1500).astype(np.int64)).all()
    assert u.counters.lost == 1  # its frame is missing from the sequence: rows + lost = span


def test_odd_line_at_the_end_of_a_batch_waits_for_the_next() -> None:
    seq, dev = _device(20, 1000.0)
    bad = dev.copy()
    bad[9] -= 700_000  # a backwards step with sequence +1: not a wrap, not a restart
    u = Unwrapper(1000.0)
    a = u.feed(seq[:10], bad[:10], 0.01)
    b = u.feed(seq[10:], bad[10:], 0.02)
    assert len(a.seq) == 9 and len(b.seq) == 10 and u.counters.inconsistent == 1
    assert (np.diff(np.r_[a.device_us, b.device_us]) > 0).all()


def test_restart_without_header_is_found_from_the_clock_whatever_the_sequence_does() -> None:
    """A reboot where the sequence happens to continue (65535 -> 0) while the clock starts again."""
    seq1, dev1 = _device(3000, 1000.0, start_us=2_000_000_000, start_seq=65536 - 3000)
    seq2, dev2 = _device(2000, 1000.0, start_us=12_345)
    u = Unwrapper(1000.0)
    a = u.feed(seq1, dev1, 3.0)
    b = u.feed(seq2, dev2, 3.0 + 0.3 + 2.0)
    assert b.resets == (0,) and u.counters.resets == 1 and u.counters.lost == 0
    assert (b.segment == 1).all() and (a.segment == 0).all()
    both = np.r_[a.device_us, b.device_us]
    assert (np.diff(both) > 0).all()
    assert b.device_us[0] - a.device_us[-1] < 10_000_000  # never thousands of seconds


def test_restart_announced_by_boot_header_even_when_counters_look_plausible() -> None:
    seq, dev = _device(10, 1000.0)
    u = Unwrapper(1000.0)
    u.feed(seq, dev, 1.0)
    u.restart()
    r = u.feed(seq[:5] + 10, dev[:5] + 10_000, 1.01)
    assert r.resets == (0,) and u.counters.lost == 0


def test_restart_bridge_is_timed_from_arrivals_not_the_end_of_the_batch() -> None:
    """A 0.3 s reboot; the batch after it brings 2 s of data. The step across is about 0.3 s."""
    tb = TimeBase(_header(), START)
    seq1, dev1 = _device(5000, 1000.0, start_us=77_000_000)
    a = tb.feed(_batch(seq1, dev1), 5.0)
    seq2, dev2 = _device(2000, 1000.0, start_us=4_000)
    b = tb.feed(_batch(seq2, dev2), 5.0 + 0.3 + 2.0)
    step_s = (b.device_us[0] - a.device_us[-1]) / 1e6
    assert abs(step_s - 0.3) < 0.01, step_s


def test_duplicate_frames_are_dropped() -> None:
    seq, dev = _device(10, 1000.0)
    u = Unwrapper(1000.0)
    r = u.feed(np.r_[seq[:5], seq[4:]], np.r_[dev[:5], dev[4:]], 1.0)
    assert len(r.seq) == 10 and (np.diff(r.seq) == 1).all() and u.counters.duplicates == 1


def test_rate_change_measured_afresh() -> None:
    seq, dev = _device(500, 10_000.0)
    u = Unwrapper(10_000.0)
    u.feed(seq, dev, 0.05)
    u.set_rate(1000.0)
    seq2 = (500 + np.arange(500)) % 65536
    dev2 = dev[-1] + 1000 * (1 + np.arange(500))
    r = u.feed(seq2, dev2, 0.55)
    assert r.resets == () and u.counters.inconsistent == 0 and (np.diff(r.device_us) == 1000).all()


# -- labels ------------------------------------------------------------------------------------------


def _arrivals(labeler: Labeler, drift_ppm: float, seconds: float, every_s: float, rng, wall_offset=lambda t: 0.0,
              delay=0.002):
    for k in range(1, int(seconds / every_s)):
        true_s = every_s * k
        device_us = int(true_s * (1 + drift_ppm * 1e-6) * 1e6)
        labeler.observe(device_us, START + true_s + delay + rng.exponential(0.004), wall_offset(true_s))


def test_labels_fit_drift_despite_transport_delays() -> None:
    rng = np.random.default_rng(7)
    lab = Labeler()
    lab.observe(0, START + 0.002, 0.0)
    _arrivals(lab, 35.0, 600.0, 0.2, rng)
    assert abs(lab.drift_ppm - 35.0) < 2.0
    device_600 = int(600 * (1 + 35e-6) * 1e6)
    stamped = lab.label(np.array([0, device_600])) / 1e6
    assert abs(stamped[1] - (START + 600.0)) < 0.005


def test_a_wall_clock_step_is_reported_and_never_bent_into_drift() -> None:
    """NTP steps the wall clock back by 0.5 s after 2 minutes; the steady clock carries on."""
    rng = np.random.default_rng(3)
    lab = Labeler()
    lab.observe(0, START, 0.0)
    _arrivals(lab, 20.0, 600.0, 0.2, rng, wall_offset=lambda t: -0.5 if t > 120 else 0.0)
    assert len(lab.steps) == 1 and abs(lab.steps[0][1] + 0.5) < 1e-9
    assert abs(lab.drift_ppm - 20.0) < 2.0
    device_600 = int(600 * (1 + 20e-6) * 1e6)
    assert abs(lab.label(np.array([device_600]))[0] / 1e6 - (START + 600.0 - 0.5)) < 0.005


def test_labels_strictly_increase_through_corrections() -> None:
    """The first read came 0.3 s late: later reads pull the line back, and the labels slew, never repeat."""
    lab = Labeler()
    out = []
    for k in range(1, 600):
        t = k * 0.1
        device = np.arange(int((t - 0.1) * 1e6), int(t * 1e6), 1000)
        lab.observe(int(device[-1]), START + t + (0.3 if k == 1 else 0.001), 0.0)
        out.append(lab.label(device))
    utc = np.concatenate(out)
    assert (np.diff(utc) > 0).all()
    assert abs(utc[-1] / 1e6 - (START + 59.9)) < 0.01


def test_unpaced_arrivals_are_not_taken_for_drift() -> None:
    """Data arriving three times faster than the device clock ran: no oscillator does that."""
    lab = Labeler()
    for k in range(1, 400):
        lab.observe(k * 300_000, START + k * 0.1, 0.0)
    assert not lab.paced and lab.fault is not None
    utc = lab.label(np.array([300_000, 60_300_000]))
    assert utc[1] - utc[0] == 60_000_000  # the device clock, from the first arrival


def test_no_arrivals_start_from_the_given_time() -> None:
    lab = Labeler(start_utc_s=START)
    lab.observe(5_000_000, math.nan, 0.0)
    utc = lab.label(np.array([5_000_000, 6_000_000]))
    assert list(utc) == [int(START * 1e6), int(START * 1e6) + 1_000_000]


@settings(max_examples=40, deadline=None)
@given(sizes=st.lists(st.integers(1, 700), min_size=1, max_size=30), bad=st.integers(10, 4000),
       ahead=st.sampled_from([8168, -700_000, 3000, 2**31]), silence=st.integers(0, 200))
def test_any_split_gives_the_same_timeline(sizes: list[int], bad: int, ahead: int, silence: int) -> None:
    """Random splits of a 1 kHz stream with one odd line and a silence of up to 200 s: the same rows, rows +
    lost = the sequence span, and device time equal to the truth (common practice, no source)."""
    n = 5000
    k = np.arange(n, dtype=np.int64)
    k[2500:] += silence * 1000
    seq, dev = k % 65536, (1000 * k + 123_456) % 2**32
    dev_bad = dev.copy()
    dev_bad[bad] = (dev_bad[bad] + ahead) % 2**32
    u = Unwrapper(1000.0)
    got_seq, got_dev = [], []
    i = 0
    for size in sizes * 20:
        if i >= n:
            break
        r = u.feed(seq[i : i + size], dev_bad[i : i + size], START + float(k[min(i + size, n) - 1]) / 1000)
        got_seq.append(r.seq)
        got_dev.append(r.device_us)
        i += size
    if i < n:
        r = u.feed(seq[i:], dev_bad[i:], START + float(k[-1]) / 1000)
        got_seq.append(r.seq)
        got_dev.append(r.device_us)
    u.finish()
    s, d = np.concatenate(got_seq), np.concatenate(got_dev)
    assert u.counters.rows == len(s) == n - 1 and u.counters.inconsistent == 1
    assert u.counters.rows + u.counters.lost == s[-1] - s[0] + 1
    expect = np.delete(1000 * k, bad)
    assert (d - d[0] == expect - expect[0]).all()
