"""``railtap plan``: preferred series, divider, shunt and Zener feed sizing, their reports, errors and rig lines.

Every check of a number against the outside world names its source beside it.
"""

from __future__ import annotations

import argparse
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from logger.plan import PlanError, add_plan_command, divider, series, shunt, zener, zener_report
from logger.plan.report import SELV_LINE
from logger.plan.values import format_value, parse_value
from logger.rig import parse_rig

# -- preferred series ----------------------------------------------------------------------------------


def test_e24_table_is_the_standards() -> None:
    # IEC 60063, E24 series table (value from memory)
    assert series.E24 == (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
                          3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
    # IEC 60063, E24 (value from memory): the values the rounded geometric series gets wrong are all there
    for value in (2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1):
        assert value in series.E24


def test_e24_is_not_the_rounded_geometric_series() -> None:
    # IEC 60063 (value from memory): these E24 values differ from round(10 ** (i / 24), 1), which is why the
    # planner types the table in instead of computing it
    formula = [round(10 ** (i / 24), 1) for i in range(24)]
    differ = {table for table, rounded in zip(series.E24, formula, strict=True) if table != rounded}
    assert differ == {2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2}


def test_e12_is_every_other_e24_value() -> None:
    # IEC 60063, E12 series table (value from memory)
    assert series.E12 == (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
    assert series.E24[::2] == series.E12


def test_e96_table_has_96_values_on_the_rounded_series() -> None:
    # IEC 60063, E96 series (value from memory): 96 values per decade, each 10 ** (i / 96) to three figures
    assert len(series.E96) == 96
    assert list(series.E96) == [round(10 ** (i / 96), 2) for i in range(96)]
    # IEC 60063, E96 table (value from memory): a few values as printed
    for value in (1.00, 1.02, 1.21, 2.49, 3.32, 4.99, 6.04, 9.09, 9.76):
        assert value in series.E96


def test_series_values_are_exact_and_span_the_decades() -> None:
    e12 = series.series_values("E12", 1.0, 1e6)
    assert 4700.0 in e12 and 470e3 in e12 and 1e6 in e12 and 4.7 in e12
    assert len(e12) == 12 * 6 + 1
    assert np.all(np.diff(e12) > 0)
    assert series.series_values("E24", 0.001, 0.0011)[0] == 0.001
    assert series.nearest(920.0, "E12") == 1000.0 and series.nearest(920.0, "E24") == 910.0
    assert series.neighbours(1000.0, "E12") == (820.0, 1200.0)


# -- values ------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("text", "unit", "value"), [
    ("10k", "ohm", 10e3), ("4.7k", "ohm", 4700.0), ("4k7", "ohm", 4700.0), ("1M", "ohm", 1e6), ("1M5", "ohm", 1.5e6),
    ("0.01", "ohm", 0.01), ("0R1", "ohm", 0.1), ("10R", "ohm", 10.0), ("1m", "ohm", 1e-3), ("10 kohm", "ohm", 10e3),
    ("100u", "A", 1e-4), ("10mA", "A", 0.01), ("3.3V", "V", 3.3), ("0.5 W", "W", 0.5), ("5%", "%", 5.0),
    ("1e3", "ohm", 1000.0), ("50", "x", 50.0),
])
def test_values_as_typed(text: str, unit: str, value: float) -> None:
    assert parse_value(text, unit, "--x") == pytest.approx(value, rel=1e-12)


@pytest.mark.parametrize(("text", "unit"), [("12x", "V"), ("k", "ohm"), ("", "A"), ("5k", "x"), ("ten", "W")])
def test_bad_values_name_the_option(text: str, unit: str) -> None:
    with pytest.raises(PlanError, match=r"^--opt: ") as info:
        parse_value(text, unit, "--opt")
    assert "\n" not in str(info.value)


def test_values_print_with_prefixes() -> None:
    assert format_value(0.000806, "V") == "806 uV"
    assert format_value(1533.33, "ohm") == "1.53 kohm"
    assert format_value(0.01, "ohm") == "0.01 ohm"
    assert format_value(999.7, "ohm") == "1 kohm"
    assert format_value(1.18e-20, "A") == "1.18e-20 A"


