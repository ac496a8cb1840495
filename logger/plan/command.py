"""``railtap plan``: the sub-commands ``divider``, ``shunt`` and ``zener``, their options, and the calls they make.

Every electrical value is taken as text (``10k``, ``4k7``, ``100u``, ``3.3V``) and read when the command runs,
so that a mistyped or impossible value ends as one :class:`PlanError` line naming the option, which the main
command prints as ``railtap: <message>`` with exit status 2.
"""

from __future__ import annotations

import argparse
import re

from logger.panel_meter import MeterCircuit
from logger.plan import divider, series, shunt, zener, zener_report
from logger.plan.report import Report
from logger.plan.values import PlanError, format_value, parse_value, positive

_NAME = re.compile(r"[a-z][a-z0-9_]{0,23}")
"""Channel names the rig file accepts."""

_VALUES = "Values take SI prefixes and resistor codes: 10k, 4k7, 1M, 0.01, 100m (milli), 250u (micro)"


def add_plan_command(sub: argparse._SubParsersAction) -> None:
    """Add ``plan`` and its sub-commands to the main command's sub-parsers."""
    plan = sub.add_parser("plan", help="size a divider, a shunt's gain or a meter's Zener feed, with rig-file lines",
                          description="Size the analogue front end before wiring it, and print the rig-file lines "
                                      f"that match. {_VALUES}.")
    actions = plan.add_subparsers(title="what to plan", metavar="WHAT", required=True)
    _divider_parser(actions)
    _shunt_parser(actions)
    _zener_parser(actions)


def _divider_parser(actions: argparse._SubParsersAction) -> None:
    p = actions.add_parser("divider", help="a resistor pair that brings a rail into the ADC's range",
                           description=f"Choose a resistor divider from a preferred series. {_VALUES}.")
    p.add_argument("--max-v", required=True, metavar="V", help="highest rail voltage to read, volts (e.g. 60)")
    _adc_options(p)
    p.add_argument("--draw-a", default="100u", metavar="A",
                   help="most current the divider may take from the rail at --max-v, amps (default 100u)")
    _series_option(p, "E24")
    p.add_argument("--headroom-pct", default="5", metavar="PCT",
                   help="keep --max-v this far below the ADC's full scale, for part tolerances (default 5)")
    p.add_argument("--over-v", metavar="V", help="overvoltage to check the pin at, volts (default 20 %% above --max-v)")
    p.add_argument("--pin-max-v", metavar="V", help="the ADC pin's absolute maximum, volts (default --vref-v + 0.3)")
    p.add_argument("--pin-margin-v", metavar="V", default="0.2",
                   help="keep the overvoltage this far below the pin's absolute maximum, volts (default 0.2)")
    p.add_argument("--resistor-w", default="0.25", metavar="W", help="power rating of each resistor, watts "
                                                                     "(default 0.25)")
    p.add_argument("--resistor-v", default="150", metavar="V",
                   help="working voltage of one resistor, volts (default 150; small chip parts are often lower: "
                        "check the datasheet)")
    _derate_option(p)
    p.add_argument("--source-max-ohm", default="10k", metavar="OHM",
                   help="source impedance the ADC settles from well, ohms (default 10k)")
    p.add_argument("--r-top", metavar="OHM", help="check this upper resistor (with --r-bottom) instead of choosing")
    p.add_argument("--r-bottom", metavar="OHM", help="check this lower resistor (with --r-top) instead of choosing")
    _rig_options(p, "rail_v", 0, "V", "the rail's intended voltage, volts")
    p.set_defaults(run=run_divider)


