"""Sizing a current channel: a shunt, then an amplifier gain or the ADC's programmable-gain range.

The ADC reads the shunt's voltage times the gain. Full scale is where that reaches the ADC's range; one step
of the ADC (full scale / 2^bits) is the smallest change in current it can show. With a programmable-gain ADC
the range is the PGA's (0.256 V, say) instead of the reference, and the rig file's ``gain`` becomes the
reference over that range, because railtap turns counts into pin volts with the device's reported reference.
"""

from __future__ import annotations

from dataclasses import dataclass

from logger.plan.report import Report, channel_header, device_comment
from logger.plan.values import exceeds, format_value, toml_float


@dataclass(frozen=True)
class ShuntSpec:
    """What the user asked for. Ohms, volts, amps, watts; fractions not percent."""

    shunt_ohm: float
    gain: float = 1.0
    vref_v: float = 3.3
    bits: int = 12
    pga_v: float | None = None
    """The ADC's programmable input range (full scale), if it has one; ``None`` means the reference."""
    max_a: float | None = None
    """The highest current the user expects, if given."""
    rated_a: float | None = None
    """The shunt's rated current, when it was given as millivolts at rated amps."""
    shunt_w: float | None = None
    derate: float = 0.5
    headroom: float = 0.05


@dataclass(frozen=True)
class Shunt:
    """A shunt and gain, and what they do under a :class:`ShuntSpec`."""

    spec: ShuntSpec

    @property
    def adc_range_v(self) -> float:
        """The ADC's input range: the PGA's if given, else the reference."""
        return self.spec.pga_v if self.spec.pga_v is not None else self.spec.vref_v

    @property
    def full_scale_shunt_v(self) -> float:
        """Shunt voltage that reaches the top of the ADC's range."""
        return self.adc_range_v / self.spec.gain

    @property
    def full_scale_a(self) -> float:
        """Current at the top of the ADC's range: range / (gain x shunt)."""
        return self.full_scale_shunt_v / self.spec.shunt_ohm

    @property
    def lsb_a(self) -> float:
        """Amps per ADC step: full-scale current / 2^bits."""
        return self.full_scale_a / 2**self.spec.bits

    def power_w(self, amps: float) -> float:
        """Shunt dissipation at ``amps``: I^2 R."""
        return amps**2 * self.spec.shunt_ohm

    @property
    def best_gain(self) -> float | None:
        """The highest gain that keeps ``max_a`` within ``1 - headroom`` of the ADC's range."""
        s = self.spec
        if s.max_a is None:
            return None
        return self.adc_range_v * (1 - s.headroom) / (s.max_a * s.shunt_ohm)

    @property
    def rig_gain(self) -> float:
        """The rig file's ``gain``: amplifier gain, times reference over PGA range when a PGA sets the range."""
        return self.spec.gain * self.spec.vref_v / self.adc_range_v


def warnings(sh: Shunt) -> list[str]:
    """Lines for what would clip or overheat."""
    s = sh.spec
    out = []
    if s.max_a is not None and exceeds(s.max_a, sh.full_scale_a):
        out.append(f"{format_value(s.max_a, 'A')} (--max-a) is past full scale ({format_value(sh.full_scale_a, 'A')}):"
                   f" readings clip; use a gain of {sh.best_gain:.3g} or less, or a smaller shunt")
    if s.rated_a is not None and s.max_a is not None and exceeds(s.max_a, s.rated_a):
        out.append(f"{format_value(s.max_a, 'A')} (--max-a) is above the shunt's rated "
                   f"{format_value(s.rated_a, 'A')}; it will run hot and drift: use a bigger shunt")
    worst_a = s.max_a if s.max_a is not None else sh.full_scale_a
    if s.shunt_w is not None and exceeds(sh.power_w(worst_a), s.derate * s.shunt_w):
        out.append(f"the shunt dissipates {format_value(sh.power_w(worst_a), 'W')} at {format_value(worst_a, 'A')}, "
                   f"above {s.derate * 100:.0f} % of its {format_value(s.shunt_w, 'W')} rating "
                   "(--shunt-w, --derate-pct); use a bigger part or a smaller resistance")
    return out


