"""The simulated rig's physics: the meter's capacitor node, the load's operating points, the battery's droop,
block-size invariance, and the shipped scenarios with their ground truth."""

from __future__ import annotations

import itertools
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from logger.cal.apply import Calibrator
from logger.plan import zener
from logger.rig import parse_rig
from logger.sim import MeterCircuit, MeterNode, ScenarioError, load_scenario, scenario_names
from logger.sim.battery import Battery
from logger.sim.load import CC, CP, CR, OFF, LoadSchedule, LoadStep, operating_point
from logger.sim.rail import Rail, RailSpec
from logger.sim.scenario import parse_scenario
from logger.sim.supply import Fault, RegulatedSupply, fault_envelope
from logger.wire import Decoder, DeviceHeader, FrameBatch

RATE_HZ = 1000.0

# -- the meter's capacitor node --------------------------------------------------------------------


def reference(circuit: MeterCircuit, t: np.ndarray, rail: np.ndarray, v0: float, on: bool):
    """The same circuit through scipy's adaptive solver, with the lockout as terminal events.

    The rail between samples is the straight line the stepper assumes too.
    """
    c = circuit

    def rhs(s: float, v: np.ndarray, on: bool) -> np.ndarray:
        x = np.interp(s, t, rail)
        return ((x - v) / c.series_ohm - c.draw_a(v, on)) / c.cap_f

    out, switches, start, state, v = np.empty(len(t)), [], t[0], on, v0
    while True:
        def lockout(s: float, y: np.ndarray, on: bool = state) -> float:
            return y[0] - (c.off_v if on else c.on_v)

        lockout.terminal, lockout.direction = True, (-1 if state else 1)
        todo = t[t >= start]
        sol = solve_ivp(rhs, (start, t[-1]), [v], args=(state,), method="DOP853", t_eval=todo, events=lockout,
                        rtol=1e-11, atol=1e-12, max_step=1e-3)
        out[len(t) - len(todo) : len(t) - len(todo) + len(sol.t)] = sol.y[0]
        if sol.status != 1:
            return out, switches
        start, v, state = sol.t_events[0][0], float(sol.y_events[0][0][0]), not state
        switches.append((start, state))


def run_node(circuit: MeterCircuit, t: np.ndarray, rail: np.ndarray, v0: float, on: bool):
    node = MeterNode(circuit)
    node.start(t[0], rail[0], v0, on)
    v, _ = node.advance(t[1:], rail[1:])
    return np.concatenate(([v0], v)), node


def test_node_charge_matches_solve_ivp() -> None:
    # From 5 V with the meter running, a 30 V rail charges the node through the knee onto the Zener.
    c = MeterCircuit()
    t = np.arange(0, 1000) / RATE_HZ
    rail = np.full(t.shape, 30.0)
    ours, node = run_node(c, t, rail, 5.0, True)
    ref, switches = reference(c, t, rail, 5.0, True)
    assert ours[-1] == pytest.approx(c.equilibrium(30.0, True), abs=1e-6) and ours[-1] > c.zener_v
    # The stepper is exact on each linear segment (closed form), so what is left is the reference solver's
    # own error, rtol 1e-11 on about 10 V, i.e. 1e-10 V (measured: 9e-11 V); 1e-8 V leaves a margin of 100.
    assert np.max(np.abs(ours - ref)) < 1e-8
    assert switches == [] and node.switches == []


def test_node_discharge_on_a_falling_rail_matches_solve_ivp() -> None:
    # The rail ramps from 20 V to 9 V in 200 ms and holds: off the Zener, through the regulated range,
    # below the knee, and settling above drop-out (9 V keeps the default meter on).
    c = MeterCircuit()
    t = np.arange(0, 600) / RATE_HZ
    rail = np.interp(t, [0.0, 0.05, 0.25, 1.0], [20.0, 20.0, 9.0, 9.0])
    v0 = c.equilibrium(20.0, True)
    ours, node = run_node(c, t, rail, v0, True)
    ref, switches = reference(c, t, rail, v0, True)
    assert np.max(np.abs(ours - ref)) < 1e-8  # as above (measured: 2e-10 V)
    assert ours[-1] == pytest.approx(c.equilibrium(9.0, True), abs=1e-3) and ours[-1] < c.knee_v
    assert switches == [] and node.switches == []


