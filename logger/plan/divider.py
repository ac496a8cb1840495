"""Sizing a resistor divider that brings a rail of up to about 100 V into an ADC's 3.3 V or 5 V range.

The rail sits across R_top and R_bottom in series; the ADC pin reads the middle. The rig file's ``divider`` is
(R_top + R_bottom) / R_bottom, rail volts per pin volt. The pair is chosen from a preferred series with three
hard limits and one preference:

* the rail's highest value (``max_v``) must land at or below ``1 - headroom`` of the ADC's full scale, so
  resistor tolerance cannot push it past the top, and the stated overvoltage (``over_v``) at or below the
  pin's rating, so a surge cannot hurt it (the ratio is never below the aim that both set);
* at ``max_v`` the pair may draw no more than ``draw_a``, and at the overvoltage neither part may pass the
  derated power rating; that sets the least total resistance, and the pair may be up to :data:`TOTAL_SPAN`
  times that (a needlessly high resistance only makes the ADC's source impedance worse);
* both parts come from the series;
* among the rest, the pair wins that best balances two costs: a ratio above the aim gives up part of the ADC's
  range, and a resistance above the least the current budget allows makes the source impedance the ADC's
  sample-and-hold settles from worse. :data:`RATIO_WEIGHT` says how much ratio error costs as much as doubling
  the resistance. The exact ratio matters little: a calibration measures the real one anyway.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from logger.plan import series
from logger.plan.report import Report, channel_header, device_comment
from logger.plan.values import PlanError, exceeds, format_value, percent, short_ohms, toml_float

RATIO_WEIGHT = {"E12": 0.05, "E24": 0.05, "E96": 0.01}
"""Ratio error that costs as much as doubling the divider's resistance: 5 % of the range is under a tenth of a
bit, while twice the source impedance needs twice the settling time; who asks for E96 wants a close ratio."""

TOTAL_SPAN = 10.0
"""Pairs may have from the least total resistance up to this many times it."""

SMALLEST_PART_OHM = 10.0
"""Divider parts below this would waste power at any rail worth dividing."""


@dataclass(frozen=True)
class DividerSpec:
    """What the user asked for. Voltages in volts, currents in amps, powers in watts, fractions not percent."""

    max_v: float
    vref_v: float = 3.3
    bits: int = 12
    draw_a: float = 100e-6
    series: str = "E24"
    headroom: float = 0.05
    over_v: float | None = None
    """The overvoltage to check the pin at; ``None`` means 20 % above ``max_v``."""
    pin_max_v: float | None = None
    """The pin's absolute maximum; ``None`` means ``vref_v + 0.3`` (a common MCU rating)."""
    pin_margin_v: float = 0.2
    """How far below the pin's absolute maximum the overvoltage is put: room for resistor tolerance and the
    reference's own error, so the worst case is not exactly at the rating."""
    resistor_w: float = 0.25
    resistor_v: float = 150.0
    derate: float = 0.5
    source_max_ohm: float = 10e3

    @property
    def range_aim(self) -> float:
        """The smallest ratio that puts ``max_v`` at ``1 - headroom`` of full scale."""
        return self.max_v / (self.vref_v * (1.0 - self.headroom))

    @property
    def pin_aim(self) -> float:
        """The smallest ratio that keeps the pin within its rating, less the margin, at the overvoltage."""
        return self.overvoltage_v / (self.pin_rating_v - self.pin_margin_v)

    @property
    def aim(self) -> float:
        """The smallest ratio meeting both the range and the pin's rating."""
        return max(self.range_aim, self.pin_aim)

    @property
    def least_total_ohm(self) -> float:
        """The least R_top + R_bottom: what the current budget allows at ``max_v``, or what keeps both parts
        within their derated power at the overvoltage (either part takes at most V^2 / total), if more."""
        return max(self.max_v / self.draw_a, self.overvoltage_v**2 / (self.derate * self.resistor_w))

    @property
    def overvoltage_v(self) -> float:
        return self.over_v if self.over_v is not None else 1.2 * self.max_v

    @property
    def pin_rating_v(self) -> float:
        return self.pin_max_v if self.pin_max_v is not None else self.vref_v + 0.3