def notes(sh: Shunt) -> list[str]:
    """Lines worth knowing: an unused range, a rating passed only at the top of the range."""
    s = sh.spec
    out = []
    if s.max_a is not None and s.max_a < 0.5 * sh.full_scale_a:
        out.append(f"{format_value(s.max_a, 'A')} uses only {100 * s.max_a / sh.full_scale_a:.0f} % of the range; "
                   f"a gain up to {sh.best_gain:.3g} would resolve it finer")
    if s.rated_a is not None and sh.full_scale_a > s.rated_a:
        out.append(f"the top of the range ({format_value(sh.full_scale_a, 'A')}) is past the shunt's rated "
                   f"{format_value(s.rated_a, 'A')}; readings up there mean the shunt is overloaded")
    return out


def report(sh: Shunt, name: str = "rail_a", input_index: int = 1, nominal_a: float | None = None) -> Report:
    """The shunt plan as printed: figures, warnings, notes and the matching rig-file ``[[channel]]``."""
    s = sh.spec
    front = f"PGA range {format_value(sh.adc_range_v, 'V')}" if s.pga_v is not None else f"gain {s.gain:g}"
    rep = Report(f"Shunt of {format_value(s.shunt_ohm, 'ohm')} with {front} into a {s.bits}-bit ADC")
    rep.row("shunt", format_value(s.shunt_ohm, "ohm") +
            (f" (rated {format_value(s.rated_a, 'A')})" if s.rated_a is not None else ""))
    rep.row("gain", f"{s.gain:g}" + (f", then the ADC's PGA at {format_value(s.pga_v, 'V')} full scale"
                                      if s.pga_v is not None else ""))
    rep.row("ADC range", f"{format_value(sh.adc_range_v, 'V')}, {format_value(sh.adc_range_v / 2**s.bits, 'V')} "
                         "per step")
    rep.row("full-scale current", f"{format_value(sh.full_scale_a, 'A')} "
                                  f"({format_value(sh.full_scale_shunt_v, 'V')} across the shunt)")
    rep.row("amps per LSB", format_value(sh.lsb_a, "A"))
    rep.row("shunt at full scale", f"{format_value(sh.power_w(sh.full_scale_a), 'W')} dissipated")
    if s.max_a is not None:
        rep.row(f"at {format_value(s.max_a, 'A')} (--max-a)",
                f"{100 * s.max_a / sh.full_scale_a:.0f} % of full scale, {format_value(s.max_a * s.shunt_ohm, 'V')} "
                f"drop, {format_value(sh.power_w(s.max_a), 'W')} dissipated")
        rep.row("highest gain for it", f"{sh.best_gain:.4g} ({format_value(s.max_a, 'A')} at "
                                       f"{100 * (1 - s.headroom):.0f} % of full scale)")
    rep.warnings += warnings(sh)
    rep.notes += notes(sh)
    rep.cautions += [
        "this plan is for a low-side shunt, in the return between the load and the supply's negative, so both of "
        "its ends sit near the tap's ground; a high-side shunt sits at rail voltage and needs an amplifier made "
        "for that common-mode voltage (firmware_notes/front-end.md), never the ADC pin directly",
        "the shunt's ground end and the tap's ground must be the same point: a ground loop through USB adds "
        "its own drop to the reading (firmware_notes/grounds.md)"]
    channel_header(rep, name, "amps", input_index)
    rep.rig_line("shunt_ohm", toml_float(s.shunt_ohm), "shunt resistance, ohms")
    comment = "amplifier gain between shunt and ADC pin"
    if s.pga_v is not None:
        comment = f"{s.gain:g} x vref / PGA range ({format_value(s.vref_v, 'V')} / {format_value(s.pga_v, 'V')})"
    rep.rig_line("gain", toml_float(sh.rig_gain), comment)
    if nominal_a is not None:
        rep.rig_line("nominal", toml_float(nominal_a), "the usual current (--nominal)")
    if s.max_a is not None:
        rep.rig_line("high", toml_float(s.max_a), "overcurrent above this (--max-a)")
    device_comment(rep, s.bits, s.vref_v)
    return rep