def test_node_cycles_through_dropout_and_restart_like_solve_ivp() -> None:
    c = MeterCircuit()
    t = np.arange(0, 500) / RATE_HZ
    rail = np.full(t.shape, 7.0)
    ours, node = run_node(c, t, rail, c.on_v, True)
    ref, switches = reference(c, t, rail, c.on_v, True)
    assert len(switches) >= 8
    ours_sw = [(s.t_s, s.on) for s in node.switches]
    assert [on for _, on in ours_sw] == [on for _, on in switches]
    # Switch times: bisection on the closed form (to 2^-52 of a sample) against the solver's event
    # location (rtol 1e-11 over a 40-60 ms swing): both far below a nanosecond (measured: 3e-15 s).
    assert np.max(np.abs(np.array([s for s, _ in ours_sw]) - [s for s, _ in switches])) < 1e-9
    assert np.max(np.abs(ours - ref)) < 1e-8


def flicker_period(c: MeterCircuit, rail_v: float) -> float:
    """One off/on cycle from the first-order RC response t = RC ln((V_inf - V0) / (V_inf - V1)) (any
    circuits handbook), with V_inf and R the Thevenin equivalent seen by the capacitor in each state."""
    r_run = c.knee_v / c.run_a  # below the knee the running meter is a resistor
    v_run = rail_v * r_run / (c.series_ohm + r_run)
    tau_run = c.cap_f * c.series_ohm * r_run / (c.series_ohm + r_run)
    v_idle = rail_v * c.off_ohm / (c.series_ohm + c.off_ohm)
    tau_idle = c.cap_f * c.series_ohm * c.off_ohm / (c.series_ohm + c.off_ohm)
    discharge = tau_run * math.log((v_run - c.on_v) / (v_run - c.off_v))
    charge = tau_idle * math.log((v_idle - c.off_v) / (v_idle - c.on_v))
    return discharge + charge


def simulated_period(c: MeterCircuit, rail_v: float, seconds: float) -> tuple[float, int]:
    node = MeterNode(c)
    t = np.arange(0, int(seconds * RATE_HZ)) / RATE_HZ
    node.advance(t, np.full(t.shape, rail_v))
    offs = np.array([s.t_s for s in node.switches if not s.on])
    return float(np.mean(np.diff(offs[1:]))), len(node.switches)


@pytest.mark.parametrize("rail_v", [5.0, 7.0, 7.9])
def test_flicker_period_agrees_with_rc_charge_and_discharge_times(rail_v: float) -> None:
    c = MeterCircuit()
    assert c.restart_rail_v() < rail_v < c.dropout_rail_v()  # the flicker band of this meter
    period, switches = simulated_period(c, rail_v, 10.0)
    assert switches > 10
    assert period == pytest.approx(flicker_period(c, rail_v), rel=1e-9)
    assert c.cycle(rail_v).period_s == pytest.approx(flicker_period(c, rail_v), rel=1e-12)  # the planner's figure


def test_bigger_capacitor_flickers_slower_but_still_flickers() -> None:
    small, big = MeterCircuit(cap_f=100e-6), MeterCircuit(cap_f=1000e-6)
    p_small, n_small = simulated_period(small, 7.0, 10.0)
    p_big, n_big = simulated_period(big, 7.0, 10.0)
    assert p_big == pytest.approx(10 * p_small, rel=1e-9)  # both times scale with C
    assert p_big > p_small and n_small > n_big >= 10
    assert p_small == pytest.approx(0.0955, abs=1e-4)  # about 10 Hz with 100 uF, 1 Hz with 1000 uF


