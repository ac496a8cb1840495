"""A whole simulated rig with physics: rails, self-powered meters and the tap's ADC, as a ``RigModel``.

:class:`Physics` is the frozen description (what a scenario file gives); :class:`TrueRig` runs it and gives
the true value of every tap channel in data-line order; :class:`PhysicalRig` puts the ADC behind it and is
what :class:`~logger.sim.device.SimDevice` samples through its ``counts(t_s)``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from logger.panel_meter import MeterCircuit
from logger.rig import Channel, Rig
from logger.sim.adc import Adc, AdcSpec
from logger.sim.meter import MeterNode, Switch
from logger.sim.rail import Rail, RailSpec


@dataclass(frozen=True)
class MeterSpec:
    """A panel meter fed from rail ``rail``; its supply node is tapped as channel ``channel``."""

    channel: str
    rail: str
    circuit: MeterCircuit = field(default_factory=MeterCircuit)


@dataclass(frozen=True)
class Physics:
    """Everything a scenario's rig does physically."""

    rails: tuple[RailSpec, ...]
    meters: tuple[MeterSpec, ...] = ()

    def rail(self, name: str) -> RailSpec:
        """The rail called ``name``."""
        for spec in self.rails:
            if spec.name == name:
                return spec
        raise KeyError(name)

    def feeds(self) -> dict[str, tuple[str, str]]:
        """For each tapped channel name: ``(rail or meter, what)`` with what in volts, amps, node."""
        found: dict[str, tuple[str, str]] = {}
        for spec in self.rails:
            for what in ("volts", "amps"):
                name = getattr(spec, what)
                if name is not None:
                    found[name] = (spec.name, what)
        for meter in self.meters:
            found[meter.channel] = (meter.rail, "node")
        return found


def ordered_channels(rig: Rig) -> tuple[Channel, ...]:
    """The rig's channels in data-line order (by input)."""
    return tuple(sorted(rig.channels, key=lambda ch: ch.input))


class TrueRig:
    """Physics in motion: true values of every channel, signed as the rig reports them.

    Rails are plain functions of time; meters carry state, so :meth:`values` must be called with times
    increasing from call to call (as a device samples).

    Args:
        physics: the description.
        channels: the tap's channels in data-line order.
    """

    def __init__(self, physics: Physics, channels: Sequence[Channel]) -> None:
        self.physics = physics
        self.channels = tuple(channels)
        self.rails = {spec.name: Rail(spec) for spec in physics.rails}
        self.meters = {m.channel: MeterNode(m.circuit) for m in physics.meters}
        self._meter_rail = {m.channel: m.rail for m in physics.meters}
        feeds = physics.feeds()
        self._feeds = [feeds[ch.name] for ch in self.channels]
        self._sign = np.array([-1.0 if ch.negative else 1.0 for ch in self.channels])

    def values(self, t_s: np.ndarray) -> np.ndarray:
        """True values at each time, shape (n, channels), in channel units (negative rails below zero)."""
        t = np.asarray(t_s, dtype=np.float64)
        rails = {name: rail.values(t) for name, rail in self.rails.items()}
        nodes = {name: node.advance(t, rails[self._meter_rail[name]][0])[0] for name, node in self.meters.items()}
        out = np.empty((len(t), len(self.channels)))
        for col, (source, what) in enumerate(self._feeds):
            if what == "node":
                out[:, col] = nodes[self.channels[col].name]
            else:
                out[:, col] = rails[source][0 if what == "volts" else 1]
        return out * self._sign

    def switches(self) -> dict[str, list[Switch]]:
        """Every meter switch so far, per meter channel."""
        return {name: list(node.switches) for name, node in self.meters.items()}


class PhysicalRig:
    """A :class:`~logger.sim.device.RigModel` with physics behind it: rails, meters and a real ADC.

    Args:
        physics: rails and meters.
        rig: the rig the tap is wired as (channel order, scaling, signs).
        adc: converter and its errors.
        seed: seed for the ADC noise.
    """

    def __init__(self, physics: Physics, rig: Rig, adc: AdcSpec, seed: int | None = 0) -> None:
        ordered = ordered_channels(rig)
        self.channels: tuple[str, ...] = tuple(ch.name for ch in ordered)
        self.adc_bits = adc.bits
        self.vref_mv = adc.vref_mv
        self.truth = TrueRig(physics, ordered)
        rng = np.random.default_rng(None if seed is None else [seed, 0x51D])
        self.adc = Adc(adc, ordered, rng)
        self._last = np.empty((0, len(ordered)))

    def counts(self, t_s: np.ndarray) -> np.ndarray:
        """What the ADC reads at each time: uint16 counts, shape (n, channels)."""
        self._last = self.truth.values(t_s)
        return self.adc.counts(self._last)

    @property
    def last_values(self) -> np.ndarray:
        """True values behind the last block of counts (for checks and plots)."""
        return self._last

    def switches(self) -> dict[str, list[Switch]]:
        """Every meter switch during the samples taken so far, per meter channel."""
        return self.truth.switches()
