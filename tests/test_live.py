"""Live state: charge and energy counters, checked against a reference integrator and a trade example."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import trapezoid

from logger.live import Totals
from logger.rig import PowerPair

PAIR = (PowerPair("out", 0, 1),)


def _us(seconds: list[float] | np.ndarray) -> np.ndarray:
    return (1_800_000_000_000_000 + np.asarray(seconds) * 1e6).astype(np.int64)


def test_charge_on_uneven_timestamps_matches_scipy() -> None:
    t = np.array([0.0, 1.0, 2.0, 4.0, 5.0, 10.0])
    amps = np.array([1.0, 1.0, 2.0, 2.0, 0.0, 0.0])
    volts = np.array([12.0, 12.0, 11.5, 11.5, 12.0, 12.0])
    totals = Totals(PAIR, max_step_s=10.0)
    totals.add(_us(t), np.column_stack((volts, amps)))
    # Reference: scipy.integrate.trapezoid on the same arrays; 7.5 A s by hand (trapezoid rule).
    assert totals.charge_as[0] == pytest.approx(trapezoid(amps, t)) == pytest.approx(7.5)
    assert totals.energy_ws[0] == pytest.approx(trapezoid(volts * amps, t))


def test_totals_do_not_depend_on_batches() -> None:
    rng = np.random.default_rng(2)
    t = np.cumsum(rng.uniform(0.0005, 0.0015, 5000))
    values = np.column_stack((12.0 + rng.normal(0, 0.1, 5000), 2.0 + rng.normal(0, 0.1, 5000)))
    whole, split = Totals(PAIR), Totals(PAIR)
    whole.add(_us(t), values)
    for a, b in [(0, 1), (1, 1000), (1000, 1001), (1001, 5000)]:
        split.add(_us(t[a:b]), values[a:b])
    assert split.charge_as[0] == pytest.approx(whole.charge_as[0], rel=1e-12)
    assert split.energy_ws[0] == pytest.approx(whole.energy_ws[0], rel=1e-12)


def test_rated_capacity_discharge() -> None:
    # A 2.0 Ah cell discharged at 0.2 It = 0.4 A for 5 h delivers 2.000 Ah (the rated-capacity test of
    # IEC 61960-3 discharges at 0.2 It; value from memory).
    t = np.arange(0.0, 5 * 3600.0 + 1.0, 1.0)
    totals = Totals(PAIR)
    totals.add(_us(t), np.column_stack((np.full(len(t), 3.7), np.full(len(t), 0.4))))
    assert totals.charge_ah[0] == pytest.approx(2.000, abs=1e-9)
    assert totals.energy_wh[0] == pytest.approx(2.000 * 3.7, abs=1e-9)


def test_a_long_silence_is_not_integrated() -> None:
    totals = Totals(PAIR, max_step_s=1.0)
    totals.add(_us([0.0, 0.5]), np.array([[12.0, 1.0], [12.0, 1.0]]))
    totals.add(_us([30.5, 31.0]), np.array([[12.0, 1.0], [12.0, 1.0]]))  # the link was down for 30 s
    assert totals.charge_as[0] == pytest.approx(1.0)
    totals.reset()
    assert totals.charge_ah == (0.0,)
