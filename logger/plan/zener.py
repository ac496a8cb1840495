"""Sizing the series resistor of a Zener shunt regulator that feeds a panel meter from a rail above what the
meter's own regulator tolerates.

::

    rail ──[ R ]──┬── node (about Vz) ──► meter
                  │
                Zener
                  │
    0 V ──────────┴──────────────────────

The resistor carries the meter's current plus the Zener's. Two limits bound it (the usual shunt-regulator
design equations):

* smallest: at the highest input with the meter disconnected, the whole current goes through the Zener and
  must stay within its power rating: R >= (Vin,max - Vz) / (Iz,max + IL,min), with Iz,max = Pz / Vz;
* largest: at the lowest input with the meter running, the Zener must still carry its minimum current to
  regulate: R <= (Vin,min - Vz) / (Iz,min + IL,max).

The resistor dissipates (Vin,max - Vz)^2 / R at the highest input whatever the meter does. Between the limits
lies the trade-off: a lower resistor keeps the meter alive to a lower input but wastes more and runs hotter.

How low the meter runs, where it restarts and how fast it cycles on and off in between come from the meter
model the simulator steps too (:class:`~logger.panel_meter.MeterCircuit`), so the plan predicts what a
simulated rig then shows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from logger.panel_meter import Cycle, MeterCircuit
from logger.plan import series
from logger.plan.values import PlanError, exceeds, format_value

RESISTOR_SIZES_W = (0.125, 0.25, 0.5, 1.0, 2.0, 3.0, 5.0, 10.0)
"""Common resistor power ratings, for saying which size a dissipation needs."""


@dataclass(frozen=True)
class ZenerSpec:
    """What the user asked for. Volts, amps, watts; fractions not percent."""

    vin_min_v: float
    vin_max_v: float
    vz_v: float
    meter_a: float
    """The meter's current while it runs (IL,max)."""
    pz_w: float = 0.5
    iz_min_a: float = 5e-3
    meter_off_a: float = 0.0
    """The least the meter draws (IL,min): 0 when it can be unplugged or switched off, the worst case."""
    meter_min_v: float = MeterCircuit.off_v
    """The meter's supply at which it turns off (its undervoltage lockout)."""
    meter_on_v: float = MeterCircuit.on_v
    """The meter's supply at which a switched-off meter starts again."""
    meter_knee_v: float = MeterCircuit.knee_v
    """The meter's supply below which its regulator drops out and its draw falls with the supply."""
    cap_f: float = MeterCircuit.cap_f
    """The capacitor across the Zener: it sets how fast the meter cycles on and off near drop-out."""
    series: str = "E12"
    derate: float = 0.5
    resistor_w: float | None = None


def check(spec: ZenerSpec) -> None:
    """Raise a :class:`PlanError` naming the option when the request cannot make sense."""
    s = spec
    if s.vin_min_v > s.vin_max_v:
        raise PlanError(f"--vin-min: {format_value(s.vin_min_v, 'V')} is above --vin-max "
                        f"{format_value(s.vin_max_v, 'V')}; swap them")
    if s.vz_v >= s.vin_min_v:
        raise PlanError(f"--vz: a {format_value(s.vz_v, 'V')} Zener cannot regulate from a "
                        f"{format_value(s.vin_min_v, 'V')} minimum input (--vin-min); pick a Zener a few volts "
                        "below it that the meter still accepts, or raise --vin-min")
    if s.meter_off_a > s.meter_a:
        raise PlanError(f"--meter-off-a: {format_value(s.meter_off_a, 'A')} is more than the running meter's "
                        f"{format_value(s.meter_a, 'A')} (--meter-a); give the least it draws")
    if s.meter_min_v > s.vz_v:
        raise PlanError(f"--meter-min-v: a meter that needs {format_value(s.meter_min_v, 'V')} never runs on a "
                        f"{format_value(s.vz_v, 'V')} Zener (--vz); pick a higher Zener voltage")
    if not s.meter_min_v < s.meter_on_v:
        raise PlanError(f"--meter-on-v: a meter restarts above the supply it turns off at "
                        f"({format_value(s.meter_min_v, 'V')}, --meter-min-v), not at "
                        f"{format_value(s.meter_on_v, 'V')}; "
                        "give the restart voltage from its datasheet or a test, or a lower --meter-min-v")
    if s.meter_on_v > s.vz_v:
        raise PlanError(f"--meter-on-v: a meter that restarts at {format_value(s.meter_on_v, 'V')} never starts on a "
                        f"{format_value(s.vz_v, 'V')} Zener (--vz); pick a higher Zener voltage")


