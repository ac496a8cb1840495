"""Is a reading plausible as a current channel's zero? A tare is taken with no current flowing, so its raw
reading sits near zero counts; one far up the ADC's range means current is flowing, and taking it as zero would
offset every reading after it. The screen's ``z`` and ``railtap cal --zero`` both ask here."""

from __future__ import annotations

from logger.rig import Channel


def zero_refusal(ch: Channel, counts: float, bits: int) -> str | None:
    """Why ``counts`` (a mean raw reading) cannot be this channel's zero, or None when it can."""
    share = abs(counts) / 2**bits * 100.0
    if share <= ch.zero_limit_pct:
        return None
    return (f"{ch.name} reads {counts:.0f} counts, {share:.0f} % of the ADC's range: not taken as zero (a zero is "
            f"taken with no current flowing; up to {ch.zero_limit_pct:g} % of the range, `zero_limit_pct` in the "
            "rig's channel)")
