"""A panel meter powered from the rail it watches, through a series resistor and a Zener diode: one model of
it, shared by the planner (``railtap plan zener``) and the simulator (:mod:`logger.sim.meter`).

::

    rail ──[ series_ohm ]──┬── node ──┬─────────┬──────────┐
                           │          │         │          │
                         cap_f     Zener    meter (regulator + display, with undervoltage lockout)
                           │          │         │          │
    0 V ───────────────────┴──────────┴─────────┴──────────┘

The meter's supply current is that of a linear regulator and display: about ``run_a`` while the node is
above the regulator's drop-out (``knee_v``), and below it, with the regulator passing its input through,
falling in proportion to the voltage towards zero (a meter's draw falls as its supply sags). The meter shuts
off when the node falls below ``off_v`` and restarts only above ``on_v`` (undervoltage lockout with
hysteresis); switched off it draws a small leakage through ``off_ohm``.

Every current draw is piecewise linear in the node voltage (segments split at ``knee_v`` and ``zener_v``), so
within a segment and a meter state the node is a first-order RC circuit that heads for a Thevenin voltage with
a time constant (:meth:`MeterCircuit.thevenin`). From that follow the steady figures the planner prints: the
lowest rail a running meter survives (:meth:`~MeterCircuit.dropout_rail_v`), the rail at which it restarts
(:meth:`~MeterCircuit.restart_rail_v`), and between the two, where the running meter pulls its node below
``off_v`` but the idle one lets it charge above ``on_v``, the period of its on/off cycling
(:meth:`~MeterCircuit.cycle`): RC discharge and charge times, ``tau * ln((V0 - V_th) / (V1 - V_th))``.
A bigger capacitor slows the cycle but cannot stop it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Cycle:
    """The meter turning off and on with the rail held steady at ``rail_v``."""

    rail_v: float
    on_s: float
    """How long it runs: the node discharging from ``on_v`` to ``off_v``."""
    off_s: float
    """How long it stays off: the node charging from ``off_v`` back to ``on_v``."""

    @property
    def period_s(self) -> float:
        return self.on_s + self.off_s


@dataclass(frozen=True)
class MeterCircuit:
    """Values of the meter's feed and of the meter itself.

    The defaults are a trade rule of thumb for a meter on a rail of up to about 35 V: 1 kOhm into a 12 V
    Zener, a meter drawing about 10 mA (values invented for a typical cheap meter, not a datasheet).
    """

    series_ohm: float = 1000.0
    cap_f: float = 100e-6
    zener_v: float = 12.0
    zener_ohm: float = 10.0
    """Dynamic resistance of the Zener above its voltage."""
    run_a: float = 0.010
    knee_v: float = 7.0
    """Node voltage below which the meter's regulator is in drop-out and its current falls."""
    off_v: float = 3.3
    on_v: float = 4.5
    off_ohm: float = 100e3
    """Leakage of the switched-off meter (``inf``: none)."""

    def __post_init__(self) -> None:
        positive = (self.series_ohm, self.cap_f, self.zener_v, self.zener_ohm, self.run_a, self.knee_v,
                    self.off_v, self.off_ohm)
        if not all(v > 0 for v in positive):
            raise ValueError("meter circuit values must all be positive")
        if not self.off_v < self.on_v:
            raise ValueError(f"restart voltage on_v ({self.on_v}) must be above drop-out off_v ({self.off_v})")

    @property
    def breakpoints(self) -> tuple[float, float]:
        """Node voltages where the current draw changes slope, in increasing order: the knee and the Zener."""
        low, high = sorted((self.knee_v, self.zener_v))
        return (low, high)

    def segment(self, node_v: float) -> int:
        """Which linear segment a node voltage is in: 0 below both breakpoints, 1 between them, 2 above."""
        return int(np.searchsorted(self.breakpoints, node_v, side="right"))

    def bounds(self, k: int) -> tuple[float, float]:
        """The node voltages segment ``k`` spans."""
        return (-math.inf, *self.breakpoints)[k], (*self.breakpoints, math.inf)[k]

    def linear(self, on: bool, k: int) -> tuple[float, float]:
        """Current drawn from the node in segment ``k`` as ``g * V + i0``: returns ``(g, i0)``."""
        low, high = self.bounds(k)
        if not on:
            g, i0 = 1.0 / self.off_ohm, 0.0
        elif high <= self.knee_v:
            g, i0 = self.run_a / self.knee_v, 0.0
        else:
            g, i0 = 0.0, self.run_a
        if low >= self.zener_v:
            g, i0 = g + 1.0 / self.zener_ohm, i0 - self.zener_v / self.zener_ohm
        return g, i0

    def thevenin(self, on: bool, k: int, rail_v: float) -> tuple[float, float]:
        """Where the node heads in segment ``k`` and how fast: ``(V_th, tau_s)`` for a given rail voltage."""
        g, i0 = self.linear(on, k)
        conductance = 1.0 / self.series_ohm + g
        return (rail_v / self.series_ohm - i0) / conductance, self.cap_f / conductance

    def draw_a(self, node_v: np.ndarray, on: bool) -> np.ndarray:
        """Current taken from the node by the meter and the Zener (vectorised; for checks and plots)."""
        v = np.asarray(node_v, dtype=np.float64)
        meter = self.run_a * np.minimum(v / self.knee_v, 1.0) if on else v / self.off_ohm
        return meter + np.maximum(v - self.zener_v, 0.0) / self.zener_ohm

    def equilibrium(self, rail_v: float, on: bool) -> float:
        """Steady node voltage for a steady rail with the meter held in one state."""
        for k in range(3):
            v, _ = self.thevenin(on, k, rail_v)
            if self.segment(v) == k:
                return v
        raise AssertionError("a continuous piecewise-linear draw always has an equilibrium")

    def dropout_rail_v(self) -> float:
        """Lowest steady rail voltage at which a running meter stays on (its node rests at ``off_v``)."""
        return self.off_v + self.series_ohm * float(self.draw_a(self.off_v, True))

    def restart_rail_v(self) -> float:
        """Lowest steady rail voltage at which a switched-off meter restarts (its node reaches ``on_v``)."""
        return self.on_v + self.series_ohm * float(self.draw_a(self.on_v, False))

    def cycle(self, rail_v: float) -> Cycle | None:
        """The on/off cycle at a steady rail of ``rail_v``, or ``None`` when the meter settles there instead
        (above :meth:`dropout_rail_v` it keeps running, below :meth:`restart_rail_v` it stays off)."""
        if not self.restart_rail_v() < rail_v < self.dropout_rail_v():
            return None
        return Cycle(rail_v, self.travel_s(True, rail_v, self.on_v, self.off_v),
                     self.travel_s(False, rail_v, self.off_v, self.on_v))

    def travel_s(self, on: bool, rail_v: float, from_v: float, to_v: float) -> float:
        """Time for the node to go from ``from_v`` to ``to_v`` at a steady rail, the meter held in one state,
        summed over the segments it passes (``inf`` if it never gets there)."""
        total, v = 0.0, from_v
        while v != to_v:
            k = self.segment(v) if to_v > v else self.segment(math.nextafter(v, -math.inf))
            low, high = self.bounds(k)
            end = min(to_v, high) if to_v > v else max(to_v, low)
            target, tau = self.thevenin(on, k, rail_v)
            if (end - target) * (v - target) <= 0.0:
                return math.inf
            total += tau * math.log((v - target) / (end - target))
            v = end
        return total
