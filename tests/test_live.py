"""Live charge and energy: the per-second accumulator the live counters and the rollups share, checked against
a reference integrator and a trade example."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import trapezoid

from logger.core import GAP_S, Pair, Seconds

PAIR = [Pair("out", "v", "a")]
GAP_US = round(GAP_S * 1e6)


def _feed(seconds: Seconds, t_s: np.ndarray, volts: np.ndarray, amps: np.ndarray, seq: np.ndarray | None = None,
          segment: np.ndarray | None = None) -> None:
    t = (np.asarray(t_s) * 1e6).astype(np.int64)
    seq = np.arange(len(t)) if seq is None else seq
    segment = np.zeros(len(t), dtype=np.int32) if segment is None else segment
    seconds.add(t, seq, segment, t + 1_800_000_000_000_000, np.vstack((volts, amps)).astype(np.float64))


def _charge_as(seconds: Seconds) -> float:
    return float(seconds.integral[1])


def test_charge_on_uneven_timestamps_matches_scipy() -> None:
    t = np.array([0.0, 1.0, 2.0, 4.0, 5.0, 10.0])
    amps = np.array([1.0, 1.0, 2.0, 2.0, 0.0, 0.0])
    volts = np.array([12.0, 12.0, 11.5, 11.5, 12.0, 12.0])
    s = Seconds(["v", "a"], PAIR, GAP_US)
    _feed(s, t, volts, amps)  # one frame per step: nothing missing, so every step is integrated
    # Reference: scipy.integrate.trapezoid on the same arrays; 7.5 A s by hand (trapezoid rule).
    assert _charge_as(s) == pytest.approx(trapezoid(amps, t)) == pytest.approx(7.5)
    assert s.integral[2] == pytest.approx(trapezoid(volts * amps, t))


def test_totals_do_not_depend_on_batches() -> None:
    rng = np.random.default_rng(2)
    t = np.cumsum(rng.uniform(0.0005, 0.0015, 5000))
    volts, amps = 12.0 + rng.normal(0, 0.1, 5000), 2.0 + rng.normal(0, 0.1, 5000)
    whole, split = Seconds(["v", "a"], PAIR, GAP_US), Seconds(["v", "a"], PAIR, GAP_US)
    _feed(whole, t, volts, amps)
    seq = np.arange(5000)
    for a, b in [(0, 1), (1, 1000), (1000, 1001), (1001, 5000)]:
        _feed(split, t[a:b], volts[a:b], amps[a:b], seq=seq[a:b])
    assert _charge_as(split) == pytest.approx(_charge_as(whole), rel=1e-12)
    assert split.integral[2] == pytest.approx(whole.integral[2], rel=1e-12)


def test_rated_capacity_discharge() -> None:
    # A 2.0 Ah cell discharged at 0.2 It = 0.4 A for 5 h delivers 2.000 Ah (the rated-capacity test of
    # IEC 61960-3 discharges at 0.2 It; value from memory).
    t = np.arange(0.0, 5 * 3600.0 + 1.0, 1.0)
    s = Seconds(["v", "a"], PAIR, GAP_US, keep_rows=False)
    _feed(s, t, np.full(len(t), 3.7), np.full(len(t), 0.4))
    assert _charge_as(s) / 3600 == pytest.approx(2.000, abs=1e-9)
    assert s.integral[2] / 3600 == pytest.approx(2.000 * 3.7, abs=1e-9)


def test_missing_frames_and_restarts_are_not_integrated() -> None:
    s = Seconds(["v", "a"], PAIR, GAP_US)
    _feed(s, np.array([0.0, 0.5]), np.full(2, 12.0), np.ones(2), seq=np.array([0, 1]))
    # the link was down for 30 s: 60 frames of 0.5 s missing
    _feed(s, np.array([30.5, 31.0]), np.full(2, 12.0), np.ones(2), seq=np.array([61, 62]))
    # the device restarted 0.2 s later: a new segment, never integrated across however short
    _feed(s, np.array([31.2, 31.7]), np.full(2, 12.0), np.ones(2), seq=np.array([63, 64]),
          segment=np.array([1, 1], dtype=np.int32))
    assert _charge_as(s) == pytest.approx(1.5)
    s.reset_totals()
    assert _charge_as(s) == 0.0