@dataclass(frozen=True)
class Divider:
    """A resistor pair and what it does under a :class:`DividerSpec`."""

    spec: DividerSpec
    r_top: float
    r_bottom: float
    chosen: bool = True
    """True when the planner picked the pair, False when the user gave it."""

    @property
    def ratio(self) -> float:
        """(R_top + R_bottom) / R_bottom: the rig file's ``divider``."""
        return (self.r_top + self.r_bottom) / self.r_bottom

    @property
    def ratio_error(self) -> float:
        """How far the ratio is above (+) or below (-) the aim, as a fraction of it."""
        return self.ratio / self.spec.aim - 1.0

    @property
    def source_ohm(self) -> float:
        """What the ADC's input sees: R_top in parallel with R_bottom (the rail's own resistance neglected)."""
        return self.r_top * self.r_bottom / (self.r_top + self.r_bottom)

    @property
    def lsb_v(self) -> float:
        """Rail volts per ADC step: ratio x full scale / 2^bits."""
        return self.ratio * self.spec.vref_v / 2**self.spec.bits

    def draw_a(self, rail_v: float) -> float:
        """Current the pair takes from the rail at ``rail_v``."""
        return rail_v / (self.r_top + self.r_bottom)

    def pin_v(self, rail_v: float) -> float:
        """Voltage at the ADC pin with the rail at ``rail_v`` (no clamp conducting)."""
        return rail_v / self.ratio

    def power_w(self, rail_v: float) -> tuple[float, float]:
        """Power in R_top and R_bottom at ``rail_v``: P = V^2 / R with V the voltage across each part."""
        top_v = rail_v - self.pin_v(rail_v)
        return top_v**2 / self.r_top, self.pin_v(rail_v) ** 2 / self.r_bottom


def choose_pair(spec: DividerSpec) -> Divider:
    """The pair from ``spec.series`` that meets the spec best (see the module's docstring).

    Raises:
        PlanError: the rail fits the ADC without a divider, or no pair of the series meets the limits.
    """
    if spec.aim <= 1.0:
        raise PlanError(f"--max-v: {format_value(spec.max_v, 'V')} already fits the ADC's "
                        f"{format_value(spec.vref_v * (1 - spec.headroom), 'V')} range with headroom; wire it "
                        "without a divider (divider = 1.0), through a 1 kohm series resistor to protect the pin")
    least_total = spec.least_total_ohm
    values = series.series_values(spec.series, SMALLEST_PART_OHM, series.LARGEST_OHM)
    top, bottom = (grid.ravel() for grid in np.meshgrid(values, values, indexing="ij"))
    total = top + bottom
    error = total / bottom / spec.aim - 1.0
    fits = (error >= -1e-12) & (total >= least_total * (1 - 1e-12)) & (total <= TOTAL_SPAN * least_total)
    if not fits.any():
        raise PlanError(_no_pair_message(spec, least_total))
    cost = np.log2(total / least_total) + error / RATIO_WEIGHT[spec.series]
    best = int(np.argmin(np.where(fits, cost, np.inf)))
    return Divider(spec, float(top[best]), float(bottom[best]))


def _no_pair_message(spec: DividerSpec, least_total: float) -> str:
    by_power = least_total > spec.max_v / spec.draw_a
    why = (f"keeping {format_value(spec.resistor_w, 'W')} parts within their derating at "
           f"{format_value(spec.overvoltage_v, 'V')}" if by_power else
           f"drawing at most {format_value(spec.draw_a, 'A')} at {format_value(spec.max_v, 'V')}")
    option = "--resistor-w" if by_power else "--draw-a"
    if least_total > 2 * series.LARGEST_OHM:
        return (f"{option}: {why} needs {format_value(least_total, 'ohm')} in total, beyond "
                f"{format_value(series.LARGEST_OHM, 'ohm')} parts; "
                + ("give parts of a higher rating" if by_power else "allow more current"))
    return (f"{option}: no {spec.series} pair of {format_value(SMALLEST_PART_OHM, 'ohm')} to "
            f"{format_value(series.LARGEST_OHM, 'ohm')} parts reaches a ratio of {spec.aim:.4g} with "
            f"{format_value(least_total, 'ohm')} to {format_value(TOTAL_SPAN * least_total, 'ohm')} in total ({why}); "
            "try another --series or --draw-a")