def test_default_meter_drops_out_near_8_volts_like_the_trade_rule() -> None:
    # Trade rule (common practice, no source): a 12 V Zener with about 5 mA minimum current feeding a
    # meter that draws about 10 mA, through 1 kOhm from a 35 V rail, keeps the meter running down to
    # roughly 8 V input.
    c = MeterCircuit()
    assert (c.series_ohm, c.zener_v, c.run_a) == (1000.0, 12.0, 0.010)
    zener_a = (c.equilibrium(35.0, True) - c.zener_v) / c.zener_ohm
    assert zener_a >= 0.005  # 12.9 mA left for the Zener at 35 V
    node = MeterNode(c)
    t = np.arange(0, int(60 * RATE_HZ)) / RATE_HZ
    node.advance(t, np.interp(t, [0.0, 60.0], [35.0, 5.0]))  # a slow fall, 0.5 V/s
    first_off = next(s for s in node.switches if not s.on)
    assert c.dropout_rail_v() == pytest.approx(8.01, abs=0.01)  # steady-state figure
    assert 7.5 < first_off.rail_v < 8.5  # what the falling rail shows: 7.99 V


def first_switch(c: MeterCircuit, rail_from: float, rail_to: float, on: bool) -> float:
    """The rail at the simulated meter's first switch to ``on`` while the rail ramps slowly, at 0.1 V/s."""
    seconds = abs(rail_to - rail_from) * 10.0
    t = np.arange(0, int(seconds * RATE_HZ)) / RATE_HZ
    node = MeterNode(c)
    node.start(0.0, rail_from, c.equilibrium(rail_from, not on), not on)
    node.advance(t, np.interp(t, [0.0, seconds], [rail_from, rail_to]))
    return next(s.rail_v for s in node.switches if s.on is on)


@pytest.mark.parametrize(("vz_v", "r_ohm", "spec_kw"), [
    (12.0, 1000.0, {}),  # the trade's feed: 35 V, 1 kohm, 12 V Zener, a 10 mA meter
    (5.1, 820.0, {"cap_f": 1e-3, "meter_min_v": 3.0}),  # the knee above the Zener: always in drop-out
    (12.0, 1500.0, {"meter_knee_v": 4.0, "meter_on_v": 6.0}),  # the cycle passes the knee
])
def test_the_plan_predicts_what_the_simulated_meter_does(vz_v: float, r_ohm: float, spec_kw: dict) -> None:
    """One meter model: where ``plan zener`` says the meter drops out, restarts and how fast it cycles is what
    the simulator, stepping the same circuit in time, then shows."""
    feed = zener.plan(zener.ZenerSpec(vin_min_v=35.0, vin_max_v=35.0, vz_v=vz_v, meter_a=0.010, **spec_kw), r_ohm)
    c = feed.circuit
    # a first-order system following a ramp lags it by rate x tau (common practice, no source): at 0.1 V/s
    # the switch comes that much past the steady figure, and no further
    for on, steady_v, node_v in ((False, feed.meter_runs_to_v, c.off_v), (True, feed.meter_restarts_at_v, c.on_v)):
        lag_v = 0.1 * c.thevenin(not on, c.segment(node_v), steady_v)[1]
        seen_v = first_switch(c, 2.0, 20.0, on) if on else first_switch(c, 20.0, 2.0, on)
        assert (seen_v - steady_v) * (1 if on else -1) == pytest.approx(lag_v, abs=0.2 * lag_v + 2e-3)
    cycle = feed.cycling()
    assert cycle is not None
    period, switches = simulated_period(c, cycle.rail_v, 40 * cycle.period_s)
    assert switches > 20 and period == pytest.approx(cycle.period_s, rel=1e-9)