def iz_max_a(spec: ZenerSpec, derate: float = 1.0) -> float:
    """The most current the Zener may carry: its power rating (times ``derate``) over its voltage."""
    return derate * spec.pz_w / spec.vz_v


def smallest_ohm(spec: ZenerSpec, derate: float = 1.0) -> float:
    """R >= (Vin,max - Vz) / (Iz,max + IL,min): the Zener within its (derated) rating at the highest input."""
    return (spec.vin_max_v - spec.vz_v) / (iz_max_a(spec, derate) + spec.meter_off_a)


def largest_ohm(spec: ZenerSpec) -> float:
    """R <= (Vin,min - Vz) / (Iz,min + IL,max): the Zener still regulating at the lowest input."""
    return (spec.vin_min_v - spec.vz_v) / (spec.iz_min_a + spec.meter_a)


def window(spec: ZenerSpec) -> tuple[float, float, bool]:
    """The range of resistors to choose from, and whether it keeps the Zener within its derating.

    Raises:
        PlanError: no resistor both keeps the Zener within its absolute rating and keeps it regulating.
    """
    low, high = smallest_ohm(spec), largest_ohm(spec)
    if low > high:
        raise PlanError(f"--pz-w: no series resistor works: keeping the {format_value(spec.pz_w, 'W')} Zener within "
                        f"its rating at {format_value(spec.vin_max_v, 'V')} needs {format_value(low, 'ohm')} or "
                        f"more, but regulating at {format_value(spec.vin_min_v, 'V')} needs "
                        f"{format_value(high, 'ohm')} or less; use a Zener rated "
                        f"{format_value(zener_needed_w(spec), 'W')} or more, narrow the input range, or a meter "
                        "that draws less")
    derated_low = smallest_ohm(spec, spec.derate)
    return (derated_low, high, True) if derated_low <= high else (low, high, False)


def zener_needed_w(spec: ZenerSpec) -> float:
    """The Zener rating at which the smallest and largest resistor meet."""
    current = (spec.vin_max_v - spec.vz_v) / largest_ohm(spec) - spec.meter_off_a
    return current * spec.vz_v


def nominal_ohm(spec: ZenerSpec) -> float:
    """The middle of the window on a log scale: the same margin, as a ratio, to both limits."""
    low, high, _ = window(spec)
    return math.sqrt(low * high)


def choose(spec: ZenerSpec) -> float:
    """The preferred value nearest the nominal inside the window.

    When the derated window holds no value of the series, the largest value inside the absolute window is
    taken instead (the one closest to meeting the derating), and :func:`warnings` says so.

    Raises:
        PlanError: not even the absolute window holds a value of the series.
    """
    low, high, derated = window(spec)
    options = series.within(low, high, spec.series)
    if derated and options.size:
        return float(options[np.argmin(np.abs(np.log(options / nominal_ohm(spec))))])
    options = series.within(smallest_ohm(spec), high, spec.series)
    if options.size:
        return float(options[-1])
    raise PlanError(f"--series: no {spec.series} value lies between {format_value(smallest_ohm(spec), 'ohm')} and "
                    f"{format_value(high, 'ohm')}; use a finer series (--series E24 or E96) or a bigger Zener")


def resistor_size_w(watts: float) -> float | None:
    """The smallest common resistor rating at or above ``watts``, or ``None`` if none is that big."""
    return next((size for size in RESISTOR_SIZES_W if size >= watts * (1 - 1e-9)), None)