def _shunt_parser(actions: argparse._SubParsersAction) -> None:
    p = actions.add_parser("shunt", help="full scale, amps per LSB and dissipation of a shunt and gain",
                           description=f"Work out what a shunt and amplifier gain (or PGA range) give. {_VALUES}.")
    which = p.add_mutually_exclusive_group(required=True)
    which.add_argument("--shunt-ohm", metavar="OHM", help="shunt resistance, ohms (e.g. 0.01 or 10m)")
    which.add_argument("--rated-mv", metavar="MV",
                       help="a panel shunt's rating in millivolts at --rated-a (e.g. 75 for a 75 mV shunt)")
    p.add_argument("--rated-a", metavar="A", help="the rated current that goes with --rated-mv, amps (e.g. 50)")
    p.add_argument("--gain", default="1", metavar="X", help="amplifier gain between shunt and ADC pin (default 1)")
    p.add_argument("--pga-v", metavar="V", help="the ADC's programmable-gain input range, volts (e.g. 0.256); "
                                                "sets full scale in place of --vref-v")
    _adc_options(p, bits_help="; for a bipolar converter give one bit less than its width")
    p.add_argument("--max-a", metavar="A", help="highest current you expect, amps; also the rig's overcurrent level")
    p.add_argument("--shunt-w", metavar="W", help="the shunt's power rating, watts")
    p.add_argument("--headroom-pct", default="5", metavar="PCT",
                   help="keep --max-a this far below full scale when suggesting a gain (default 5)")
    _derate_option(p)
    _rig_options(p, "rail_a", 1, "A", "the usual current, amps")
    p.set_defaults(run=run_shunt)


def _zener_parser(actions: argparse._SubParsersAction) -> None:
    p = actions.add_parser("zener", help="series resistor of a Zener feed for a meter powered from the rail",
                           description="Size the series resistor of a Zener shunt regulator feeding a panel meter "
                                       f"from a rail above what its regulator tolerates. {_VALUES}.")
    p.add_argument("--vin-min", required=True, metavar="V",
                   help="lowest rail voltage at which the Zener must still regulate, volts")
    p.add_argument("--vin-max", required=True, metavar="V", help="highest rail voltage, volts")
    p.add_argument("--vz", required=True, metavar="V", help="Zener voltage, volts (e.g. 12)")
    p.add_argument("--meter-a", required=True, metavar="A", help="the meter's current while it runs, amps (e.g. 10m)")
    p.add_argument("--pz-w", default="0.5", metavar="W", help="Zener power rating, watts (default 0.5)")
    p.add_argument("--iz-min-a", default="5m", metavar="A",
                   help="least Zener current that still regulates, amps (default 5m)")
    p.add_argument("--meter-off-a", default="0", metavar="A",
                   help="least the meter draws, amps (default 0: unplugged or switched off, the worst case)")
    p.add_argument("--meter-min-v", default=f"{MeterCircuit.off_v:g}", metavar="V",
                   help=f"supply at which the meter turns off, volts (default {MeterCircuit.off_v:g})")
    p.add_argument("--meter-on-v", default=f"{MeterCircuit.on_v:g}", metavar="V",
                   help=f"supply at which a switched-off meter starts again, volts (default {MeterCircuit.on_v:g})")
    p.add_argument("--meter-knee-v", default=f"{MeterCircuit.knee_v:g}", metavar="V",
                   help="supply below which the meter's regulator drops out and its draw falls with it, volts "
                        f"(default {MeterCircuit.knee_v:g})")
    p.add_argument("--cap-f", default=f"{MeterCircuit.cap_f * 1e6:g}u", metavar="F",
                   help=f"capacitor across the Zener, farads (default {MeterCircuit.cap_f * 1e6:g}u); it sets how "
                        "fast the meter cycles on and off near drop-out")
    _series_option(p, "E12")
    p.add_argument("--resistor-ohm", metavar="OHM", help="check this series resistor instead of choosing one")
    p.add_argument("--resistor-w", metavar="W", help="the series resistor's power rating, watts")
    _derate_option(p)
    _adc_options(p, bits_help="; used for the meter node's divider in the rig-file lines")
    _rig_options(p, "meter_v", 2, None, "")
    p.set_defaults(run=run_zener)


