"""Raw ADC counts to calibrated values, vectorised over batches.

For now each channel is a straight line fixed by the rig file and the device header:
``value = (counts - offset_counts) * vref / 2**bits * units_per_pin_volt``; the LSB is ``vref / 2**bits``
(the usual convention for an N-bit converter). Multi-point calibration profiles will replace the line per
channel without changing how batches flow through here.
"""

from __future__ import annotations

import numpy as np

from logger.rig import Rig, RigError
from logger.wire.frames import DeviceHeader, FrameBatch


class Calibrator:
    """Applies per-channel scaling to (frames, inputs) count arrays; output columns follow the rig's order."""

    def __init__(self, rig: Rig, header: DeviceHeader) -> None:
        inputs = len(header.channels)
        for ch in rig.channels:
            if ch.input >= inputs:
                raise RigError(
                    f"{rig.source}: channel {ch.name!r} reads input {ch.input}, but the device sends "
                    f"{inputs} channel(s) ({', '.join(header.channels)}); fix its `input`"
                )
        lsb_v = header.vref_mv / 1000.0 / (1 << header.adc_bits)
        self.inputs = np.array([ch.input for ch in rig.channels])
        self.gain = np.array([lsb_v * ch.units_per_pin_volt() for ch in rig.channels], dtype=np.float64)
        self.offset = np.array([ch.offset_counts for ch in rig.channels], dtype=np.float64)
        self.full_scale = (1 << header.adc_bits) - 1

    def apply(self, counts: np.ndarray) -> np.ndarray:
        """Calibrated values, float32, shape (frames, rig channels)."""
        picked = counts[:, self.inputs].astype(np.float64)
        return ((picked - self.offset) * self.gain).astype(np.float32)

    def zero(self, k: int, counts: np.ndarray) -> float:
        """Make channel ``k`` read zero at the mean of these raw counts (a tare); returns the new offset."""
        self.offset[k] = float(np.mean(counts))
        return float(self.offset[k])

    def at_limit(self, counts: np.ndarray) -> tuple[bool, ...]:
        """For one row of selected counts: which channels sit at the bottom or top of the ADC's range, where
        the true value may lie anywhere beyond what was read."""
        return tuple(bool(c <= 0 or c >= self.full_scale) for c in counts)

    def select(self, counts: np.ndarray) -> np.ndarray:
        """The raw counts of the rig's channels, in the rig's order."""
        return counts[:, self.inputs]


def stand_in_header(rig: Rig, batch: FrameBatch) -> DeviceHeader | None:
    """A header made from the rig's ``[device]`` settings, for firmware that never sends one (None if the rig
    does not say the ADC's bits and reference); the rate is read off the device clock."""
    dev = rig.device
    if dev.adc_bits is None or dev.vref_mv is None:
        return None
    steps = np.diff(batch.device_us.astype(np.int64)) % (1 << 32)
    rate = 1e6 / float(np.median(steps)) if len(steps) else 1000.0
    names = tuple(f"in{k}" for k in range(batch.channels))
    return DeviceHeader("unknown", "?", dev.adc_bits, dev.vref_mv, round(rate, 3), names, "rig")
