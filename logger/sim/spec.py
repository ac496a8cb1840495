"""Reading the physics tables of a scenario file, with one-line errors naming the file and the key.

The file layout (``[rig]`` aside, which is a rig file's tables under one name)::

    name, description, duration_s, repeat (true: the faults and load steps start again after duration_s)
    [link]       rate_hz, drift_ppm, drop_line, corrupt_byte, drop_byte
    [adc]        bits, vref_mv, noise_lsb, inl_lsb, offset_lsb = {channel = counts}, gain_error = {channel = x}
    [[rail]]     name, volts, amps
      [rail.supply]   kind = "regulated": setpoint_v, source_ohm, current_limit_a, ripple_hz, ripple_pp_v
                      kind = "battery": cells, capacity_ah, internal_ohm, soc, current_limit_a, tick_s,
                                        curve_soc, curve_ocv_v
      [rail.load]     min_v, period_s, steps = [{at_s, mode, value, ramp_to, ramp_s}, ...]
      [[rail.fault]]  kind, start_s, duration_s, level, fall_s, rise_s, every_s, times
    [[meter]]    channel, rail, series_ohm, cap_uf, zener_v, zener_ohm, run_ma, knee_v, off_v, on_v, off_kohm
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace
from typing import Any, TypeVar

from logger.panel_meter import MeterCircuit
from logger.sim.adc import AdcSpec
from logger.sim.battery import Battery
from logger.sim.load import LoadSchedule, LoadStep
from logger.sim.model import MeterSpec, Physics
from logger.sim.rail import RailSpec
from logger.sim.supply import Fault, RegulatedSupply, check_faults

T = TypeVar("T")


class ScenarioError(ValueError):
    """A scenario file is missing or wrong; the message is one line naming the file and the key."""


class Reader:
    """Typed access to TOML tables; every failure names the file and the dotted key."""

    def __init__(self, source: str) -> None:
        self.source = source

    def fail(self, key: str, problem: str) -> ScenarioError:
        """An error for ``key``; ``problem`` says what was expected."""
        return ScenarioError(f"{self.source}: {key}: {problem}")

    def keys(self, table: Any, where: str, allowed: tuple[str, ...]) -> dict[str, Any]:
        """``table`` as a dict with no keys but ``allowed`` (a typo is an error, not a silent default)."""
        if not isinstance(table, dict):
            raise self.fail(where or "(top level)", "expected a table")
        for key in table:
            if key not in allowed:
                raise self.fail(_key(where, key), f"unknown key (expected one of {', '.join(allowed)})")
        return table

    def number(self, table: dict[str, Any], key: str, where: str, default: float | None = None, *,
               low: float = -math.inf, positive: bool = False, allow_inf: bool = False) -> float:
        """A finite number at least ``low`` (or above 0 when ``positive``); ``default`` when missing."""
        value = table.get(key, default)
        label = _key(where, key)
        if value is None:
            raise self.fail(label, "missing (a number)")
        if isinstance(value, bool) or not isinstance(value, int | float) or math.isnan(value):
            raise self.fail(label, f"expected a number, got {value!r}")
        if key in table and math.isinf(value) and not allow_inf:
            raise self.fail(label, f"expected a finite number, got {value!r}")
        if positive and not value > 0:
            raise self.fail(label, f"expected a positive number, got {value!r}")
        if value < low:
            raise self.fail(label, f"expected a number >= {low:g}, got {value!r}")
        return float(value)

    def integer(self, table: dict[str, Any], key: str, where: str, default: int | None = None) -> int:
        """A positive integer."""
        value = table.get(key, default)
        if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
            raise self.fail(_key(where, key), f"expected a positive integer, got {value!r}")
        return value

    def text(self, table: dict[str, Any], key: str, where: str, default: str | None = None) -> str:
        """A string."""
        value = table.get(key, default)
        if not isinstance(value, str):
            raise self.fail(_key(where, key), f"expected a string, got {value!r}")
        return value

    def flag(self, table: dict[str, Any], key: str, where: str, default: bool) -> bool:
        """A true or false."""
        value = table.get(key, default)
        if not isinstance(value, bool):
            raise self.fail(_key(where, key), f"expected true or false, got {value!r}")
        return value

    def table(self, value: Any, where: str) -> dict[str, Any]:
        """``value`` if it is a table, whatever its keys."""
        if not isinstance(value, dict):
            raise self.fail(where, "expected a table")
        return value

    def tables(self, doc: dict[str, Any], key: str, where: str) -> list[dict[str, Any]]:
        """An array of tables (``[[key]]``), possibly empty."""
        value = doc.get(key, [])
        if not isinstance(value, list) or not all(isinstance(t, dict) for t in value):
            raise self.fail(f"{where}{key}", "expected an array of tables ([[...]])")
        return value

    def build(self, where: str, make: Callable[[], T]) -> T:
        """Run a constructor, turning its ``ValueError`` into a one-line error at ``where``."""
        try:
            return make()
        except ValueError as exc:
            raise self.fail(where, str(exc)) from None


def read_adc(r: Reader, table: Any) -> AdcSpec:
    """The ``[adc]`` table."""
    t = r.keys(table, "adc", ("bits", "vref_mv", "noise_lsb", "inl_lsb", "offset_lsb", "gain_error"))
    per_channel = {}
    for key in ("offset_lsb", "gain_error"):
        values = r.table(t.get(key, {}), f"adc.{key}")
        per_channel[key] = {name: r.number(values, name, f"adc.{key}") for name in values}
    return r.build("adc", lambda: AdcSpec(
        bits=r.integer(t, "bits", "adc", 12), vref_mv=r.integer(t, "vref_mv", "adc", 3300),
        noise_lsb=r.number(t, "noise_lsb", "adc", 1.0, low=0.0), inl_lsb=r.number(t, "inl_lsb", "adc", 0.0),
        **per_channel))


def read_physics(r: Reader, doc: dict[str, Any]) -> Physics:
    """The ``[[rail]]`` and ``[[meter]]`` tables."""
    rails = tuple(read_rail(r, t, f"rail[{i}]") for i, t in enumerate(r.tables(doc, "rail", "")))
    if not rails:
        raise r.fail("rail", "no [[rail]] tables; a scenario needs at least one rail")
    names = [rail.name for rail in rails]
    if len(set(names)) != len(names):
        raise r.fail("rail", f"rail names must differ, got {names}")
    meters = tuple(read_meter(r, t, f"meter[{i}]", names) for i, t in enumerate(r.tables(doc, "meter", "")))
    return Physics(rails, meters)


def repeating(r: Reader, physics: Physics, period_s: float) -> Physics:
    """The physics with every rail's faults, and any load schedule without a period of its own, starting
    again every ``period_s`` (meters and other state carry on)."""
    rails = []
    for i, rail in enumerate(physics.rails):
        where = f"rail[{i}]"
        if isinstance(rail.supply, Battery):
            raise r.fail(f"{where}.supply", "a battery pack runs down, so its scenario cannot repeat; "
                                            "set repeat = false")
        supply = r.build(f"{where}.fault", lambda s=rail.supply: replace(s, period_s=period_s))
        load = rail.load
        if load.period_s is None and load.steps:
            load = r.build(f"{where}.load", lambda ld=load: replace(ld, period_s=period_s))
        rails.append(replace(rail, supply=supply, load=load))
    return replace(physics, rails=tuple(rails))


def read_rail(r: Reader, table: Any, where: str) -> RailSpec:
    """One ``[[rail]]`` table."""
    t = r.keys(table, where, ("name", "volts", "amps", "supply", "load", "fault"))
    tables = enumerate(r.tables(t, "fault", f"{where}."))
    faults = tuple(fault for i, f in tables for fault in read_fault(r, f, f"{where}.fault[{i}]"))
    faults = r.build(f"{where}.fault", lambda: check_faults(faults))
    supply = read_supply(r, t.get("supply"), f"{where}.supply", faults)
    load = read_load(r, t.get("load", {}), f"{where}.load")
    volts = r.text(t, "volts", where, "") or None
    amps = r.text(t, "amps", where, "") or None
    return RailSpec(r.text(t, "name", where), supply, load, volts, amps)


def read_supply(r: Reader, table: Any, where: str, faults: tuple[Fault, ...]) -> RegulatedSupply | Battery:
    """A ``[rail.supply]`` table, regulated or battery."""
    if table is None:
        raise r.fail(where, "missing (a table with kind = \"regulated\" or \"battery\")")
    kind = r.text(r.table(table, where), "kind", where, "regulated")
    common = {"current_limit_a": r.number(table, "current_limit_a", where, math.inf, positive=True, allow_inf=True)}
    if kind == "regulated":
        t = r.keys(table, where, ("kind", "setpoint_v", "source_ohm", "current_limit_a", "ripple_hz", "ripple_pp_v"))
        return r.build(where, lambda: RegulatedSupply(
            setpoint_v=r.number(t, "setpoint_v", where, positive=True),
            source_ohm=r.number(t, "source_ohm", where, 0.0, low=0.0),
            ripple_hz=r.number(t, "ripple_hz", where, 100.0, positive=True),
            ripple_pp_v=r.number(t, "ripple_pp_v", where, 0.0, low=0.0), faults=faults, **common))
    if kind == "battery":
        t = r.keys(table, where, ("kind", "cells", "capacity_ah", "internal_ohm", "soc", "current_limit_a",
                                  "tick_s", "curve_soc", "curve_ocv_v"))
        curve = {k: tuple(_numbers(r, t[k], f"{where}.{k}")) for k in ("curve_soc", "curve_ocv_v") if k in t}
        return r.build(where, lambda: Battery(
            cells=r.integer(t, "cells", where), capacity_ah=r.number(t, "capacity_ah", where, positive=True),
            internal_ohm=r.number(t, "internal_ohm", where, 0.0, low=0.0), soc=r.number(t, "soc", where, 1.0),
            tick_s=r.number(t, "tick_s", where, 1.0, positive=True), faults=faults, **curve, **common))
    raise r.fail(f"{where}.kind", f"expected \"regulated\" or \"battery\", got {kind!r}")


def read_load(r: Reader, table: Any, where: str) -> LoadSchedule:
    """A ``[rail.load]`` table."""
    t = r.keys(table, where, ("min_v", "period_s", "steps"))
    raw = t.get("steps", [])
    if not isinstance(raw, list):
        raise r.fail(f"{where}.steps", "expected an array of tables such as [{ at_s = 0, mode = \"cc\", value = 1 }]")
    steps = []
    for i, step in enumerate(raw):
        w = f"{where}.steps[{i}]"
        s = r.keys(step, w, ("at_s", "mode", "value", "ramp_to", "ramp_s"))
        ramp_to = r.number(s, "ramp_to", w) if "ramp_to" in s else None
        steps.append(r.build(w, lambda s=s, w=w, ramp_to=ramp_to: LoadStep(
            at_s=r.number(s, "at_s", w, low=0.0), mode=r.text(s, "mode", w), value=r.number(s, "value", w, 0.0),
            ramp_to=ramp_to, ramp_s=r.number(s, "ramp_s", w, 0.0, low=0.0))))
    period = r.number(t, "period_s", where, positive=True) if "period_s" in t else None
    return r.build(where, lambda: LoadSchedule(tuple(steps), period, r.number(t, "min_v", where, 1.0, low=0.0)))


def read_fault(r: Reader, table: Any, where: str) -> list[Fault]:
    """One ``[[rail.fault]]`` table: one fault, or ``times`` of them ``every_s`` apart."""
    t = r.keys(table, where, ("kind", "start_s", "duration_s", "level", "fall_s", "rise_s", "every_s", "times"))
    kind = r.text(t, "kind", where)
    edges = {k: r.number(t, k, where, positive=True) for k in ("fall_s", "rise_s") if k in t}
    first = r.build(where, lambda: Fault(
        kind=kind, start_s=r.number(t, "start_s", where, low=0.0),
        duration_s=r.number(t, "duration_s", where, low=0.0),
        level=r.number(t, "level", where, 0.0 if kind == "dropout" else None), **edges))
    times = r.integer(t, "times", where, 1)
    every = r.number(t, "every_s", where, positive=True) if "every_s" in t else None
    if times > 1 and every is None:
        raise r.fail(f"{where}.every_s", f"a repeat interval in seconds, since times = {times}")
    return [replace(first, start_s=first.start_s + k * every) for k in range(times)] if every else [first]


def read_meter(r: Reader, table: Any, where: str, rails: list[str]) -> MeterSpec:
    """One ``[[meter]]`` table; circuit values default to :class:`MeterCircuit`'s."""
    t = r.keys(table, where, ("channel", "rail", "series_ohm", "cap_uf", "zener_v", "zener_ohm", "run_ma",
                              "knee_v", "off_v", "on_v", "off_kohm"))
    rail = r.text(t, "rail", where)
    if rail not in rails:
        raise r.fail(f"{where}.rail", f"no rail named {rail!r} (rails: {', '.join(rails)})")
    d = MeterCircuit()
    values = {
        "series_ohm": r.number(t, "series_ohm", where, d.series_ohm, positive=True),
        "cap_f": r.number(t, "cap_uf", where, d.cap_f * 1e6, positive=True) * 1e-6,
        "zener_v": r.number(t, "zener_v", where, d.zener_v, positive=True),
        "zener_ohm": r.number(t, "zener_ohm", where, d.zener_ohm, positive=True),
        "run_a": r.number(t, "run_ma", where, d.run_a * 1e3, positive=True) * 1e-3,
        "knee_v": r.number(t, "knee_v", where, d.knee_v, positive=True),
        "off_v": r.number(t, "off_v", where, d.off_v, positive=True),
        "on_v": r.number(t, "on_v", where, d.on_v, positive=True),
        "off_ohm": r.number(t, "off_kohm", where, d.off_ohm * 1e-3, positive=True, allow_inf=True) * 1e3,
    }
    circuit = r.build(where, lambda: MeterCircuit(**values))
    return MeterSpec(r.text(t, "channel", where), rail, circuit)


def _numbers(r: Reader, value: Any, where: str) -> list[float]:
    if not isinstance(value, list) or not value:
        raise r.fail(where, "expected an array of numbers")
    if not all(isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v) for v in value):
        raise r.fail(where, f"expected an array of finite numbers, got {value!r}")
    return [float(v) for v in value]


def _key(where: str, key: str) -> str:
    """Dotted key for messages: ``rail[0].supply`` and ``setpoint_v`` give ``rail[0].supply.setpoint_v``."""
    return f"{where}.{key}" if where else key