def test_the_trade_figure_for_the_default_feed_is_the_plans() -> None:
    # Trade rule (common practice, no source): 35 V through 1 kOhm into a 12 V Zener, a meter of about
    # 10 mA keeps running down to roughly 8 V input.
    feed = zener.plan(zener.ZenerSpec(vin_min_v=35.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010), 1000.0)
    assert feed.circuit == MeterCircuit()  # the simulator's default meter is the planner's
    assert 7.5 < feed.meter_runs_to_v < 8.5


@given(st.lists(st.integers(1, 2999), max_size=6))
@settings(max_examples=25, deadline=None)
def test_node_is_block_size_invariant(cuts: list[int]) -> None:
    c = MeterCircuit(cap_f=220e-6)
    t = 12.0 + np.arange(0, 3000) / RATE_HZ
    rail = np.interp(t, [12.0, 13.5, 15.0], [9.0, 5.5, 9.0]) + 0.05 * np.sin(2 * np.pi * 100 * t)
    whole, _ = MeterNode(c).advance(t, rail)
    node = MeterNode(c)
    parts = [node.advance(t[a:b], rail[a:b])[0] for a, b in zip([0, *sorted(cuts)], [*sorted(cuts), 3000],
                                                                  strict=True)]
    assert len(node.switches) > 2
    assert np.array_equal(np.concatenate(parts), whole)


# -- the load's operating point --------------------------------------------------------------------


def point(mode: int, value: float, emf: float = 24.0, r: float = 0.1, **kw) -> tuple[float, float]:
    v, i = operating_point(np.array([emf]), r, np.array([mode]), np.array([value]), **kw)
    return float(v[0]), float(i[0])


def test_operating_points_against_hand_solved_values() -> None:
    # Ohm's law and P = V I with V = E - I R (common practice, no source), solved by hand for
    # E = 24 V, R = 0.1 Ohm.
    assert point(CC, 2.0) == pytest.approx((23.8, 2.0))
    assert point(CR, 12.0) == pytest.approx((24.0 * 12.0 / 12.1, 24.0 / 12.1))  # 23.8017 V, 1.98347 A
    v, i = point(CP, 40.0)  # 0.1 I^2 - 24 I + 40 = 0: I = (24 - sqrt(560)) / 0.2 = 1.67840 A
    assert i == pytest.approx(1.678404, abs=1e-6) and v == pytest.approx(23.832160, abs=1e-6)
    assert v * i == pytest.approx(40.0)
    assert point(CP, 40.0, r=0.0) == pytest.approx((24.0, 40.0 / 24.0))
    assert point(OFF, 5.0) == (24.0, 0.0)


def test_load_drops_out_when_the_supply_cannot_deliver() -> None:
    # Constant power past the maximum-power point E^2 / 4R (1440 W here) has no operating point.
    assert point(CP, 1400.0) == pytest.approx((24.0 - 0.1 * point(CP, 1400.0)[1], point(CP, 1400.0)[1]))
    assert point(CP, 1441.0) == (24.0, 0.0)
    # Undervoltage limit: 5 A through 4 Ohm leaves 4 V, below a 5 V limit.
    assert point(CC, 5.0, r=4.0, min_v=5.0) == (24.0, 0.0)
    assert point(CC, 5.0, r=4.0, min_v=3.0) == pytest.approx((4.0, 5.0))
    # Current limit: a resistor is held at the limit, constant current or power beyond it collapses.
    assert point(CR, 4.0, limit_a=3.0) == pytest.approx((12.0, 3.0))
    assert point(CC, 3.5, limit_a=3.0) == (24.0, 0.0)
    assert point(CP, 80.0, limit_a=3.0) == (24.0, 0.0)