def _adc_options(p: argparse.ArgumentParser, bits_help: str = "") -> None:
    p.add_argument("--vref-v", default="3.3", metavar="V", help="ADC full scale (its reference), volts (default 3.3)")
    p.add_argument("--bits", default="12", metavar="N", help=f"ADC resolution in bits (default 12){bits_help}")


def _series_option(p: argparse.ArgumentParser, default: str) -> None:
    p.add_argument("--series", default=default, metavar="E",
                   help=f"preferred series: {', '.join(series.SERIES)} (default {default})")


def _derate_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--derate-pct", default="50", metavar="PCT",
                   help="use at most this share of a part's power rating (default 50)")


def _rig_options(p: argparse.ArgumentParser, name: str, index: int, unit: str | None, nominal_help: str) -> None:
    rig = p.add_argument_group("rig-file lines")
    rig.add_argument("--name", default=name, help=f"channel name (default {name})")
    rig.add_argument("--input", default=str(index), metavar="N", help=f"the channel's input, 0 to 7 (default {index})")
    if unit is not None:
        rig.add_argument("--nominal", metavar=unit, help=nominal_help)
    rig.add_argument("--rig-only", action="store_true", help="print only the rig-file lines, to append to a file")


# -- reading the options -------------------------------------------------------------------------------


def _option(dest: str) -> str:
    return "--" + dest.replace("_", "-")


def _value(args: argparse.Namespace, dest: str, unit: str, what: str = "a value") -> float | None:
    """The option ``dest`` read in ``unit``; above zero unless it is a percentage; ``None`` if not given."""
    text = getattr(args, dest)
    if text is None:
        return None
    value = parse_value(text, unit, _option(dest))
    return value if unit == "%" else positive(value, _option(dest), what)


def _fraction(args: argparse.Namespace, dest: str, low: float, high: float) -> float:
    """A percentage option as a fraction, checked to lie in [low, high] percent."""
    value = parse_value(getattr(args, dest), "%", _option(dest))
    if not low <= value <= high:
        raise PlanError(f"{_option(dest)}: expected {low:g} to {high:g} percent, got {value:g}")
    return value / 100.0


def _whole(args: argparse.Namespace, dest: str, low: int, high: int, what: str) -> int:
    text = getattr(args, dest).strip()
    if not text.isdigit() or not low <= int(text) <= high:
        raise PlanError(f"{_option(dest)}: expected {what}, {low} to {high}; got {text!r}")
    return int(text)


def _channel(args: argparse.Namespace) -> tuple[str, int]:
    if not _NAME.fullmatch(args.name):
        raise PlanError(f"--name: {args.name!r} is not a channel name; use lower-case letters, digits and _ "
                        "(up to 24, starting with a letter), such as out_v")
    return args.name, _whole(args, "input", 0, 7, "the channel's position in the data line")


def _adc(args: argparse.Namespace) -> tuple[float, int]:
    return _value(args, "vref_v", "V", "a full scale"), _whole(args, "bits", 1, 24, "a number of bits")


def _print(rep: Report, rig_only: bool) -> int:
    print(rep.rig_text() if rig_only else rep.render(), end="")
    return 0


# -- the commands --------------------------------------------------------------------------------------


def run_divider(args: argparse.Namespace) -> int:
    """``railtap plan divider``: choose (or check) a divider and print its plan."""
    vref_v, bits = _adc(args)
    spec = divider.DividerSpec(
        max_v=_value(args, "max_v", "V", "the highest rail voltage"), vref_v=vref_v, bits=bits,
        draw_a=_value(args, "draw_a", "A", "a current"), series=series.series_name(args.series),
        headroom=_fraction(args, "headroom_pct", 0, 50), over_v=_value(args, "over_v", "V"),
        pin_max_v=_value(args, "pin_max_v", "V"), pin_margin_v=_value(args, "pin_margin_v", "V", "a margin"),
        resistor_w=_value(args, "resistor_w", "W", "a power rating"),
        resistor_v=_value(args, "resistor_v", "V", "a working voltage"), derate=_fraction(args, "derate_pct", 1, 100),
        source_max_ohm=_value(args, "source_max_ohm", "ohm", "a resistance"))
    if spec.over_v is not None and spec.over_v < spec.max_v:
        raise PlanError(f"--over-v: {format_value(spec.over_v, 'V')} is below --max-v {format_value(spec.max_v, 'V')}; "
                        "give the overvoltage the pin must survive")
    top, bottom = _value(args, "r_top", "ohm", "a resistance"), _value(args, "r_bottom", "ohm", "a resistance")
    if (top is None) != (bottom is None):
        raise PlanError("--r-top and --r-bottom go together: give both to check a pair, or neither to choose one")
    pair = divider.choose_pair(spec) if top is None else divider.given_pair(spec, top, bottom)
    name, index = _channel(args)
    return _print(divider.report(pair, name, index, _value(args, "nominal", "V", "a nominal voltage")), args.rig_only)


