"""The Zener feed plan as printed: the two limits, the choice, dissipations, the trade-off against the series
neighbours, and rig-file lines for the meter's supply node."""

from __future__ import annotations

from logger.plan import series
from logger.plan.divider import DividerSpec, choose_pair, pair_text
from logger.plan.report import Report, channel_header, device_comment
from logger.plan.values import PlanError, format_value, toml_float
from logger.plan.zener import (
    Feed,
    ZenerSpec,
    iz_max_a,
    largest_ohm,
    nominal_ohm,
    size_text,
    smallest_ohm,
    warnings,
    window,
    zener_needed_w,
)


def report(feed: Feed, name: str = "meter_v", input_index: int = 2, vref_v: float = 3.3, bits: int = 12) -> Report:
    """The feed plan as printed: limits, the choice, dissipations, the trade-off and rig-file lines."""
    s = feed.spec
    rail = (format_value(s.vin_max_v, "V") if s.vin_min_v == s.vin_max_v
            else f"{format_value(s.vin_min_v, 'V')} to {format_value(s.vin_max_v, 'V')}")
    rep = Report(f"Zener feed for a meter on a {rail} rail: {format_value(s.vz_v, 'V')} {format_value(s.pz_w, 'W')} "
                 f"Zener, meter drawing {format_value(s.meter_a, 'A')}")
    _limits(rep, s)
    _choice(rep, feed)
    _trade_off(rep, feed)
    rep.warnings += warnings(feed)
    _rig_lines(rep, feed, name, input_index, vref_v, bits)
    return rep


def _least(s: ZenerSpec) -> str:
    return "disconnected" if s.meter_off_a == 0 else f"drawing {format_value(s.meter_off_a, 'A')}"


def _limits(rep: Report, s: ZenerSpec) -> None:
    """Rows for the two design limits, the derated one and the nominal between them."""
    rep.row("Zener's largest current", f"{format_value(iz_max_a(s), 'A')} ({format_value(s.pz_w, 'W')} / "
                                       f"{format_value(s.vz_v, 'V')})")
    rep.row("smallest resistor", f"{format_value(smallest_ohm(s), 'ohm')} (Zener at its full rating at "
                                 f"{format_value(s.vin_max_v, 'V')}, meter {_least(s)})")
    rep.row("smallest, derated", f"{format_value(smallest_ohm(s, s.derate), 'ohm')} (Zener at "
                                 f"{s.derate * 100:.0f} % of its rating)")
    rep.row("largest resistor", f"{format_value(largest_ohm(s), 'ohm')} (Zener keeps {format_value(s.iz_min_a, 'A')} "
                                f"with the meter running at {format_value(s.vin_min_v, 'V')})")
    try:
        low, high, derated = window(s)
    except PlanError as exc:
        rep.warnings.append(str(exc).split(": ", 1)[1])
        return
    rep.row("nominal", f"{format_value(nominal_ohm(s), 'ohm')} (middle of {format_value(low, 'ohm')} .. "
                       f"{format_value(high, 'ohm')} on a log scale)")
    if not derated:
        rep.notes.append(f"no resistor keeps the Zener within {s.derate * 100:.0f} % of its rating and regulating "
                         f"at {format_value(s.vin_min_v, 'V')}; a Zener rated "
                         f"{format_value(zener_needed_w(s) / s.derate, 'W')} or more would")