def test_load_schedule_steps_ramps_and_repeats() -> None:
    load = LoadSchedule((LoadStep(10.0, "cc", 1.0, ramp_to=3.0, ramp_s=20.0), LoadStep(40.0, "cr", 8.0)),
                        period_s=60.0)
    modes, values = load.setting(np.array([5.0, 10.0, 20.0, 35.0, 45.0, 80.0, 125.0, 135.0]))
    assert modes.tolist() == [OFF, CC, CC, CC, CR, CC, OFF, CC]
    assert values[1:4].tolist() == [1.0, 2.0, 3.0] and values[4] == 8.0
    assert values[5] == pytest.approx(2.0) and values[7] == pytest.approx(1.5)


def test_fault_envelope_levels_and_edges() -> None:
    f = Fault("sag", 1.0, 0.5, 0.4, fall_s=0.1, rise_s=0.2)
    env = fault_envelope([f], np.array([0.9, 1.05, 1.1, 1.6, 1.7, 1.8, 2.0]))
    assert env == pytest.approx([1.0, 0.7, 0.4, 0.4, 0.7, 1.0, 1.0])
    with pytest.raises(ValueError, match="dropout"):
        Fault("sag", 0.0, 0.1, 0.0)


# -- the battery's droop ---------------------------------------------------------------------------


def pack_rail(internal_ohm: float, amps: float = 2.0) -> Rail:
    pack = Battery(cells=4, capacity_ah=2.0, internal_ohm=internal_ohm)
    load = LoadSchedule((LoadStep(0.0, "cc", amps),), min_v=12.0)
    return Rail(RailSpec("pack", pack, load, "pack_v", "pack_a"))


def cutoff_s(rail: Rail) -> float:
    t = np.arange(0.0, 4000.0, 0.01)
    return float(t[np.argmax(rail.values(t)[1] == 0)])


def test_battery_droop_is_monotonic_and_cuts_off_at_capacity_over_current() -> None:
    # Discharge time = capacity / current (common practice, no source): 2.0 Ah at 2.0 A is 3600 s. With
    # no internal resistance the loaded voltage reaches the 12.0 V cut-off (3.0 V a cell, the curve's
    # empty point) just as the charge runs out.
    rail = pack_rail(0.0)
    end = cutoff_s(rail)
    assert end == pytest.approx(3600.0, abs=2.0)
    t = np.arange(0.0, end, 1.0)
    volts, amps = rail.values(t)
    assert np.all(np.diff(volts) <= 0) and np.all(amps == 2.0)
    assert volts[0] == pytest.approx(16.8) and volts[-1] == pytest.approx(12.0, abs=0.05)
    after_v, after_a = rail.values(np.array([end + 1.0, end + 100.0]))
    assert np.all(after_a == 0) and after_v[1] == after_v[0] == pytest.approx(12.0, abs=0.01)  # at rest


def test_internal_resistance_brings_the_cutoff_forward() -> None:
    # With 0.16 Ohm the 12.0 V cut-off comes when the open-circuit voltage is 12.32 V: from the curve,
    # at SoC 0.0053, so 0.53 % of the charge (19 s at 1C) is left in the pack.
    rail = pack_rail(0.16)
    pack = rail.spec.supply
    cell_v = 3.0 + 2.0 * 0.16 / 4
    soc_left = float(np.interp(cell_v, pack.curve_ocv_v, pack.curve_soc))
    assert cutoff_s(rail) == pytest.approx(3600.0 * (1.0 - soc_left), abs=2.0)
    assert cutoff_s(rail) < 3600.0 - 15.0


# -- scenarios -------------------------------------------------------------------------------------


def test_shipped_scenarios_are_listed() -> None:
    assert scenario_names() == ["battery-discharge", "bench-soak", "demo-bench", "split-15v"]


