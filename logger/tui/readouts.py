"""Big readouts: one card per channel with its calibrated value, unit, sign, and min/max since reset; power
cards also carry the rail's charge (Ah) and energy (Wh) since the start or the last reset."""

from __future__ import annotations

import numpy as np
from textual.app import ComposeResult
from textual.containers import Horizontal
from textual.widget import Widget
from textual.widgets import Digits, Static

from logger.ingest.state import Snapshot
from logger.tui.fmt import value_text
from logger.tui.history import TrendHistory

DIGITS_MIN_WIDTH = 18
"""Below this many columns inside a card, big digits give way to one bold line."""


class Readout(Widget):
    """One channel: large value and unit, and the lowest and highest values since the last reset."""

    DEFAULT_CSS = """
    Readout {
        width: 1fr;
        height: 6;
        border: round $primary 60%;
        border-title-color: $text;
        border-subtitle-color: $text-muted;
        padding: 0 0;
    }
    Readout Horizontal { height: 3; align-horizontal: center; }
    Readout Digits { width: auto; color: $text; }
    Readout .unit { width: 2; height: 3; content-align: left bottom; padding-left: 1; color: $text-muted; }
    Readout .plain { display: none; height: 1; text-style: bold; text-align: center; }
    Readout .range { height: 1; color: $text-muted; text-align: center; }
    Readout.-paused { border: round $warning; }
    Readout.-at-limit { border: round $error; }
    Readout.-outside { border: round $warning; }
    Readout.-stale { border: dashed $warning; }
    Readout.-stale Digits { color: $text-disabled; }
    Readout.-stale .plain { color: $text-disabled; }
    Readout.-compact { height: 4; }
    Readout.-compact Horizontal { display: none; }
    Readout.-compact .plain { display: block; }
    """

    def __init__(self, name: str, unit: str) -> None:
        super().__init__()
        self.channel_name = name
        self.unit = unit
        self.border_title = name
        self.border_subtitle = "min .. max"
        self._shown: tuple[str, float | None, float | None] | None = None
        self._totals_inline = False

    def compose(self) -> ComposeResult:
        with Horizontal():
            yield Digits(value_text(None))
            yield Static(self.unit, classes="unit")
        yield Static("", classes="plain")
        yield Static("-.-- .. -.--", classes="range")

    def on_resize(self) -> None:
        if isinstance(self.parent, Readouts):
            self.parent.fit_digits()

    def show(self, value: float | None, low: float | None, high: float | None) -> None:
        """Show a value and its range since reset (None where not known yet)."""
        text = value_text(value)
        shown = (text, low, high)
        if shown == self._shown:
            return
        self._shown = shown
        self.query_one(Digits).update(text)
        self.query_one(".plain", Static).update(f"{text} {self.unit}", layout=False)
        if not self._totals_inline:
            self.query_one(".range", Static).update(f"{value_text(low, False)} .. {value_text(high, False)}",
                                                    layout=False)


    def mark(self, *, at_limit: bool = False, stale: bool = False, outside: bool = False) -> None:
        """Flag a reading at the end of the ADC's range (the true value may lie beyond what is shown), one
        outside its calibrated span (extrapolated), or one that is stale because no samples are coming (the
        last value stays, greyed)."""
        flags = {"-at-limit": at_limit, "-stale": stale, "-outside": outside}
        if all(self.has_class(name) == on for name, on in flags.items()):
            return
        for name, on in flags.items():
            self.set_class(on, name)
        note = "no data" if stale else "at ADC limit" if at_limit else "outside cal span" if outside else ""
        self.border_title = f"{self.channel_name} ({note})" if note else self.channel_name

    def show_totals(self, charge_ah: float, energy_wh: float) -> None:
        """For a power card: charge and energy since the start or the last reset, on the card's lower edge;
        on a narrow card they take the place of the min/max line instead."""
        # The layout is chosen by the card's width alone, and the figures keep their decimals, so the card does
        # not jump between layouts as the numbers grow.
        text = f"{charge_ah:.4f} Ah  {energy_wh:.3f} Wh"
        if self.size.width >= 30:
            if self._totals_inline:
                self._totals_inline, self._shown = False, None  # the min/max line is back on the next show
            self.border_subtitle = text
            return
        self._totals_inline = True
        self.border_subtitle = "charge, energy"
        self.query_one(".range", Static).update(f"{charge_ah:.3f}Ah {energy_wh:.2f}Wh", layout=False)


class Readouts(Horizontal):
    """A row of readouts: the rig's channels, then power for each volts/amps pair."""

    DEFAULT_CSS = """
    Readouts { height: auto; }
    """

    def __init__(self, history: TrendHistory) -> None:
        super().__init__()
        self.history = history

    def compose(self) -> ComposeResult:
        for name, unit in zip(self.history.shown.names, self.history.shown.units, strict=True):
            yield Readout(name, unit)

    def fit_digits(self) -> None:
        """Big digits on every card, or on none: a row of mixed sizes is hard to read across."""
        cards = list(self.query(Readout))
        narrow = min(card.content_size.width for card in cards) < DIGITS_MIN_WIDTH
        for card in cards:
            card.set_class(narrow, "-compact")

    def show(self, snap: Snapshot) -> None:
        """Update every card from a snapshot (and the power min/max the history keeps)."""
        shown = self.history.shown
        cards = list(self.query(Readout))
        latest = snap.latest
        stale = latest is not None and snap.state != "running"
        for k in range(shown.measured):
            cards[k].show(_at(latest, k), _at(snap.minimum, k), _at(snap.maximum, k))
            cards[k].mark(at_limit=k < len(snap.at_limit) and snap.at_limit[k], stale=stale,
                          outside=k < len(snap.outside_cal) and snap.outside_cal[k])
        for k, pair in enumerate(shown.pairs):
            power = None if latest is None else float(pair.sign * latest[pair.volts] * latest[pair.amps])
            card = cards[shown.measured + k]
            card.mark(stale=stale)
            card.show(power, _at(self.history.power_min, k), _at(self.history.power_max, k))
            if k < len(snap.charge_ah):
                card.show_totals(snap.charge_ah[k], snap.energy_wh[k])


def _at(values: np.ndarray | None, k: int) -> float | None:
    return None if values is None else float(values[k])