# -- ADC step and divider ----------------------------------------------------------------------------


def test_adc_step_is_full_scale_over_two_to_the_bits() -> None:
    # Analog Devices tutorial MT-001: LSB = FS / 2^N; a 12-bit converter at 3.3 V resolves 0.806 mV
    pair = divider.given_pair(divider.DividerSpec(max_v=3.0), 0.0, 1000.0)
    assert pair.ratio == 1.0
    assert pair.lsb_v == pytest.approx(0.806e-3, abs=0.0005e-3)
    # the same step, times the ratio, at the rail
    pair = divider.given_pair(divider.DividerSpec(max_v=30.0), 100e3, 10e3)
    assert pair.lsb_v == pytest.approx(11 * 3.3 / 4096)


def test_divider_power_in_each_part() -> None:
    # P = V^2 / R with V the voltage across each part (common practice, no source)
    pair = divider.given_pair(divider.DividerSpec(max_v=100.0), 1e6, 33e3)
    v_bottom = 100.0 * 33e3 / (1e6 + 33e3)
    top_w, bottom_w = pair.power_w(100.0)
    assert top_w == pytest.approx((100.0 - v_bottom) ** 2 / 1e6)
    assert bottom_w == pytest.approx(v_bottom**2 / 33e3)
    assert top_w == pytest.approx(9.371e-3, rel=1e-3)
    assert pair.source_ohm == pytest.approx(1e6 * 33e3 / 1.033e6)


def _brute_force(spec: divider.DividerSpec) -> tuple[float, float]:
    """The same rules as choose_pair, as plain loops over the series."""
    values = [float(v) for v in series.series_values(spec.series, divider.SMALLEST_PART_OHM, series.LARGEST_OHM)]
    least = spec.least_total_ohm
    best, best_cost = None, math.inf
    for top in values:
        for bottom in values:
            total, error = top + bottom, (top + bottom) / bottom / spec.aim - 1
            if error < -1e-12 or not least * (1 - 1e-12) <= total <= divider.TOTAL_SPAN * least:
                continue
            cost = math.log2(total / least) + error / divider.RATIO_WEIGHT[spec.series]
            if cost < best_cost:
                best, best_cost = (top, bottom), cost
    assert best is not None
    return best


@settings(max_examples=15, deadline=None)
@given(max_v=st.floats(6.0, 100.0), draw_ua=st.sampled_from([20, 50, 100, 250, 1000]),
       vref_v=st.sampled_from([3.3, 5.0]), name=st.sampled_from(["E12", "E24"]))
def test_chosen_divider_meets_the_limits(max_v: float, draw_ua: int, vref_v: float, name: str) -> None:
    spec = divider.DividerSpec(max_v=max_v, vref_v=vref_v, draw_a=draw_ua * 1e-6, series=name)
    pair = divider.choose_pair(spec)
    assert (pair.r_top, pair.r_bottom) == _brute_force(spec)
    values = series.series_values(name)
    assert pair.r_top in values and pair.r_bottom in values
    assert pair.pin_v(max_v) <= vref_v * (1 - spec.headroom) * (1 + 1e-9)
    assert pair.pin_v(spec.overvoltage_v) <= (spec.pin_rating_v - spec.pin_margin_v) * (1 + 1e-9)
    assert pair.draw_a(max_v) <= spec.draw_a * (1 + 1e-9)
    assert not divider.warnings(pair)