@pytest.mark.parametrize("name", ["battery-discharge", "bench-soak", "demo-bench", "split-15v"])
def test_scenario_loads_checks_its_rig_and_generates(name: str) -> None:
    scenario = load_scenario(name)
    rig = parse_rig(scenario.rig.text, "extracted")  # the [rig] table is a plain rig file
    assert [(c.name, c.input, c.negative) for c in rig.channels] == [
        (c.name, c.input, c.negative) for c in scenario.rig.channels]
    device = scenario.make_device(seed=3, clock_start_us=0)
    decoder = Decoder()
    items = decoder.feed(device.generate(2.0))
    header = items[0]
    assert isinstance(header, DeviceHeader) and header.channels == tuple(c.name for c in rig.channels)
    assert decoder.counters.rejected == device.truth.lines_damaged
    frames = [b for b in items if isinstance(b, FrameBatch)]
    counts = np.concatenate([b.counts for b in frames])
    device_us = np.concatenate([b.device_us for b in frames]).astype(np.float64)
    t_s = device_us / (1e6 * (1 + scenario.link.drift_ppm * 1e-6))  # clock_start_us = 0, no wrap in 2 s
    measured = Calibrator(scenario.rig, header).apply(counts)
    true = scenario.true_values(t_s)
    # The calibrated reading differs from the truth by the simulated ADC's errors only: gain error,
    # offset, non-linearity bow and noise (5 sigma).
    lsb = np.array([3.3 / 4096 * abs(c.units_per_pin_volt()) for c in scenario.rig.channels])
    gain = np.array([abs(scenario.adc.gain_error.get(c.name, 0.0)) for c in scenario.rig.channels])
    offset = np.array([abs(scenario.adc.offset_lsb.get(c.name, 0.0)) for c in scenario.rig.channels])
    allowed = np.abs(true) * gain + (offset + scenario.adc.inl_lsb + 5 * scenario.adc.noise_lsb + 1) * lsb
    assert np.all(np.abs(measured - true) <= allowed)


def test_bench_soak_ground_truth() -> None:
    scenario = load_scenario("bench-soak")
    events = scenario.true_events(5000.0)
    faults = [(e.kind, e.start_s, e.residual) for e in events if e.kind != "meter_off"]
    assert faults == [("sag", 1500.0, 0.7), ("sag", 2100.0, 0.7), ("sag", 2700.0, 0.4), ("sag", 3300.0, 0.4),
                      ("sag", 3900.0, 0.7), ("dropout", 4500.0, 0.0)]
    meter = [e for e in events if e.kind == "meter_off"]
    assert len(meter) == 1 and 4500.0 < meter[0].start_s < meter[0].end_s < 4500.5  # rides through dips
    sag = next(e for e in events if e.start_s == 3300.0)
    assert sag.duration_s == pytest.approx(0.3, abs=1e-4) and sag.residual_v == pytest.approx(9.53, abs=0.01)


def test_scenario_true_values_sign_a_negative_rail() -> None:
    scenario = load_scenario("split-15v")
    values = scenario.true_values(np.array([10.0, 240.05]))
    names = [c.name for c in sorted(scenario.rig.channels, key=lambda c: c.input)]
    neg = values[:, names.index("neg_v")]
    assert neg[0] == pytest.approx(-15.0 + 0.06 * 15.0 / 50.06, abs=0.01)
    assert neg[1] == pytest.approx(-6.0, abs=0.05)  # the 40 % dip
    assert values[1, names.index("pos_v")] == pytest.approx(14.985, abs=0.01)  # untouched


def test_scenario_counts_are_block_size_invariant() -> None:
    scenario = load_scenario("bench-soak")
    t = 5600.0 + np.arange(0, 2000) / RATE_HZ  # inside the slow sag: the meter flickers
    whole = scenario.make_model(seed=5).counts(t)
    model = scenario.make_model(seed=5)
    cuts = [0, 1, 7, 500, 501, 1333, 2000]
    parts = [model.counts(t[a:b]) for a, b in itertools.pairwise(cuts)]
    assert np.array_equal(np.concatenate(parts), whole)
    assert sum(len(s) for s in model.switches().values()) >= 4


