"""The tap's analogue front end and ADC: true rail values in, raw counts out, with a real converter's faults.

Each channel reaches its ADC pin through the scaling the rig file gives it (a divider for volts and aux, a
shunt and amplifier for amps; a negative rail is seen as its magnitude). The converter then adds what a
calibration has to take out or live with: an offset and a gain error per channel, an integral
non-linearity shaped as a smooth bow that is zero at both ends of the range and largest at mid-scale, and
Gaussian noise. Codes are rounded and clipped to the converter's range.

Noise is drawn in sample order from one generator, so the same samples give the same counts whether they
are asked for at once or in several blocks.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from logger.rig import Channel


@dataclass(frozen=True)
class AdcSpec:
    """The converter and its errors.

    Attributes:
        bits: resolution.
        vref_mv: full-scale reference.
        noise_lsb: standard deviation of the noise, in counts.
        inl_lsb: integral non-linearity at mid-scale, in counts (a bow ``4 u (1 - u)`` over the range).
        offset_lsb: offset per channel name, in counts (missing names: 0).
        gain_error: gain error per channel name, as a fraction (0.002 reads 0.2 % high; missing names: 0).
    """

    bits: int = 12
    vref_mv: int = 3300
    noise_lsb: float = 1.0
    inl_lsb: float = 0.0
    offset_lsb: Mapping[str, float] = field(default_factory=dict)
    gain_error: Mapping[str, float] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if not 1 <= self.bits <= 16 or self.vref_mv <= 0 or self.noise_lsb < 0:
            raise ValueError("ADC needs 1 to 16 bits, a positive reference and noise >= 0")

    @property
    def full_scale(self) -> int:
        """Number of codes."""
        return 1 << self.bits


class Adc:
    """Counts for a set of rig channels, in the order given.

    Args:
        spec: converter and errors.
        channels: the rig channels, in data-line order; their scaling turns true values into pin volts.
        rng: noise generator (its draws are consumed in sample order).
    """

    def __init__(self, spec: AdcSpec, channels: Sequence[Channel], rng: np.random.Generator) -> None:
        self.spec = spec
        self.channels = tuple(channels)
        self._rng = rng
        self._pin_per_unit = np.array([1.0 / abs(ch.units_per_pin_volt()) for ch in self.channels])
        self._offset = np.array([spec.offset_lsb.get(ch.name, 0.0) for ch in self.channels])
        self._gain = np.array([1.0 + spec.gain_error.get(ch.name, 0.0) for ch in self.channels])

    def ideal_codes(self, values: np.ndarray) -> np.ndarray:
        """Codes a perfect converter would give (not rounded), shape (n, channels)."""
        pins = np.abs(np.asarray(values, dtype=np.float64)) * self._pin_per_unit
        return pins / (self.spec.vref_mv / 1000.0) * self.spec.full_scale

    def counts(self, values: np.ndarray) -> np.ndarray:
        """uint16 counts for true values (channel units, shape (n, channels)), errors and noise included."""
        spec = self.spec
        full = spec.full_scale
        code = self.ideal_codes(values) * self._gain + self._offset
        if spec.inl_lsb:
            u = np.clip(code / full, 0.0, 1.0)
            code += spec.inl_lsb * 4.0 * u * (1.0 - u)
        if spec.noise_lsb:
            code += self._rng.standard_normal(code.shape) * spec.noise_lsb
        return np.clip(np.rint(code), 0, full - 1).astype(np.uint16)