def test_the_overvoltage_lands_a_stated_margin_below_the_pins_rating() -> None:
    """30 V rail, +20 % overvoltage 36 V, pin rated 3.6 V (3.3 V + 0.3 V, a common MCU rating): the pin stays at
    or below 3.4 V at 36 V, not exactly at 3.6 V; the report names the margin, the protection parts and the
    rail-voltage end of R_top (V = V_rail x R_bottom / (R_top + R_bottom), common practice, no source)."""
    spec = divider.DividerSpec(max_v=30.0)
    pair = divider.choose_pair(spec)
    assert pair.pin_v(36.0) <= 3.4 * (1 + 1e-9) and spec.pin_aim == pytest.approx(36.0 / 3.4)
    text = divider.report(pair).render()
    assert "less a 200 mV margin (--pin-margin-v)" in text
    assert "caution: protect the pin: a 1 kohm resistor in series" in text and "Schottky" in text
    assert "caution: R_top's upper end is at rail voltage, up to 36 V" in text


def test_divider_that_cannot_be_made_says_which_option() -> None:
    with pytest.raises(PlanError, match=r"^--draw-a: .*100 Mohm"):
        divider.choose_pair(divider.DividerSpec(max_v=100.0, draw_a=1e-6))
    with pytest.raises(PlanError, match=r"^--max-v: .*without a divider"):
        divider.choose_pair(divider.DividerSpec(max_v=2.5))  # 3.0 V at +20 %: under the pin's 3.6 V less 0.2 V
    with pytest.raises(PlanError, match=r"^--resistor-w: "):
        divider.choose_pair(divider.DividerSpec(max_v=100.0, draw_a=1e-3, resistor_w=1e-3))


def test_given_divider_warns_of_clipping_overvoltage_and_working_voltage() -> None:
    spec = divider.DividerSpec(max_v=100.0, over_v=120.0, resistor_v=75.0)
    lines = divider.warnings(divider.given_pair(spec, 100e3, 10e3))
    assert any("past the ADC's 3.3 V full scale" in line for line in lines)
    assert any("at 120 V (--over-v) the pin sees 10.9 V, above its 3.6 V rating" in line for line in lines)
    assert any("R_top has 109 V across it" in line for line in lines)
    text = divider.report(divider.given_pair(spec, 100e3, 10e3)).render()
    assert "warning: at 120 V (--over-v)" in text and SELV_LINE in text


# -- shunt -------------------------------------------------------------------------------------------


def test_shunt_full_scale_resolution_and_dissipation() -> None:
    sh = shunt.Shunt(shunt.ShuntSpec(shunt_ohm=0.01, gain=50.0, max_a=5.0))
    # Ohm's law: I = V / (gain x R) = 3.3 / (50 x 0.01) (common practice, no source)
    assert sh.full_scale_a == pytest.approx(6.6)
    # Analog Devices tutorial MT-001: one step is full scale / 2^N
    assert sh.lsb_a == pytest.approx(6.6 / 4096)
    assert sh.lsb_a == pytest.approx(1.611e-3, abs=0.001e-3)
    # P = I^2 R (common practice, no source)
    assert sh.power_w(sh.full_scale_a) == pytest.approx(0.4356)
    assert sh.best_gain == pytest.approx(3.3 * 0.95 / 0.05)
    assert not shunt.warnings(sh)
    clipped = shunt.Shunt(shunt.ShuntSpec(shunt_ohm=0.01, gain=100.0, max_a=5.0))
    assert any("past full scale" in line for line in shunt.warnings(clipped))


def test_pga_range_becomes_the_rig_gain() -> None:
    sh = shunt.Shunt(shunt.ShuntSpec(shunt_ohm=0.0015, pga_v=0.256, vref_v=3.3, bits=15))
    # Ohm's law: 0.256 V across 1.5 mohm is 170.7 A (common practice, no source)
    assert sh.full_scale_a == pytest.approx(0.256 / 0.0015)
    rig = parse_rig('name = "t"\n' + shunt.report(sh).rig_text())
    channel = rig.channel("rail_a")
    # a full-scale reading, taken to pin volts with the device's 3.3 V reference, gives full-scale current
    assert 3.3 * channel.units_per_pin_volt() == pytest.approx(sh.full_scale_a, rel=1e-5)


# -- Zener feed --------------------------------------------------------------------------------------


