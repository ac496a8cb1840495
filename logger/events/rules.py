"""What counts as an event on each channel: thresholds relative to the channel's nominal value.

Defaults follow the way IEC 61000-4-30:2015 (clause 5.4, dips and swells; clause 5.5, interruptions) defines
events on a declared voltage, adapted to DC; the figures are from memory: a dip (brownout) below 90 % of the
declared value, ending at 90 % plus a 2 % hysteresis; an interruption (dropout) when the residual falls below
10 %; a swell (overvoltage) above 110 %, ending at 108 %. The DC immunity test levels of IEC 61000-4-29
(dips to 70 % and 40 %, interruptions to 0 %, lasting from 1 ms to 1 s; also from memory) all fall inside
these definitions. Overcurrent has no such standard: the channel's ``high`` limit held for longer than a set
time, 0.1 s by default, as a fuse or a supply's current limit would see it.

Every figure can be changed per channel in the rig file's ``[channel.events]`` table.
"""

from __future__ import annotations

from dataclasses import dataclass

from logger.rig import Channel

DEFAULTS: dict[str, float] = {
    "brownout_pct": 90.0,
    "dropout_pct": 10.0,
    "overvoltage_pct": 110.0,
    "hysteresis_pct": 2.0,
    "min_event_s": 0.0,
    "mean_window_s": 0.001,
    "overcurrent_s": 0.1,
    "flicker_window_s": 5.0,
}
FLICKER_MIN_COUNT = 3


@dataclass(frozen=True)
class ChannelRules:
    """Absolute thresholds for one channel, on the magnitude of its value (a negative rail is watched as
    its size, so "below" always means "towards zero")."""

    name: str
    nominal: float | None
    dip_below: float | None
    dip_release: float | None
    dropout_below: float | None
    over_above: float | None
    over_release: float | None
    current_above: float | None
    current_release: float | None
    current_min_s: float
    min_event_s: float
    mean_window_s: float
    flicker_window_s: float

    def depth_pct(self, residual: float) -> float | None:
        """How far below nominal a residual is, in % of nominal (IEC 61000-4-30 "depth")."""
        return None if not self.nominal else 100.0 * (self.nominal - residual) / self.nominal

    def level_pct(self, value: float) -> float | None:
        return None if not self.nominal else 100.0 * value / self.nominal


def rules_for(channel: Channel) -> ChannelRules:
    """Thresholds for a channel from its role, nominal value, limits and ``[channel.events]`` settings."""
    s = {**DEFAULTS, **channel.events}
    nominal = abs(channel.nominal) if channel.nominal else None
    hyst = s["hysteresis_pct"] / 100.0 * nominal if nominal else 0.0
    dip = over = current = None
    if channel.role in ("volts", "aux") and nominal:
        dip = abs(channel.low) if channel.low is not None else s["brownout_pct"] / 100.0 * nominal
        over = abs(channel.high) if channel.high is not None else s["overvoltage_pct"] / 100.0 * nominal
    if channel.role == "amps" and channel.high is not None:
        current = abs(channel.high)
    current_hyst = s["hysteresis_pct"] / 100.0 * (current or 0.0)
    return ChannelRules(
        name=channel.name,
        nominal=nominal,
        dip_below=dip,
        dip_release=None if dip is None else dip + hyst,
        dropout_below=None if dip is None else s["dropout_pct"] / 100.0 * nominal,
        over_above=over,
        over_release=None if over is None else over - hyst,
        current_above=current,
        current_release=None if current is None else current - current_hyst,
        current_min_s=s["overcurrent_s"],
        min_event_s=s["min_event_s"],
        mean_window_s=s["mean_window_s"],
        flicker_window_s=s["flicker_window_s"],
    )