def run_shunt(args: argparse.Namespace) -> int:
    """``railtap plan shunt``: full scale, resolution and dissipation of a shunt and gain."""
    vref_v, bits = _adc(args)
    rated_a = _value(args, "rated_a", "A", "a rated current")
    if args.rated_mv is not None:
        if rated_a is None:
            raise PlanError("--rated-mv needs --rated-a: a panel shunt is rated in millivolts at so many amps")
        volts = args.rated_mv.strip().endswith(("V", "v"))
        drop_v = parse_value(args.rated_mv, "V", "--rated-mv") / (1.0 if volts else 1000.0)
        shunt_ohm = positive(drop_v, "--rated-mv", "a voltage") / rated_a
    else:
        shunt_ohm = _value(args, "shunt_ohm", "ohm", "a resistance")
    spec = shunt.ShuntSpec(
        shunt_ohm=shunt_ohm, gain=positive(parse_value(args.gain, "x", "--gain"), "--gain", "a gain"),
        vref_v=vref_v, bits=bits, pga_v=_value(args, "pga_v", "V", "an input range"),
        max_a=_value(args, "max_a", "A", "a current"), rated_a=rated_a,
        shunt_w=_value(args, "shunt_w", "W", "a power rating"), derate=_fraction(args, "derate_pct", 1, 100),
        headroom=_fraction(args, "headroom_pct", 0, 50))
    name, index = _channel(args)
    rep = shunt.report(shunt.Shunt(spec), name, index, _value(args, "nominal", "A", "a nominal current"))
    return _print(rep, args.rig_only)


def run_zener(args: argparse.Namespace) -> int:
    """``railtap plan zener``: the series resistor of a meter's Zener feed, chosen or checked."""
    vref_v, bits = _adc(args)
    spec = zener.ZenerSpec(
        vin_min_v=_value(args, "vin_min", "V", "a voltage"), vin_max_v=_value(args, "vin_max", "V", "a voltage"),
        vz_v=_value(args, "vz", "V", "a Zener voltage"), meter_a=_value(args, "meter_a", "A", "a current"),
        pz_w=_value(args, "pz_w", "W", "a power rating"), iz_min_a=_value(args, "iz_min_a", "A", "a current"),
        meter_off_a=parse_value(args.meter_off_a, "A", "--meter-off-a"),
        meter_min_v=_value(args, "meter_min_v", "V", "a voltage"),
        meter_on_v=_value(args, "meter_on_v", "V", "a voltage"),
        meter_knee_v=_value(args, "meter_knee_v", "V", "a voltage"),
        cap_f=_value(args, "cap_f", "F", "a capacitance"),
        series=series.series_name(args.series),
        derate=_fraction(args, "derate_pct", 1, 100), resistor_w=_value(args, "resistor_w", "W", "a power rating"))
    if spec.meter_off_a < 0:
        raise PlanError("--meter-off-a: expected a current of zero or more")
    feed = zener.plan(spec, _value(args, "resistor_ohm", "ohm", "a resistance"))
    name, index = _channel(args)
    return _print(zener_report.report(feed, name, index, vref_v, bits), args.rig_only)
