"""What the screen shows per channel: the rig's channels plus power for each volts/amps pair on one rail.

A pair is found by name: ``out_v`` (volts) and ``out_a`` (amps) share the rail name ``out``, and their product
is shown as ``out_w`` in watts. Power is worked out here, per sample, from the same samples the trend uses.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from logger.events.rules import rules_for
from logger.rig import PowerPair, Rig


@dataclass(frozen=True)
class Shown:
    """The channels on screen: the rig's own first, then one power column per pair."""

    names: tuple[str, ...]
    units: tuple[str, ...]
    pairs: tuple[PowerPair, ...]
    thresholds: tuple[float | None, ...]
    """The line drawn across each shown channel's trend, signed like its values (None where there is none): a
    volts channel's brownout threshold, an amps channel's overcurrent limit."""
    over: tuple[bool, ...] = ()
    """Whether that line is an upper limit (overcurrent: beyond it is above) rather than a brownout."""

    @property
    def measured(self) -> int:
        """How many of the shown channels come straight from the rig."""
        return len(self.names) - len(self.pairs)

    def with_power(self, values: np.ndarray) -> np.ndarray:
        """Rows of rig values with the power columns appended (shape (n, len(names)))."""
        if not self.pairs:
            return values
        power = [p.sign * values[:, p.volts] * values[:, p.amps] for p in self.pairs]
        return np.column_stack([values, *power]).astype(np.float32, copy=False)


def shown_channels(rig: Rig) -> Shown:
    """The readouts and trend channels for a rig, with power for every volts/amps pair on one rail."""
    names = [ch.name for ch in rig.channels]
    units = [ch.unit or ("V" if ch.role != "amps" else "A") for ch in rig.channels]
    thresholds: list[float | None] = []
    over: list[bool] = []
    for ch in rig.channels:
        rules = rules_for(ch)
        line = rules.dip_below if rules.dip_below is not None else rules.current_above
        thresholds.append(None if line is None else (-line if ch.negative else line))
        over.append(rules.dip_below is None and rules.current_above is not None)
    pairs = rig.power_pairs()
    for pair in pairs:
        names.append(pair.name)
        units.append("W")
        thresholds.append(None)
        over.append(False)
    return Shown(tuple(names), tuple(units), tuple(pairs), tuple(thresholds), tuple(over))