def _choice(rep: Report, feed: Feed) -> None:
    """Rows for the chosen (or given) resistor: dissipations and how low an input it still works from."""
    s = feed.spec
    rep.row("chosen" if feed.chosen else "given",
            format_value(feed.r_ohm, "ohm") + (f" ({s.series})" if feed.chosen else ""))
    rep.row(f"resistor at {format_value(s.vin_max_v, 'V')}",
            f"{format_value(feed.resistor_w, 'W')}: needs a {size_text(feed.resistor_w / s.derate)} part to stay "
            f"within {s.derate * 100:.0f} % of its rating")
    rep.row(f"Zener at {format_value(s.vin_max_v, 'V')}",
            f"{format_value(feed.zener_worst_w, 'W')} meter {_least(s)} ({100 * feed.zener_worst_w / s.pz_w:.0f} % "
            f"of rating), {format_value(feed.zener_running_w, 'W')} meter running")
    rep.row("regulates down to", f"{format_value(feed.regulates_to_v, 'V')} input")
    rep.row("meter runs down to", f"{format_value(feed.meter_runs_to_v, 'V')} input (it turns off when its supply "
                                  f"falls to {format_value(s.meter_min_v, 'V')}; below "
                                  f"{format_value(s.meter_knee_v, 'V')} its draw falls with its supply)")
    rep.row("restarts above", f"{format_value(feed.meter_restarts_at_v, 'V')} input (its supply back at "
                              f"{format_value(s.meter_on_v, 'V')})")
    _cycling(rep, feed)
    if s.meter_knee_v > s.vz_v:
        rep.notes.append(f"the meter's regulator drops out below {format_value(s.meter_knee_v, 'V')} "
                         f"(--meter-knee-v), above the {format_value(s.vz_v, 'V')} Zener: it draws about "
                         f"{format_value(s.meter_a * s.vz_v / s.meter_knee_v, 'A')} there, not --meter-a; the "
                         "resistor limits above take --meter-a, the safe side")


def _cycling(rep: Report, feed: Feed) -> None:
    """The row for the meter's on/off cycling between its restart and its drop-out inputs."""
    low, high = format_value(feed.meter_restarts_at_v, "V"), format_value(feed.meter_runs_to_v, "V")
    cycle = feed.cycling()
    if cycle is None:
        rep.row("on/off cycling", f"none: once off below {high} input it stays off until the input is back above "
                                  f"{low}")
        return
    rep.row("on/off cycling", f"between {low} and {high} input; at {format_value(cycle.rail_v, 'V')} about "
                              f"{format_value(cycle.period_s, 's')} a cycle ({format_value(cycle.on_s, 's')} on, "
                              f"{format_value(cycle.off_s, 's')} off, with {format_value(feed.spec.cap_f, 'F')} "
                              "across the Zener); a bigger capacitor (--cap-f) slows it but cannot stop it")


def _trade_off(rep: Report, feed: Feed) -> None:
    """Rows comparing the resistor with its neighbours in the series."""
    s = feed.spec
    rep.row("trade-off", "a lower resistor keeps the meter alive to a lower input, but wastes more and runs hotter:")
    below, above = series.neighbours(feed.r_ohm, s.series)
    for r_ohm in (below, feed.r_ohm, above):
        if r_ohm is None:
            continue
        other = Feed(s, r_ohm)
        mark = (" (chosen)" if feed.chosen else " (given)") if r_ohm == feed.r_ohm else ""
        rep.row(f"  {format_value(r_ohm, 'ohm')}{mark}",
                f"meter runs to {format_value(other.meter_runs_to_v, 'V')}; {format_value(other.resistor_w, 'W')} "
                f"in the resistor and {format_value(other.zener_worst_w, 'W')} in the Zener at "
                f"{format_value(s.vin_max_v, 'V')}")


def _rig_lines(rep: Report, feed: Feed, name: str, input_index: int, vref_v: float, bits: int) -> None:
    s = feed.spec
    node = DividerSpec(max_v=s.vin_max_v, vref_v=vref_v, bits=bits)
    rep.rig_comment(f"the meter's supply node behind the {format_value(feed.r_ohm, 'ohm')} resistor; its divider is "
                    f"sized for {format_value(s.vin_max_v, 'V')}, the rail's highest,")
    rep.rig_comment("since the node rises to the rail if the Zener fails open")
    channel_header(rep, name, "aux", input_index)
    if node.aim > 1:
        pair = choose_pair(node)
        rep.rig_line("divider", toml_float(pair.ratio), f"{pair_text(pair)}, from `railtap plan divider --max-v "
                                                        f"{s.vin_max_v:g}`")
    else:
        rep.rig_line("divider", "1.0", "the rail fits the ADC's range without a divider")
    rep.rig_line("nominal", toml_float(s.vz_v), "the Zener voltage: where the node sits while it regulates")
    rep.rig_line("low", toml_float(s.meter_min_v), "the meter's lowest supply: a dip below it restarts it")
    rep.rig_comment(f"the Zener stops regulating below {format_value(feed.regulates_to_v, 'V')} on the rail; "
                    f"low = {toml_float(feed.regulates_to_v, 4)} on the rail's channel would mark it")
    device_comment(rep, bits, vref_v)
