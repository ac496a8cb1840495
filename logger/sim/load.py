"""The load side of a simulated rail: an electronic load's schedule and its operating point on a supply.

An electronic load runs in one of three modes (constant current, constant resistance, constant power) and
follows a schedule of steps and ramps. Where it meets the supply's line ``V = E - I * R`` is the operating
point; in constant resistance and constant power the voltage and current have to be solved together.
Constant power has two roots; the physical one is the higher voltage (lower current) root, on the stable
side of the supply's maximum-power point. When no operating point exists (more power than the supply can
deliver, or more current than its limit) or the voltage would fall below the load's undervoltage limit,
the load drops out as a real electronic load does: it stops sinking current and the rail recovers to its
open-circuit voltage.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

MODES = ("off", "cc", "cr", "cp")
"""Load modes: off, constant current (A), constant resistance (ohm), constant power (W)."""
OFF, CC, CR, CP = range(4)


@dataclass(frozen=True)
class LoadStep:
    """From ``at_s`` the load runs in ``mode`` at ``value``; with ``ramp_to`` it ramps there over ``ramp_s``.

    Values are in the mode's unit: amps (cc), ohms (cr), watts (cp); ignored when off.
    """

    at_s: float
    mode: str
    value: float = 0.0
    ramp_to: float | None = None
    ramp_s: float = 0.0

    def __post_init__(self) -> None:
        if self.mode not in MODES:
            raise ValueError(f"load mode must be one of {', '.join(MODES)}, got {self.mode!r}")
        end = self.value if self.ramp_to is None else self.ramp_to
        if self.mode != "off" and not (self.value >= 0 and end >= 0):
            raise ValueError("load values must be >= 0")
        if self.mode == "cr" and not (self.value > 0 and end > 0):
            raise ValueError("a constant-resistance load needs a resistance > 0")
        if self.ramp_to is not None and not self.ramp_s > 0:
            raise ValueError("a ramp needs ramp_s > 0")


@dataclass(frozen=True)
class LoadSchedule:
    """The steps an electronic load follows; before the first step it is off.

    Attributes:
        steps: the steps; each holds until the next one starts.
        period_s: the whole schedule repeats with this period (``None``: plays once, the last step holds).
        min_v: undervoltage limit: below it the load stops sinking current.
    """

    steps: tuple[LoadStep, ...] = ()
    period_s: float | None = None
    min_v: float = 1.0

    def __post_init__(self) -> None:
        ordered = tuple(sorted(self.steps, key=lambda s: s.at_s))
        starts = [s.at_s for s in ordered]
        if len(set(starts)) != len(starts):
            raise ValueError("two load steps start at the same time")
        if self.period_s is not None and ordered and not (self.period_s > starts[-1] and starts[0] >= 0):
            raise ValueError("every load step must start within one period")
        if self.min_v < 0:
            raise ValueError("the load's undervoltage limit must be >= 0")
        object.__setattr__(self, "steps", ordered)

    def setting(self, t_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mode code (:data:`OFF`, :data:`CC`, :data:`CR`, :data:`CP`) and value at each time."""
        t = np.asarray(t_s, dtype=np.float64)
        if not self.steps:
            return np.zeros(t.shape, dtype=np.int8), np.zeros(t.shape)
        phase = t if self.period_s is None else np.mod(t, self.period_s)
        starts = np.array([s.at_s for s in self.steps])
        index = np.searchsorted(starts, phase, side="right") - 1
        before = index < 0
        index = np.maximum(index, 0)
        modes = np.array([MODES.index(s.mode) for s in self.steps], dtype=np.int8)[index]
        modes[before] = OFF
        first = np.array([s.value for s in self.steps])
        last = np.array([s.value if s.ramp_to is None else s.ramp_to for s in self.steps])
        ramp_s = np.array([s.ramp_s if s.ramp_to is not None else 1.0 for s in self.steps])
        frac = np.clip((phase - starts[index]) / ramp_s[index], 0.0, 1.0)
        values = first[index] + (last[index] - first[index]) * frac
        return modes, values


def operating_point(
    emf_v: np.ndarray,
    source_ohm: float,
    mode: np.ndarray,
    value: np.ndarray,
    *,
    limit_a: float = math.inf,
    min_v: float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Rail voltage and load current where the load meets the supply ``V = E - I * R``.

    Args:
        emf_v: the supply's open-circuit voltage at each sample.
        source_ohm: the supply's source resistance.
        mode: mode code per sample (see :meth:`LoadSchedule.setting`).
        value: amps, ohms or watts per sample.
        limit_a: the supply's current limit; a constant-resistance load is held at it, a constant-current
            or constant-power load asking more collapses the rail and drops out.
        min_v: the load's undervoltage limit.

    Returns:
        ``(volts, amps)``; where the load drops out, amps are 0 and volts the open-circuit voltage.
    """
    emf = np.asarray(emf_v, dtype=np.float64)
    value = np.broadcast_to(np.asarray(value, dtype=np.float64), emf.shape)
    amps = np.zeros(emf.shape)
    ok = np.ones(emf.shape, dtype=bool)
    cc, cr, cp = mode == CC, mode == CR, mode == CP
    amps[cc] = value[cc]
    amps[cr] = emf[cr] / (source_ohm + value[cr])
    # P = V * I with V = E - I * R: R I^2 - E I + P = 0, so I = (E - sqrt(E^2 - 4 R P)) / (2 R), written
    # as 2 P / (E + sqrt(E^2 - 4 R P)) to stay exact as R goes to 0 (then I = P / E).
    disc = emf[cp] ** 2 - 4.0 * source_ohm * value[cp]
    root = np.sqrt(np.maximum(disc, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        amps[cp] = 2.0 * value[cp] / (emf[cp] + root)
    ok[cp] = (disc >= 0) & (emf[cp] > 0)
    over = amps > limit_a
    ok &= ~(over & (cc | cp))
    held = over & cr
    volts = emf - amps * source_ohm
    amps[held] = limit_a
    volts[held] = limit_a * value[held]
    ok &= (mode != OFF) & (volts >= min_v) & np.isfinite(amps)
    amps[~ok] = 0.0
    volts[~ok] = emf[~ok]
    return volts, amps