def test_zener_feed_worked_example() -> None:
    # Shunt-regulator design equations: Iz,max = Pz / Vz; R >= (Vin,max - Vz) / (Iz,max + IL,min);
    # R <= (Vin,min - Vz) / (Iz,min + IL,max); P = (Vin,max - Vz)^2 / R. Handbook-style worked example:
    # 35 V, 12 V 0.5 W Zener, Iz,min 5 mA, meter 10 mA -> Iz,max 41.67 mA, smallest 552 ohm with the meter
    # disconnected, largest 1533 ohm for regulation at 35 V, 1 kohm dissipating 0.529 W
    spec = zener.ZenerSpec(vin_min_v=35.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010, pz_w=0.5, iz_min_a=0.005)
    assert zener.iz_max_a(spec) == pytest.approx(41.67e-3, abs=0.01e-3)
    assert zener.smallest_ohm(spec) == pytest.approx(552.0, abs=0.5)
    assert zener.largest_ohm(spec) == pytest.approx(1533.0, abs=0.5)
    feed = zener.plan(spec, 1000.0)
    assert feed.resistor_w == pytest.approx(0.529, abs=0.0005)


def test_zener_feed_limits_of_the_chosen_resistor() -> None:
    spec = zener.ZenerSpec(vin_min_v=35.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010)
    feed = zener.plan(spec, 1000.0)
    # P = V I: the Zener takes the whole 23 mA at 12 V with the meter disconnected (common practice, no source)
    assert feed.zener_worst_w == pytest.approx(12.0 * 0.023)
    # the regulation bound solved for the input: Vin = Vz + R (Iz,min + IL) (shunt-regulator design equations)
    assert feed.regulates_to_v == pytest.approx(12.0 + 1000.0 * 0.015)
    # below its 7 V knee the running meter is a resistor of 7 V / 10 mA = 700 ohm: it turns off at 3.3 V on
    # its supply with 3.3 V / 700 ohm = 4.71 mA through the 1 kohm, so at 3.3 + 4.71 = 8.01 V input (Ohm's law,
    # common practice, no source); the trade reports about 8 V for this feed (common practice, no source)
    assert feed.meter_runs_to_v == pytest.approx(3.3 + 1000.0 * 3.3 / 700.0)
    low = zener.plan(zener.ZenerSpec(35.0, 35.0, 12.0, 0.010, meter_min_v=4.5, meter_on_v=5.0), 1000.0)
    assert low.meter_runs_to_v == pytest.approx(4.5 + 1000.0 * 4.5 / 700.0)
    # 276 mW is 55 % of the Zener's 0.5 W: above a 50 % derating, and said so
    assert any("55 % of its 500 mW rating" in line for line in zener.warnings(feed))


def test_zener_choice_comes_closest_to_the_derating_when_none_meets_it() -> None:
    """28 V to 35 V, 12 V 0.5 W: no resistor both regulates at 28 V (1.07 kohm at most) and keeps the Zener
    within 50 % (1.1 kohm at least). The planner takes the largest preferred value that regulates, 1 kohm at 55 %,
    not the log-middle 820 ohm at 67 %, and says no value meets the derating (shunt-regulator design
    equations, as in the worked example above)."""
    spec = zener.ZenerSpec(vin_min_v=28.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010)
    _, high, derated = zener.window(spec)
    assert not derated and high == pytest.approx(1066.7, abs=0.1)
    feed = zener.plan(spec)
    assert feed.r_ohm == 1000.0 and feed.regulates_to_v <= 28.0
    assert any("55 % of its 500 mW rating" in line for line in zener.warnings(feed))


def test_zener_choice_is_a_preferred_value_inside_the_window() -> None:
    spec = zener.ZenerSpec(vin_min_v=35.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010)
    low, high, derated = zener.window(spec)
    assert derated and low == pytest.approx(1104.0) and high == pytest.approx(1533.3, abs=0.1)
    feed = zener.plan(spec)
    assert feed.r_ohm in series.series_values("E12") and low <= feed.r_ohm <= high
    assert feed.r_ohm == 1200.0
    assert not zener.warnings(feed)
    text = zener_report.report(feed).render()
    assert "a lower resistor keeps the meter alive to a lower input, but wastes more and runs hotter" in text
    assert "1 kohm" in text and "1.5 kohm" in text


