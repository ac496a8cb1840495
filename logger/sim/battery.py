"""A battery pack as a supply: open-circuit voltage that droops with state of charge, behind an internal resistance.

The cell's open-circuit voltage (OCV) against state of charge (SoC) is the shape of a typical Li-ion cell
written down from memory (a steep knee below about 10 %, a long gentle slope through the middle, a rise to
4.2 V at full); it is invented for the demo, not taken from a datasheet. The pack is ``cells`` of them in
series with one internal resistance for the pack.

The state of charge is found by counting charge: a :class:`SocTrack` steps it on a fixed grid of ticks in
absolute time (one second by default), using the current the load draws at each tick, and interpolates
between ticks. The grid does not depend on how samples are asked for, so neither do the results; a
one-second tick moves a pack discharged at 1C by 0.03 % of charge, far below anything the droop shows.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from logger.sim.supply import Fault, check_faults, fault_envelope, scheduled

LI_ION_SOC = (0.0, 0.02, 0.05, 0.10, 0.20, 0.30, 0.40, 0.50, 0.60, 0.70, 0.80, 0.90, 1.00)
LI_ION_OCV_V = (3.00, 3.30, 3.47, 3.58, 3.66, 3.72, 3.76, 3.80, 3.86, 3.93, 4.01, 4.09, 4.20)
"""Open-circuit volts of one Li-ion cell at the states of charge above (shape from memory, invented)."""
NOMINAL_CELL_V = 3.7
"""The usual rating of a Li-ion cell (value from memory)."""


@dataclass(frozen=True)
class Battery:
    """A pack of ``cells`` identical cells in series.

    Attributes:
        cells: cells in series.
        capacity_ah: charge from full (SoC 1) to empty (SoC 0).
        internal_ohm: resistance of the whole pack (cells, interconnects, protection switch).
        soc: state of charge at time 0.
        curve_soc: states of charge of the OCV curve, increasing from 0 to 1.
        curve_ocv_v: one cell's open-circuit volts at those points, increasing.
        current_limit_a: protection trip current (``inf``: none).
        faults: scheduled faults (a dropout is the protection switch opening).
        tick_s: charge-counting step.
    """

    cells: int
    capacity_ah: float
    internal_ohm: float = 0.0
    soc: float = 1.0
    curve_soc: tuple[float, ...] = LI_ION_SOC
    curve_ocv_v: tuple[float, ...] = LI_ION_OCV_V
    current_limit_a: float = math.inf
    faults: tuple[Fault, ...] = ()
    tick_s: float = 1.0

    def __post_init__(self) -> None:
        if self.cells < 1 or not self.capacity_ah > 0 or self.internal_ohm < 0 or not self.tick_s > 0:
            raise ValueError("a battery needs cells >= 1, capacity > 0, internal resistance >= 0, tick > 0")
        if not 0.0 <= self.soc <= 1.0:
            raise ValueError(f"state of charge must be from 0 to 1, got {self.soc}")
        soc, ocv = np.asarray(self.curve_soc), np.asarray(self.curve_ocv_v)
        if len(soc) < 2 or len(soc) != len(ocv) or np.any(np.diff(soc) <= 0) or np.any(np.diff(ocv) <= 0):
            raise ValueError("the OCV curve needs two or more points, SoC and volts both increasing")
        if soc[0] != 0.0 or soc[-1] != 1.0:
            raise ValueError("the OCV curve must run from SoC 0 to SoC 1")
        object.__setattr__(self, "faults", check_faults(self.faults))

    @property
    def source_ohm(self) -> float:
        """Internal resistance, so a pack fits where a supply does."""
        return self.internal_ohm

    @property
    def nominal_v(self) -> float:
        """Rated pack voltage (cells times 3.7 V); fault levels are fractions of it."""
        return self.cells * NOMINAL_CELL_V

    @property
    def empty_v(self) -> float:
        """Open-circuit pack voltage at SoC 0: where a discharge test usually stops."""
        return self.cells * self.curve_ocv_v[0]

    def ocv_v(self, soc: np.ndarray) -> np.ndarray:
        """Open-circuit pack voltage at each state of charge.

        Past the ends the curve goes on at its end slopes, so a pack pulled below empty keeps falling
        steeply instead of sitting at a floor.
        """
        s = np.asarray(soc, dtype=np.float64)
        xs, ys = self.curve_soc, self.curve_ocv_v
        cell = np.interp(s, xs, ys)
        low_slope = (ys[1] - ys[0]) / (xs[1] - xs[0])
        high_slope = (ys[-1] - ys[-2]) / (xs[-1] - xs[-2])
        cell = np.where(s < 0.0, ys[0] + low_slope * s, cell)
        cell = np.where(s > 1.0, ys[-1] + high_slope * (s - 1.0), cell)
        return self.cells * cell

    def emf_v(self, t_s: np.ndarray, soc: np.ndarray) -> np.ndarray:
        """Open-circuit voltage at each time for the given states of charge, scaled by any active fault."""
        return self.ocv_v(soc) * fault_envelope(self.faults, t_s)

    def scheduled(self, until_s: float) -> list[Fault]:
        """Every fault starting before ``until_s`` (a pack runs down: its faults never repeat)."""
        return scheduled(self.faults, until_s)


class SocTrack:
    """State of charge of a pack, counted on a fixed tick grid ``k * tick_s`` and extended as asked.

    Args:
        battery: the pack.
        current_at: the load current drawn at time ``t`` when the pack's open-circuit voltage is ``emf``.
    """

    def __init__(self, battery: Battery, current_at: Callable[[float, float], float]) -> None:
        self.battery = battery
        self._current_at = current_at
        self._soc = np.empty(1024)
        self._soc[0] = battery.soc
        self._amps = np.empty(1024)
        self._ticks = 1
        self._per_tick = battery.tick_s / (3600.0 * battery.capacity_ah)

    def soc(self, t_s: np.ndarray) -> np.ndarray:
        """State of charge at each time (linear between ticks)."""
        t = np.asarray(t_s, dtype=np.float64)
        if t.size == 0:
            return np.empty(0)
        self._extend(math.floor(float(t.max()) / self.battery.tick_s) + 2)
        grid = np.arange(self._ticks) * self.battery.tick_s
        return np.interp(t, grid, self._soc[: self._ticks])

    def ticks(self, until_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Tick times, SoC and load amps at each tick up to ``until_s`` (for ground truth)."""
        self._extend(math.floor(until_s / self.battery.tick_s) + 2)
        n = self._ticks - 1
        return np.arange(n) * self.battery.tick_s, self._soc[:n].copy(), self._amps[:n].copy()

    def _extend(self, ticks: int) -> None:
        if ticks <= self._ticks:
            return
        if ticks > len(self._soc):
            size = max(ticks, 2 * len(self._soc))
            self._soc = np.resize(self._soc, size)
            self._amps = np.resize(self._amps, size)
        b = self.battery
        for k in range(self._ticks, ticks):
            t = (k - 1) * b.tick_s
            soc = float(self._soc[k - 1])
            emf = float(b.emf_v(np.array([t]), np.array([soc]))[0])
            amps = self._current_at(t, emf)
            self._amps[k - 1] = amps
            self._soc[k] = soc - amps * self._per_tick
        self._ticks = ticks
