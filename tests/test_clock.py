"""Counter unwrap across wraps, gaps and restarts; host/device clock fit and drift."""

from __future__ import annotations

import numpy as np

from logger.clock import ClockFit, Unwrapper

CLOCK_WRAP_S = 2**32 / 1e6  # 4294.967296 s = 71.58 min (a 32-bit microsecond counter; arithmetic)


def _feed_in_chunks(u: Unwrapper, seq: np.ndarray, dev: np.ndarray, host: np.ndarray, size: int):
    seqs, devs = [], []
    for i in range(0, len(seq), size):
        r = u.feed(seq[i : i + size], dev[i : i + size], float(host[min(i + size, len(seq)) - 1]))
        seqs.append(r.seq)
        devs.append(r.device_us)
    return np.concatenate(seqs), np.concatenate(devs)


def _device(n: int, rate_hz: float, start_us: int = 0, start_seq: int = 0):
    k = np.arange(n)
    period = int(1e6 / rate_hz)
    return (start_seq + k) % 65536, (start_us + k * period) % 2**32, k * period / 1e6


def test_sequence_wraps_several_times() -> None:
    seq, dev, host = _device(300_000, 1000.0)  # 4.6 wraps of the 16-bit sequence
    s, d = _feed_in_chunks(Unwrapper(1000.0), seq, dev, host, 997)
    assert (np.diff(s) == 1).all() and (np.diff(d) == 1000).all()


def test_clock_wraps_several_times() -> None:
    seq, dev, host = _device(20_000, 1.0, start_us=2**32 - 5_000_000)  # 20000 s: 4.6 clock wraps
    s, d = _feed_in_chunks(Unwrapper(1.0), seq, dev, host, 50)
    assert (np.diff(s) == 1).all() and (np.diff(d) == 1_000_000).all()
    assert d[-1] - d[0] == 19_999 * 1_000_000
    assert round(CLOCK_WRAP_S / 60, 1) == 71.6


def test_lost_frames_are_counted_and_located() -> None:
    seq, dev, _ = _device(5000, 1000.0)
    keep = np.ones(5000, dtype=bool)
    keep[1000:1040] = False
    keep[3000] = False
    u = Unwrapper(1000.0)
    r = u.feed(seq[keep], dev[keep], 5.0)
    assert r.lost == 41 and u.lost == 41
    assert r.gaps == [(1000, 40), (2960, 1)]
    assert (r.seq == np.flatnonzero(keep)).all()


def test_restart_without_boot_header_is_detected() -> None:
    seq1, dev1, _ = _device(3000, 1000.0, start_us=2_000_000_000, start_seq=40_000)
    seq2, dev2, _ = _device(2000, 1000.0, start_us=12_345)
    u = Unwrapper(1000.0)
    a = u.feed(seq1, dev1, 3.0)
    b = u.feed(seq2, dev2, 3.5)
    assert b.resets == [0] and u.resets == 1 and u.lost == 0
    both_seq = np.concatenate((a.seq, b.seq))
    both_dev = np.concatenate((a.device_us, b.device_us))
    assert (np.diff(both_seq) > 0).all() and (np.diff(both_dev) > 0).all()
    assert 400_000 <= b.device_us[0] - a.device_us[-1] <= 600_000  # bridged by the host's 0.5 s


def test_restart_announced_by_boot_header_even_when_counters_look_plausible() -> None:
    seq, dev, _ = _device(10, 1000.0)
    u = Unwrapper(1000.0)
    u.feed(seq, dev, 1.0)
    u.restart()
    r = u.feed(seq[:5] + 10, dev[:5] + 10_000, 1.01)
    assert r.resets == [0] and r.lost == 0


def test_silence_longer_than_a_clock_wrap_is_measured_from_host_time() -> None:
    u = Unwrapper(1000.0)
    seq, dev, _ = _device(100, 1000.0)
    first = u.feed(seq, dev, 100.0)
    silence_s = 2 * 3600.0  # unplugged for two hours while the device kept counting
    later = 99_000 + int(silence_s * 1000)
    seq2, dev2, _ = _device(100, 1000.0, start_us=later * 1000, start_seq=later)
    r = u.feed(seq2, dev2, 100.0 + silence_s)
    assert r.resets == []
    assert r.device_us[0] - first.device_us[-1] == (later - 99) * 1000
    assert r.lost == later - 100


def test_duplicate_frames_are_dropped() -> None:
    seq, dev, _ = _device(10, 1000.0)
    r = Unwrapper(1000.0).feed(np.r_[seq[:5], seq[4:]], np.r_[dev[:5], dev[4:]], 1.0)
    assert r.keep.sum() == 10 and (np.diff(r.seq) == 1).all()


def test_clock_fit_finds_drift_despite_transport_delays() -> None:
    rng = np.random.default_rng(7)
    drift_ppm = 35.0
    fit = ClockFit()
    start_utc = 1.8e9
    for k in range(1, 3000):  # a read every 0.2 s for ten minutes
        true_s = 0.2 * k
        device_us = int(true_s * (1 + drift_ppm * 1e-6) * 1e6)
        fit.observe(device_us, start_utc + true_s + 0.002 + rng.exponential(0.004))
    assert abs(fit.drift_ppm - drift_ppm) < 2.0
    stamped = fit.to_utc_us(np.array([int(600 * (1 + drift_ppm * 1e-6) * 1e6)])) / 1e6
    assert abs(stamped[0] - (start_utc + 600.0)) < 0.005


def test_stamps_never_go_backwards() -> None:
    fit = ClockFit(start_utc=1e9)
    a = fit.to_utc_us(np.arange(0, 1000, 10))
    b = fit.to_utc_us(np.arange(500, 1500, 10))
    assert (np.diff(np.concatenate((a, b))) >= 0).all()


def test_clock_fit_starts_again_after_a_device_restart_and_keeps_its_drift() -> None:
    """Ten minutes at 35 ppm, then the device restarts after a 15 s outage and its first read brings a
    second of data queued while nobody listened (so the unwrapper's bridge over the outage is a second off).
    The fit must not read that step as drift, and must stamp the new clock's samples right within 60 s."""
    rng = np.random.default_rng(8)
    drift_ppm, start_utc = 35.0, 1.8e9
    fit = ClockFit()

    def arrive(true_s: float, device_s: float) -> None:
        fit.observe(int(device_s * (1 + drift_ppm * 1e-6) * 1e6), start_utc + true_s + 0.002 + rng.exponential(0.004))

    for k in range(1, 3000):
        arrive(0.2 * k, 0.2 * k)
    ahead_s = 1.0  # the unwrapped clock carries on one second ahead of the truth
    fit.restart()
    for k in range(0, 300):  # the queued second arrives in the first read, then a minute of steady reads
        arrive(616.0 + 0.2 * k, 616.0 + ahead_s + 0.2 * k)
    assert abs(fit.drift_ppm - drift_ppm) < 2.0
    device_now = int((616.0 + ahead_s + 59.8) * (1 + drift_ppm * 1e-6) * 1e6)
    stamped = fit.to_utc_us(np.array([device_now]))[0] / 1e6
    assert abs(stamped - (start_utc + 616.0 + 59.8)) < 0.01