def test_zener_plan_says_where_the_meter_cycles_and_how_fast() -> None:
    feed = zener.plan(zener.ZenerSpec(vin_min_v=35.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010), 1000.0)
    cycle = feed.cycling()
    assert cycle is not None and feed.meter_restarts_at_v < cycle.rail_v < feed.meter_runs_to_v
    text = zener_report.report(feed).render()
    assert "on/off cycling           between 4.54 V and 8.01 V input; at 6.28 V about 93.1 ms a cycle" in text
    # ten times the capacitor, ten times the period: both RC times scale with C (common practice, no source)
    slow = zener.plan(zener.ZenerSpec(35.0, 35.0, 12.0, 0.010, cap_f=1e-3), 1000.0).cycling()
    assert slow is not None and slow.period_s == pytest.approx(10 * cycle.period_s, rel=1e-12)
    # a small resistor leaves the meter's own hysteresis: off below its drop-out input, back above its restart
    stiff = zener.plan(zener.ZenerSpec(35.0, 35.0, 12.0, 0.010, meter_on_v=6.0), 100.0)
    assert stiff.cycling() is None and stiff.meter_runs_to_v < stiff.meter_restarts_at_v
    # below its knee the meter draws in proportion to its supply: 10 mA x 5.1 / 7 = 7.29 mA on a 5.1 V Zener
    low_zener = zener.plan(zener.ZenerSpec(24.0, 35.0, 5.1, 0.010), 820.0)
    assert "it draws about 7.29 mA there, not --meter-a" in zener_report.report(low_zener).render()
    assert "on/off cycling           none: once off below 3.77 V input it stays off until the input is back above " \
           "6.01 V" in zener_report.report(stiff).render()


def test_zener_requests_that_cannot_work() -> None:
    with pytest.raises(PlanError, match=r"^--vz: a 12 V Zener cannot regulate from a 10 V"):
        zener.plan(zener.ZenerSpec(vin_min_v=10.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010))
    with pytest.raises(PlanError, match=r"^--pz-w: no series resistor works"):
        zener.plan(zener.ZenerSpec(vin_min_v=15.0, vin_max_v=60.0, vz_v=12.0, meter_a=0.010))
    with pytest.raises(PlanError, match=r"^--vin-min: "):
        zener.plan(zener.ZenerSpec(vin_min_v=36.0, vin_max_v=35.0, vz_v=12.0, meter_a=0.010))


# -- the command ---------------------------------------------------------------------------------------