def given_pair(spec: DividerSpec, r_top: float, r_bottom: float) -> Divider:
    """The user's own pair under the spec, for checking parts already on the bench."""
    return Divider(spec, r_top, r_bottom, chosen=False)


def warnings(d: Divider) -> list[str]:
    """Lines for what would clip, break or burn with this pair."""
    s, over = d.spec, d.spec.overvoltage_v
    out = []
    if exceeds(d.pin_v(s.max_v), s.vref_v):
        out.append(f"at {format_value(s.max_v, 'V')} (--max-v) the pin sees {format_value(d.pin_v(s.max_v), 'V')}, "
                   f"past the ADC's {format_value(s.vref_v, 'V')} full scale: readings clip below "
                   f"{format_value(s.vref_v * d.ratio, 'V')}; use a higher ratio")
    if exceeds(d.pin_v(over), s.pin_rating_v):
        clamp_a = (d.pin_v(over) - s.pin_rating_v) / d.source_ohm
        out.append(f"at {format_value(over, 'V')} (--over-v) the pin sees {format_value(d.pin_v(over), 'V')}, above "
                   f"its {format_value(s.pin_rating_v, 'V')} rating (--pin-max-v); clamp it (Schottky diode to the "
                   f"ADC supply, or a Zener), which would then carry about {format_value(clamp_a, 'A')}")
    top_v = over - d.pin_v(over)
    if exceeds(top_v, s.resistor_v):
        out.append(f"R_top has {format_value(top_v, 'V')} across it at {format_value(over, 'V')}, above its "
                   f"{format_value(s.resistor_v, 'V')} working voltage (--resistor-v); use two or more in series "
                   "or a part rated higher")
    for name, watts in zip(("R_top", "R_bottom"), d.power_w(over), strict=True):
        if exceeds(watts, s.derate * s.resistor_w):
            out.append(f"{name} dissipates {format_value(watts, 'W')} at {format_value(over, 'V')}, above "
                       f"{s.derate * 100:.0f} % of its {format_value(s.resistor_w, 'W')} rating "
                       "(--resistor-w, --derate-pct); use a bigger part or draw less (--draw-a)")
    return out


def notes(d: Divider) -> list[str]:
    """Lines worth knowing that are not faults: source impedance, how much range is used."""
    s = d.spec
    out = []
    if d.source_ohm > s.source_max_ohm:
        per_nf = d.source_ohm * 1e-9
        out.append(f"the ADC sees {format_value(d.source_ohm, 'ohm')}, more than the "
                   f"{format_value(s.source_max_ohm, 'ohm')} many converters want to settle each sample "
                   f"(--source-max-ohm); a capacitor from pin to ground steadies it but slows the reading by "
                   f"{format_value(per_nf, 's')} of time constant per nF, or draw more current (--draw-a)")
    if d.chosen and s.least_total_ohm > s.max_v / s.draw_a:
        out.append(f"the parts' power rating (--resistor-w), not --draw-a, set the least resistance: the pair "
                   f"draws {format_value(d.draw_a(s.max_v), 'A')}")
    used = d.pin_v(s.max_v) / s.vref_v
    if used < 0.5:
        out.append(f"{format_value(s.max_v, 'V')} uses only {used * 100:.0f} % of the ADC's range; a higher "
                   "R_bottom would resolve it finer")
    return out


