"""One simulated rail: a supply (regulated or a battery pack) and the electronic load on it.

:class:`RailSpec` is the frozen description a scenario file gives; :class:`Rail` is its running form, which
keeps the one piece of state a rail has (a pack's state of charge). The rail's true voltage and current at
any time come from the supply's EMF and the load's operating point; the small current a self-powered meter
draws from the rail (a few tens of milliamps against amps of load) is left out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from logger.sim.battery import Battery, SocTrack
from logger.sim.load import LoadSchedule, operating_point
from logger.sim.supply import Fault, RegulatedSupply


@dataclass(frozen=True)
class RailSpec:
    """A rail: its supply, its load and the tap channels that watch it.

    Attributes:
        name: the rail's name in the scenario (``out``, ``pos``, ``neg``...).
        supply: what feeds it.
        load: what draws from it.
        volts: the rig channel measuring its voltage, if tapped.
        amps: the rig channel measuring its load current, if tapped.
    """

    name: str
    supply: RegulatedSupply | Battery
    load: LoadSchedule
    volts: str | None = None
    amps: str | None = None

    @property
    def faults(self) -> tuple[Fault, ...]:
        """The supply's scheduled faults."""
        return self.supply.faults

    @property
    def nominal_v(self) -> float:
        """The voltage fault levels refer to."""
        return self.supply.nominal_v


class Rail:
    """A rail in motion: true voltage and current at any time, a pack's charge counted on the way.

    Values depend only on time (a pack's charge is counted on its own fixed grid), so any order and any
    block sizes give the same numbers.
    """

    def __init__(self, spec: RailSpec) -> None:
        self.spec = spec
        supply = spec.supply
        self._soc = SocTrack(supply, self._tick_amps) if isinstance(supply, Battery) else None

    def emf_v(self, t_s: np.ndarray) -> np.ndarray:
        """The supply's open-circuit voltage at each time."""
        t = np.asarray(t_s, dtype=np.float64)
        supply = self.spec.supply
        if isinstance(supply, Battery):
            assert self._soc is not None
            return supply.emf_v(t, self._soc.soc(t))
        return supply.emf_v(t)

    def values(self, t_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """True rail volts and load amps at each time."""
        t = np.asarray(t_s, dtype=np.float64)
        return self._solve(t, self.emf_v(t))

    def soc(self, t_s: np.ndarray) -> np.ndarray:
        """A pack's state of charge at each time (NaN for a regulated supply)."""
        if self._soc is None:
            return np.full(np.shape(t_s), math.nan)
        return self._soc.soc(t_s)

    def soc_ticks(self, until_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """A pack's charge-counting grid up to ``until_s``: tick times, SoC, load amps."""
        if self._soc is None:
            raise ValueError(f"rail {self.spec.name!r} is not fed by a battery")
        return self._soc.ticks(until_s)

    def _solve(self, t: np.ndarray, emf: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        spec = self.spec
        mode, value = spec.load.setting(t)
        return operating_point(emf, spec.supply.source_ohm, mode, value,
                               limit_a=spec.supply.current_limit_a, min_v=spec.load.min_v)

    def _tick_amps(self, t: float, emf: float) -> float:
        return float(self._solve(np.array([t]), np.array([emf]))[1][0])