@dataclass(frozen=True)
class Feed:
    """One series resistor and what it does under a :class:`ZenerSpec`."""

    spec: ZenerSpec
    r_ohm: float
    chosen: bool = True
    """True when the planner picked the resistor, False when the user gave it."""

    def series_a(self, vin_v: float) -> float:
        """Current through the resistor at input ``vin_v`` while the Zener holds the node at Vz."""
        return (vin_v - self.spec.vz_v) / self.r_ohm

    @property
    def resistor_w(self) -> float:
        """Resistor dissipation at the highest input: (Vin,max - Vz)^2 / R, whatever the meter does."""
        return (self.spec.vin_max_v - self.spec.vz_v) ** 2 / self.r_ohm

    @property
    def zener_worst_w(self) -> float:
        """Zener dissipation at the highest input with the meter drawing its least (disconnected)."""
        return self.spec.vz_v * max(self.series_a(self.spec.vin_max_v) - self.spec.meter_off_a, 0.0)

    @property
    def zener_running_w(self) -> float:
        """Zener dissipation at the highest input with the meter running."""
        return self.spec.vz_v * max(self.series_a(self.spec.vin_max_v) - self.spec.meter_a, 0.0)

    @property
    def regulates_to_v(self) -> float:
        """Lowest input at which the Zener still carries its minimum current with the meter running."""
        return self.spec.vz_v + self.r_ohm * (self.spec.iz_min_a + self.spec.meter_a)

    @property
    def circuit(self) -> MeterCircuit:
        """The meter on this feed, as the simulator models it."""
        s = self.spec
        return MeterCircuit(series_ohm=self.r_ohm, cap_f=s.cap_f, zener_v=s.vz_v, run_a=s.meter_a,
                            knee_v=s.meter_knee_v, off_v=s.meter_min_v, on_v=s.meter_on_v)

    @property
    def meter_runs_to_v(self) -> float:
        """Lowest steady input at which a running meter stays on, its draw falling as its supply sags."""
        return self.circuit.dropout_rail_v()

    @property
    def meter_restarts_at_v(self) -> float:
        """Steady input above which a switched-off meter starts again."""
        return self.circuit.restart_rail_v()

    def cycling(self) -> Cycle | None:
        """The meter's on/off cycle in the middle of the inputs where it cycles, or ``None`` if it never does."""
        low, high = self.meter_restarts_at_v, self.meter_runs_to_v
        return self.circuit.cycle(0.5 * (low + high)) if low < high else None


def plan(spec: ZenerSpec, r_ohm: float | None = None) -> Feed:
    """The feed for ``spec``: the planner's choice, or the user's own resistor ``r_ohm`` checked against it."""
    check(spec)
    if r_ohm is not None:
        return Feed(spec, r_ohm, chosen=False)
    return Feed(spec, choose(spec))


def warnings(feed: Feed) -> list[str]:
    """Lines for what would burn or drop out with this resistor."""
    s, r = feed.spec, format_value(feed.r_ohm, "ohm")
    at_top = f"at {format_value(s.vin_max_v, 'V')} with the meter disconnected"
    out = []
    if exceeds(feed.zener_worst_w, s.pz_w):
        out.append(f"with {r} the Zener dissipates {format_value(feed.zener_worst_w, 'W')} {at_top}, above its "
                   f"{format_value(s.pz_w, 'W')} rating: it will fail; use {format_value(smallest_ohm(s), 'ohm')} "
                   "or more, or a bigger Zener (--pz-w)")
    elif exceeds(feed.zener_worst_w, s.derate * s.pz_w):
        out.append(f"with {r} the Zener runs at {100 * feed.zener_worst_w / s.pz_w:.0f} % of its "
                   f"{format_value(s.pz_w, 'W')} rating {at_top}, above the {s.derate * 100:.0f} % derating "
                   f"(--derate-pct); a Zener rated {format_value(feed.zener_worst_w / s.derate, 'W')} or more "
                   "keeps the margin")
    if s.resistor_w is not None and exceeds(feed.resistor_w, s.derate * s.resistor_w):
        out.append(f"the resistor dissipates {format_value(feed.resistor_w, 'W')} at "
                   f"{format_value(s.vin_max_v, 'V')}, above {s.derate * 100:.0f} % of its "
                   f"{format_value(s.resistor_w, 'W')} rating (--resistor-w); use a "
                   f"{size_text(feed.resistor_w / s.derate)} part")
    if exceeds(feed.regulates_to_v, s.vin_min_v):
        out.append(f"with {r} the Zener stops regulating below {format_value(feed.regulates_to_v, 'V')}, above "
                   f"the lowest input {format_value(s.vin_min_v, 'V')} (--vin-min); use "
                   f"{format_value(largest_ohm(s), 'ohm')} or less")
    return out


def size_text(watts: float) -> str:
    size = resistor_size_w(watts)
    return f"{format_value(size, 'W')}" if size is not None else f"{format_value(watts, 'W')} or bigger"