def _run(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(prog="railtap")
    add_plan_command(parser.add_subparsers())
    args = parser.parse_args(argv)
    return args.run(args)


def test_divider_command_checks_a_pair_typed_as_resistor_codes(capsys) -> None:
    assert _run(["plan", "divider", "--max-v", "48", "--r-top", "150k", "--r-bottom", "4k7"]) == 0
    out = capsys.readouterr().out
    assert "150 kohm (as given)" in out and "4.7 kohm (as given)" in out and "warning:" not in out


def test_divider_command_prints_plan_and_valid_rig_lines(capsys) -> None:
    assert _run(["plan", "divider", "--max-v", "60", "--nominal", "48", "--name", "bus_v", "--input", "3"]) == 0
    out = capsys.readouterr().out
    assert "R_top" in out and "volts per LSB" in out and "pin at 72 V" in out and SELV_LINE in out
    assert _run(["plan", "divider", "--max-v", "60", "--nominal", "48", "--name", "bus_v", "--rig-only"]) == 0
    rig_text = capsys.readouterr().out
    assert rig_text.startswith("[[channel]]")
    channel = parse_rig('name = "t"\n' + rig_text).channel("bus_v")
    assert channel.role == "volts" and channel.nominal == 48.0
    pair = divider.choose_pair(divider.DividerSpec(max_v=60.0))
    assert channel.divider == pytest.approx(pair.ratio, rel=1e-5)


def test_shunt_and_zener_commands_write_rig_lines_that_read_back(capsys) -> None:
    assert _run(["plan", "shunt", "--rated-mv", "75", "--rated-a", "50", "--gain", "20", "--max-a", "40",
                 "--rig-only"]) == 0
    amps = parse_rig('name = "t"\n' + capsys.readouterr().out).channel("rail_a")
    assert amps.shunt_ohm == pytest.approx(0.0015) and amps.gain == 20.0 and amps.high == 40.0
    assert _run(["plan", "zener", "--vin-min", "24", "--vin-max", "35", "--vz", "12", "--meter-a", "10m",
                 "--meter-min-v", "4", "--rig-only"]) == 0
    node = parse_rig('name = "t"\n' + capsys.readouterr().out).channel("meter_v")
    assert node.role == "aux" and node.nominal == 12.0 and node.low == 4.0 and node.divider > 35.0 / 3.3
    assert _run(["plan", "zener", "--vin-min", "35", "--vin-max", "35", "--vz", "12", "--meter-a", "10m",
                 "--resistor-ohm", "1k"]) == 0
    out = capsys.readouterr().out
    assert "given                    1 kohm" in out and "529 mW" in out and SELV_LINE in out
    assert _run(["plan", "shunt", "--shunt-ohm", "10m", "--gain", "50"]) == 0
    out = capsys.readouterr().out
    assert "6.6 A" in out and "1.61 mA" in out and SELV_LINE in out


@pytest.mark.parametrize(("argv", "start"), [
    (["plan", "divider", "--max-v", "12x"], "--max-v: '12x' is not a value in volts"),
    (["plan", "divider", "--max-v", "48", "--series", "E48"], "--series: 'E48' is not offered"),
    (["plan", "divider", "--max-v", "48", "--r-top", "100k"], "--r-top and --r-bottom go together"),
    (["plan", "divider", "--max-v", "48", "--over-v", "40"], "--over-v: 40 V is below --max-v 48 V"),
    (["plan", "divider", "--max-v", "48", "--name", "Out"], "--name: 'Out' is not a channel name"),
    (["plan", "divider", "--max-v", "48", "--input", "9"], "--input: expected"),
    (["plan", "shunt", "--rated-mv", "75"], "--rated-mv needs --rated-a"),
    (["plan", "zener", "--vin-min", "10", "--vin-max", "35", "--vz", "12", "--meter-a", "10m"], "--vz: "),
    (["plan", "zener", "--vin-min", "24", "--vin-max", "35", "--vz", "12", "--meter-a", "10m", "--meter-min-v", "5"],
     "--meter-on-v: a meter restarts above the supply it turns off at (5 V, --meter-min-v), not at 4.5 V"),
    (["plan", "zener", "--vin-min", "24", "--vin-max", "35", "--vz", "12", "--meter-a", "10m", "--cap-f", "lots"],
     "--cap-f: 'lots' is not a value in farads"),
])
def test_command_errors_are_one_line(argv: list[str], start: str) -> None:
    with pytest.raises(PlanError) as info:
        _run(argv)
    assert str(info.value).startswith(start) and "\n" not in str(info.value)


def test_each_plan_says_the_cautions_of_its_own_circuit() -> None:
    """A shunt plan names the low-side placement and the ground loop; a divider plan does not, and the other way
    round (each cautions about what it planned; the SELV line closes both)."""
    from logger.plan import shunt

    shunt_text = shunt.report(shunt.Shunt(shunt.ShuntSpec(shunt_ohm=0.01, gain=50.0))).render()
    divider_text = divider.report(divider.choose_pair(divider.DividerSpec(max_v=30.0))).render()
    assert "caution: this plan is for a low-side shunt" in shunt_text and "ground loop through USB" in shunt_text
    assert "R_top" not in shunt_text and "low-side shunt" not in divider_text
    assert shunt_text.count("SELV") == divider_text.count("SELV") == 1