def pair_text(d: Divider) -> str:
    """``(560k + 33k) / 33k``: how the ratio is made, for rig-file comments."""
    return f"({short_ohms(d.r_top)} + {short_ohms(d.r_bottom)}) / {short_ohms(d.r_bottom)}"


def report(d: Divider, name: str = "rail_v", input_index: int = 0, nominal_v: float | None = None) -> Report:
    """The divider plan as printed: figures, warnings, notes and the matching rig-file ``[[channel]]``."""
    s, over = d.spec, d.spec.overvoltage_v
    where = f"{s.series}" if d.chosen else "as given"
    rep = Report(f"Divider for a rail up to {format_value(s.max_v, 'V')} into a {s.bits}-bit ADC with "
                 f"{format_value(s.vref_v, 'V')} full scale")
    rep.row("R_top", f"{format_value(d.r_top, 'ohm')} ({where})")
    rep.row("R_bottom", f"{format_value(d.r_bottom, 'ohm')} ({where})")
    rep.row("ratio", f"{d.ratio:.5g} = {pair_text(d)}")
    rep.row("ratio error", f"{percent(d.ratio_error)} against the aim of {s.aim:.5g}")
    rep.row("aim set by", f"{format_value(over, 'V')} at {format_value(s.pin_rating_v - s.pin_margin_v, 'V')}, "
                          f"the pin's {format_value(s.pin_rating_v, 'V')} rating less a "
                          f"{format_value(s.pin_margin_v, 'V')} margin (--pin-margin-v)"
                          if s.pin_aim > s.range_aim else
                          f"{format_value(s.max_v, 'V')} at {100 * (1 - s.headroom):.0f} % of full scale")
    rep.row("full scale at the rail", f"{format_value(s.vref_v * d.ratio, 'V')}")
    rep.row(f"pin at {format_value(s.max_v, 'V')}",
            f"{format_value(d.pin_v(s.max_v), 'V')} ({100 * d.pin_v(s.max_v) / s.vref_v:.0f} % of full scale)")
    rep.row("volts per LSB", f"{format_value(d.lsb_v, 'V')} at the rail "
                             f"({format_value(s.vref_v / 2**s.bits, 'V')} at the pin)")
    rep.row("drawn from the rail", f"{format_value(d.draw_a(s.max_v), 'A')} at {format_value(s.max_v, 'V')}")
    for label, at_max, at_over in zip(("power in R_top", "power in R_bottom"), d.power_w(s.max_v), d.power_w(over),
                                      strict=True):
        rep.row(label, f"{format_value(at_max, 'W')} at {format_value(s.max_v, 'V')}, "
                       f"{format_value(at_over, 'W')} at {format_value(over, 'V')}")
    rep.row("ADC source impedance", f"{format_value(d.source_ohm, 'ohm')} (R_top parallel R_bottom)")
    rep.row(f"pin at {format_value(over, 'V')}",
            f"{format_value(d.pin_v(over), 'V')} (--over-v; pin rated {format_value(s.pin_rating_v, 'V')})")
    rep.warnings += warnings(d)
    rep.notes += notes(d)
    rep.cautions += [
        "protect the pin: a 1 kohm resistor in series between the divider and the pin, two Schottky diodes from "
        "the pin to the ADC's supply and from ground to the pin, and 22 nF from the pin to ground "
        "(firmware_notes/front-end.md, \"Protection: series resistor and clamp\")",
        f"R_top's upper end is at rail voltage, up to {format_value(over, 'V')}: keep it and its leads away from "
        "the logic side, and use parts rated for that voltage (--resistor-v)"]
    channel_header(rep, name, "volts", input_index)
    rep.rig_line("divider", toml_float(d.ratio), f"{pair_text(d)}: rail volts per volt at the ADC pin")
    if nominal_v is not None:
        rep.rig_line("nominal", toml_float(nominal_v), "the rail's intended value (--nominal)")
    else:
        rep.rig_comment("nominal = ...                  # the rail's intended value (give --nominal)")
    device_comment(rep, s.bits, s.vref_v)
    return rep
