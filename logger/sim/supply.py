"""The supply side of a simulated rail: an open-circuit voltage (EMF) behind a source resistance.

A regulated supply holds its set-point, carries ripple, and is pulled down by scheduled faults on its input:
a sag (dip) to a fraction of the set-point for a while, or a dropout (interruption) to about 0 V. Fault
levels are fractions of the set-point, as the DC immunity test levels of IEC 61000-4-29 are fractions of the
rated voltage (70 %, 40 % and 0 %); a slow sag is the same fault with long falling and rising edges.

Everything here is a plain function of time and vectorised over blocks of samples; the output voltage
under load (``V = E - I * R``) is found with the load in :mod:`logger.sim.load`.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

FAULT_KINDS = ("sag", "dropout")
EDGE_S = 10e-6
"""Default falling and rising edge of a fault: IEC 61000-4-29 asks a test generator for edges of 1 us to
50 us, far shorter than one sample at the tap's rates, so a dip looks like a step."""
DROPOUT_MAX_LEVEL = 0.1
"""A dropout leaves at most this fraction of the set-point; anything higher is a sag."""


@dataclass(frozen=True)
class Fault:
    """One scheduled disturbance of a supply's input, seen as its EMF falling to ``level`` of the set-point.

    The EMF falls linearly over ``fall_s`` from ``start_s``, holds at the level for ``duration_s``, then
    rises back over ``rise_s``.
    """

    kind: str
    """``"sag"`` (a dip that leaves some voltage) or ``"dropout"`` (an interruption to about 0 V)."""
    start_s: float
    duration_s: float
    level: float
    """Fraction of the set-point left while the fault holds (0.7, 0.4, 0.0 ...)."""
    fall_s: float = EDGE_S
    rise_s: float = EDGE_S

    def __post_init__(self) -> None:
        if self.kind not in FAULT_KINDS:
            raise ValueError(f"fault kind must be one of {', '.join(FAULT_KINDS)}, got {self.kind!r}")
        if not 0.0 <= self.level < 1.0:
            raise ValueError(f"fault level must be from 0 to below 1, got {self.level}")
        if (self.kind == "dropout") != (self.level <= DROPOUT_MAX_LEVEL):
            raise ValueError(f"a {self.kind} cannot have level {self.level} (dropouts leave at most "
                             f"{DROPOUT_MAX_LEVEL:g} of the set-point, sags more)")
        if self.duration_s < 0 or self.fall_s <= 0 or self.rise_s <= 0:
            raise ValueError("fault duration must be >= 0 and its edges > 0")

    @property
    def hold_start_s(self) -> float:
        """When the EMF reaches the fault level."""
        return self.start_s + self.fall_s

    @property
    def hold_end_s(self) -> float:
        """When the EMF starts to recover."""
        return self.hold_start_s + self.duration_s

    @property
    def end_s(self) -> float:
        """When the EMF is back at the set-point."""
        return self.hold_end_s + self.rise_s


def check_faults(faults: Sequence[Fault]) -> tuple[Fault, ...]:
    """Faults in time order; raises ``ValueError`` if two overlap (one supply has one input)."""
    ordered = tuple(sorted(faults, key=lambda f: f.start_s))
    for before, after in itertools.pairwise(ordered):
        if after.start_s <= before.end_s:
            raise ValueError(f"faults at {before.start_s:g} s and {after.start_s:g} s overlap")
    return ordered


def scheduled(faults: Sequence[Fault], until_s: float, period_s: float | None = None) -> list[Fault]:
    """The faults starting before ``until_s``, started again every ``period_s`` if given (one period of them when
    ``until_s`` is unbounded)."""
    if period_s is None:
        return [f for f in faults if f.start_s < until_s]
    rounds = 1 if math.isinf(until_s) else math.ceil(until_s / period_s)
    shifted = (replace(f, start_s=f.start_s + k * period_s) for k in range(rounds) for f in faults)
    return [f for f in shifted if f.start_s < until_s]


def fault_envelope(faults: Sequence[Fault], t_s: np.ndarray) -> np.ndarray:
    """Fraction of the set-point the faults leave at each time (1 where none is active).

    Args:
        faults: non-overlapping faults in time order (see :func:`check_faults`).
        t_s: times in seconds.
    """
    t = np.asarray(t_s, dtype=np.float64)
    if not faults:
        return np.ones(t.shape)
    xp = np.array([[f.start_s, f.hold_start_s, f.hold_end_s, f.end_s] for f in faults]).ravel()
    fp = np.array([[1.0, f.level, f.level, 1.0] for f in faults]).ravel()
    return np.interp(t, xp, fp, left=1.0, right=1.0)


@dataclass(frozen=True)
class RegulatedSupply:
    """A supply that holds its set-point behind a source resistance, up to a current limit.

    Attributes:
        setpoint_v: open-circuit output voltage.
        source_ohm: output sags by ``I * source_ohm`` under load (regulation, wiring, a series diode).
        current_limit_a: the supply turns into a current source above this (``inf``: no limit).
        ripple_hz: ripple frequency (100 Hz: full-wave rectified 50 Hz mains).
        ripple_pp_v: ripple peak-to-peak at the set-point; it shrinks with the EMF during a fault.
        faults: scheduled input faults.
        period_s: the faults repeat with this period (``None``: they happen once).
    """

    setpoint_v: float
    source_ohm: float = 0.0
    current_limit_a: float = math.inf
    ripple_hz: float = 100.0
    ripple_pp_v: float = 0.0
    faults: tuple[Fault, ...] = ()
    period_s: float | None = None

    def __post_init__(self) -> None:
        if not self.setpoint_v > 0 or self.source_ohm < 0 or not self.current_limit_a > 0:
            raise ValueError("a supply needs a positive set-point and current limit and a source resistance >= 0")
        object.__setattr__(self, "faults", check_faults(self.faults))
        if self.period_s is not None and self.faults and not self.faults[-1].end_s < self.period_s:
            raise ValueError(f"a fault ends at {self.faults[-1].end_s:g} s, past the {self.period_s:g} s after which "
                             "the faults repeat")

    @property
    def nominal_v(self) -> float:
        """The voltage fault levels are fractions of."""
        return self.setpoint_v

    def emf_v(self, t_s: np.ndarray) -> np.ndarray:
        """Open-circuit voltage at each time: set-point plus ripple, scaled by any active fault."""
        t = np.asarray(t_s, dtype=np.float64)
        emf = np.full(t.shape, self.setpoint_v)
        if self.ripple_pp_v:
            emf += 0.5 * self.ripple_pp_v * np.sin(2.0 * np.pi * self.ripple_hz * t)
        return emf * fault_envelope(self.faults, t if self.period_s is None else np.mod(t, self.period_s))

    def scheduled(self, until_s: float) -> list[Fault]:
        """Every fault starting before ``until_s``, repeats included (one period of them if it is unbounded)."""
        return scheduled(self.faults, until_s, self.period_s)
