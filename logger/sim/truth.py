"""Ground truth of a scenario: true values at any time and the events the scenario caused.

Times are simulated seconds from the device's boot (the model's ``t_s``). A pipeline sees device clock
counts instead; for a device that has not been reset they map as
``device_us = clock_start_us + t_s * (1 + drift_ppm * 1e-6) * 1e6`` (:meth:`SimDevice.clock_us`).

Events are of four kinds:

- ``sag`` and ``dropout``: a scheduled supply fault, from the start of its falling edge to the end of its
  rising edge; ``residual`` is the scheduled level (fraction of the set-point), ``residual_v`` the lowest
  true rail voltage during it (load and ripple included).
- ``droop``: a battery's discharge, from when the load starts drawing to when the load's undervoltage
  limit stops it (``end_s`` is ``inf`` if that has not happened by ``until_s``); ``residual_v`` is the
  last loaded voltage, ``residual`` that over the pack's rated voltage.
- ``meter_off``: a self-powered meter switched off (``start_s``) and back on (``end_s``, ``inf`` if it has
  not); ``residual_v`` is the rail voltage when it switched off, ``residual`` is NaN.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from logger.rig import Channel
from logger.sim.meter import Switch
from logger.sim.model import Physics, TrueRig
from logger.sim.rail import Rail
from logger.sim.supply import RegulatedSupply

_BLOCK = 1 << 16
_FAULT_POINTS = 4001


@dataclass(frozen=True)
class TrueEvent:
    """Something the scenario really did to a channel, in simulated seconds from boot."""

    kind: str
    """``sag``, ``dropout``, ``droop`` or ``meter_off``."""
    channel: str
    start_s: float
    end_s: float
    residual: float
    """Fraction of nominal left (see the module notes for each kind)."""
    residual_v: float

    @property
    def duration_s(self) -> float:
        """How long it lasted."""
        return self.end_s - self.start_s


class Truth:
    """True values and events of one scenario, computed without noise on a uniform grid where state matters.

    Args:
        physics: the scenario's physics.
        channels: the tap's channels in data-line order.
        rate_hz: grid rate for integrating meters (the scenario's sample rate).
    """

    def __init__(self, physics: Physics, channels: tuple[Channel, ...], rate_hz: float) -> None:
        self.physics = physics
        self.channels = channels
        self.rate_hz = rate_hz
        self._rig = TrueRig(physics, channels)
        self._grid_next = 0

    def values(self, t_s: np.ndarray) -> np.ndarray:
        """True values at any times, shape (n, channels), signed as the rig reports them.

        Rails are exact at the given times. A meter's node depends on its history, so it is integrated from
        boot on the uniform grid and interpolated, which costs time in proportion to the latest time asked.
        """
        t = np.asarray(t_s, dtype=np.float64)
        if not self.physics.meters:
            return TrueRig(self.physics, self.channels).values(t)
        fresh = TrueRig(self.physics, self.channels)
        out = np.empty((len(t), len(self.channels)))
        order = np.argsort(t, kind="stable")
        ts = t[order]
        end = math.ceil((ts[-1] if len(ts) else 0.0) * self.rate_hz) + 2
        prev_t, prev_v = np.empty(0), np.empty((0, len(self.channels)))
        done = 0
        for first in range(0, end, _BLOCK):
            grid = np.arange(first, min(end, first + _BLOCK)) / self.rate_hz
            vals = fresh.values(grid)
            gt, gv = np.concatenate((prev_t, grid)), np.concatenate((prev_v, vals))
            stop = int(np.searchsorted(ts, grid[-1], side="right"))
            for col in range(len(self.channels)):
                out[order[done:stop], col] = np.interp(ts[done:stop], gt, gv[:, col])
            done, prev_t, prev_v = stop, grid[-1:], vals[-1:]
        return out

    def fault_events(self, until_s: float = math.inf) -> list[TrueEvent]:
        """Scheduled supply faults starting before ``until_s``."""
        events = []
        for spec in self.physics.rails:
            rail = self._rig.rails[spec.name]
            channel = spec.volts or spec.name
            for f in spec.supply.scheduled(until_s):
                hold = np.linspace(f.start_s, f.end_s, _FAULT_POINTS)
                lowest = float(np.min(rail.values(hold)[0]))
                events.append(TrueEvent(f.kind, channel, f.start_s, f.end_s, f.level, lowest))
        return events

    def droop_events(self, until_s: float) -> list[TrueEvent]:
        """The first discharge of each battery-fed rail up to ``until_s``."""
        events = []
        for spec in self.physics.rails:
            if isinstance(spec.supply, RegulatedSupply):
                continue
            event = _droop(self._rig.rails[spec.name], until_s)
            if event is not None:
                events.append(event)
        return events

    def meter_switches(self, until_s: float) -> dict[str, list[Switch]]:
        """Every meter switch up to ``until_s`` (integrated on the uniform grid, kept between calls)."""
        end = math.floor(until_s * self.rate_hz) + 1
        while self._grid_next < end:
            stop = min(end, self._grid_next + _BLOCK)
            self._rig.values(np.arange(self._grid_next, stop) / self.rate_hz)
            self._grid_next = stop
        return {name: [s for s in sw if s.t_s < until_s] for name, sw in self._rig.switches().items()}

    def meter_events(self, until_s: float) -> list[TrueEvent]:
        """Each time a meter was off, up to ``until_s``."""
        events = []
        for channel, switches in self.meter_switches(until_s).items():
            off = None
            for s in switches:
                if not s.on:
                    off = s
                elif off is not None:
                    events.append(TrueEvent("meter_off", channel, off.t_s, s.t_s, math.nan, off.rail_v))
                    off = None
            if off is not None:
                events.append(TrueEvent("meter_off", channel, off.t_s, math.inf, math.nan, off.rail_v))
        return events

    def events(self, until_s: float) -> list[TrueEvent]:
        """Every true event starting before ``until_s``, in time order."""
        found = self.fault_events(until_s) + self.droop_events(until_s) + self.meter_events(until_s)
        return sorted(found, key=lambda e: (e.start_s, e.channel))


def _droop(rail: Rail, until_s: float) -> TrueEvent | None:
    """Start and cut-off of a pack's first discharge, the cut-off refined to a millisecond."""
    t, _, amps = rail.soc_ticks(until_s)
    drawing = np.flatnonzero(amps > 0)
    if not drawing.size:
        return None
    first = int(drawing[0])
    start = float(t[first])
    if first > 0:
        start = _first_time(rail, t[first - 1], t[first], drawing=True)
    modes, _ = rail.spec.load.setting(t)
    stopped = np.flatnonzero((amps[first:] == 0) & (modes[first:] != 0))
    spec = rail.spec
    channel = spec.volts or spec.name
    if not stopped.size:
        return TrueEvent("droop", channel, start, math.inf, math.nan, math.nan)
    k = first + int(stopped[0])
    end = _first_time(rail, t[k - 1], t[k], drawing=False)
    last_v = float(rail.values(np.array([end - 1e-3]))[0][0])
    return TrueEvent("droop", channel, start, end, last_v / spec.nominal_v, last_v)


def _first_time(rail: Rail, a: float, b: float, *, drawing: bool) -> float:
    """First millisecond in ``[a, b]`` at which the load draws current (or stops drawing)."""
    grid = np.arange(a, b + 1e-3, 1e-3)
    amps = rail.values(grid)[1]
    hit = np.flatnonzero((amps > 0) if drawing else (amps == 0))
    return float(grid[hit[0]]) if hit.size else float(b)