def test_scenario_device_bytes_do_not_depend_on_read_sizes() -> None:
    scenario = load_scenario("battery-discharge")
    one = scenario.make_device(seed=2, clock_start_us=7).generate(3.0)
    device = scenario.make_device(seed=2, clock_start_us=7)
    many = b"".join(device.generate(s) for s in (0.0004, 0.5, 0.5013, 1.7, 3.0))
    assert one == many


def test_broken_scenario_names_file_and_key(tmp_path: Path) -> None:
    text = load_scenario("split-15v").text
    cases = {
        "setpoint_v = 15.0\nsource_ohm = 0.05": ("setpont_v = 15.0\nsource_ohm = 0.05", "rail[0].supply.setpont_v"),
        'name = "pos_v"': ('name = "Pos V"', "rig: channel[0].name"),
        "level = 0.4": ('level = "deep"', "rail[1].fault[0].level"),
        'volts = "neg_v"': ('volts = "neg_x"', "rail[1].volts"),
    }
    for old, (new, key) in cases.items():
        path = tmp_path / "broken.toml"
        path.write_text(text.replace(old, new, 1), encoding="utf-8")
        with pytest.raises(ScenarioError) as info:
            load_scenario(path)
        message = str(info.value)
        assert "\n" not in message and message.startswith(f"{path}: ") and key in message
    with pytest.raises(ScenarioError, match="no such scenario"):
        load_scenario(tmp_path / "missing.toml")
    with pytest.raises(ScenarioError, match=r"^<s>: rail\[1\]\.fault: faults at 240 s and 240.05 s overlap$"):
        parse_scenario(text.replace("start_s = 480.0", "start_s = 240.05"), "<s>")


def test_a_repeating_scenario_starts_its_faults_again_and_a_pack_cannot_repeat() -> None:
    scenario = load_scenario("split-15v")
    assert scenario.repeats and scenario.duration_s == 600.0
    once = [(e.kind, e.start_s) for e in scenario.true_events(600.0) if e.kind != "meter_off"]
    twice = [(e.kind, e.start_s) for e in scenario.true_events(1200.0) if e.kind != "meter_off"]
    assert twice == once + [(kind, start + 600.0) for kind, start in once]
    # the rails at a time and one period later are the same (ripple at 100 Hz has a whole number of cycles)
    t = np.array([10.0, 240.05, 480.2])
    assert np.allclose(scenario.true_values(t + 600.0), scenario.true_values(t), atol=1e-9)
    assert scenario.run_length_s(43200.0) is None and scenario.run_length_s(None) == 600.0  # --duration stops it
    assert scenario.run_length_s(5.0) == 600.0
    pack = load_scenario("battery-discharge")
    with pytest.raises(ScenarioError, match=r"^scenario 'battery-discharge' lasts 1h5m and cannot repeat "
                                            r"\(its `repeat` is false\); ask for --duration 1h5m or less$"):
        pack.run_length_s(7200.0)
    with pytest.raises(ScenarioError, match=r"^<s>: rail\[0\]\.supply: a battery pack runs down, so its scenario "
                                            "cannot repeat; set repeat = false$"):
        parse_scenario(pack.text.replace("duration_s = 3900.0", "duration_s = 3900.0\nrepeat = true"), "<s>")
    late = scenario.text.replace("duration_s = 600.0", "duration_s = 300.0")
    with pytest.raises(ScenarioError, match=r"^<s>: rail\[1\]\.fault: a fault ends at .* past the 300 s after which"):
        parse_scenario(late, "<s>")


def test_regulated_supply_sags_under_load() -> None:
    supply = RegulatedSupply(24.0, source_ohm=0.08)
    rail = Rail(RailSpec("out", supply, LoadSchedule((LoadStep(0.0, "cc", 2.5),))))
    v, i = rail.values(np.array([1.0]))
    assert (v[0], i[0]) == pytest.approx((24.0 - 2.5 * 0.08, 2.5))  # V = E - I R
