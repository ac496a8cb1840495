"""Raw ADC counts to calibrated values, vectorised over batches.

A channel without a calibration profile is a straight line fixed by the rig file and the device header:
``value = (counts - offset_counts) * vref / 2**bits * units_per_pin_volt``; the LSB is ``vref / 2**bits``
(the usual convention for an N-bit converter). A channel whose rig entry names a profile uses the profile's
curve instead (:mod:`logger.cal`), and its readings outside the profile's calibrated span are flagged.
"""

from __future__ import annotations

import numpy as np

from logger.cal.assess import Curve
from logger.cal.profile import Profile
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
        self.curves: dict[int, Curve] = {}
        self.spans = np.array([(-np.inf, np.inf)] * len(rig.channels))
        self.adc_bits = header.adc_bits
        for k, ch in enumerate(rig.channels):
            if ch.profile is not None:
                self.use(k, ch.profile, ch.profile_path)

    def use(self, k: int, profile: Profile, where: str | None = None) -> None:
        """Calibrate channel ``k`` with a profile's curve; flag readings outside its span."""
        if profile.adc_bits is not None and profile.adc_bits != self.adc_bits:
            raise RigError(f"{where or 'profile'}: made with a {profile.adc_bits}-bit converter, but the device "
                           f"sends {self.adc_bits}-bit counts; calibrate {profile.channel} again on this device")
        self.curves[k] = profile.curve
        self.spans[k] = profile.span_counts

    def apply(self, counts: np.ndarray) -> np.ndarray:
        """Calibrated values of the device's raw counts (frames, inputs): float32, (frames, rig channels)."""
        return self.values(self.select(counts))

    def values(self, selected: np.ndarray) -> np.ndarray:
        """Calibrated values of the rig's channels' counts (:meth:`select`): float32, (frames, rig channels)."""
        picked = selected.astype(np.float64)
        values = (picked - self.offset) * self.gain
        for k, curve in self.curves.items():
            values[:, k] = curve.value(picked[:, k])
        return values.astype(np.float32)

    def zero(self, k: int, counts: np.ndarray) -> float:
        """Make channel ``k`` read zero at the mean of these raw counts (a tare); returns that mean. A profiled
        channel's curve is shifted; the profile file is left as it is."""
        mean = float(np.mean(counts))
        if k in self.curves:
            self.curves[k] = self.curves[k].shifted(-float(self.curves[k].value(mean)))
        else:
            self.offset[k] = mean
        return mean

    def outside(self, counts: np.ndarray) -> np.ndarray:
        """For selected counts (frames, rig channels): which readings lie outside their profile's calibrated
        span (never for channels without a profile)."""
        return (counts < self.spans[:, 0]) | (counts > self.spans[:, 1])

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
