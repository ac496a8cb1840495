"""Figures printed to what they are worth: a channel's value to its resolution (one LSB of the converter
through the channel's scale), zero as zero, neighbours in a column to the same number of places.

A reading cannot say more than its converter's step; printing 11.336714 V from a channel that steps in
8.9 mV claims four digits it does not have, and a float32 mean can land a hair below its own minimum. Rounded
to the step, both print as what was measured.
"""

from __future__ import annotations

import math

from logger.rig import Channel


def decimals(resolution: float | None) -> int | None:
    """Places after the point that show a figure to ``resolution`` (None when it is not known)."""
    if resolution is None or not resolution > 0 or math.isinf(resolution):
        return None
    return max(0, min(9, math.ceil(-math.log10(resolution) - 1e-9)))


def to_resolution(value: float | None, resolution: float | None, *, signed: bool = False,
                  fallback: int = 4) -> str:
    """``value`` to the decimal place of ``resolution`` (so within half a step of it; ``fallback`` significant
    digits when it is unknown); ``-`` for no value; zero (or anything that rounds to it) as ``0``."""
    if value is None or math.isnan(value):
        return "-"
    places = decimals(resolution)
    if places is None:
        text = f"{value:+.{fallback}g}" if signed else f"{value:.{fallback}g}"
        return "0" if float(text) == 0 else text
    text = f"{value:+.{places}f}" if signed else f"{value:.{places}f}"
    return "0" if float(text) == 0 else text


def channel_resolution(channel: Channel, adc_bits: int, vref_mv: float) -> float:
    """One converter step in the channel's unit: Vref / 2^bits at the pin (common practice), through the
    divider or the shunt and amplifier."""
    return abs(vref_mv / 1000.0 / 2**adc_bits * channel.units_per_pin_volt())
