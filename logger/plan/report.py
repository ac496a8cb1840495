"""The shape every plan prints: a title, aligned figures, warnings, notes, the safety line, then rig-file lines.

Each planner fills a :class:`Report`; this module only lays it out, so the three commands read alike and a
test can look at the figures, the warnings and the rig-file lines apart.
"""

from __future__ import annotations

from dataclasses import dataclass, field

SELV_V = 60.0
"""Above this DC voltage a circuit is no longer safety extra-low voltage."""

SELV_LINE = ("caution: above 60 V DC (the SELV limit) this wiring can hurt or kill; local electrical codes and "
             "licensed practice come first.")

_LABEL_WIDTH = 24
_COMMENT_COLUMN = 33
"""Where a comment starts on a rig-file line, as in ``logger/templates/rig.toml``."""


@dataclass
class Report:
    """One plan, ready to print.

    Attributes:
        title: one line saying what was planned, from what.
        rows: (label, value) pairs, printed as an aligned table.
        warnings: things that will break or burn as planned; each printed as ``warning: ...``.
        notes: things worth knowing that are not faults.
        cautions: what this circuit in particular asks of the person wiring it.
        rig: rig-file lines (TOML) matching the plan, comments included.
    """

    title: str
    rows: list[tuple[str, str]] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    cautions: list[str] = field(default_factory=list)
    """What this circuit in particular asks of the person wiring it; printed before the SELV reminder."""
    rig: list[str] = field(default_factory=list)

    def row(self, label: str, value: str) -> None:
        """Add one figure."""
        self.rows.append((label, value))

    def rig_line(self, key: str, value: str, comment: str = "") -> None:
        """Add ``key = value`` to the rig-file lines, with an optional comment aligned as in the template."""
        line = f"{key} = {value}"
        if comment:
            line = f"{line:<{_COMMENT_COLUMN - 1}} # {comment}"
        self.rig.append(line)

    def rig_comment(self, text: str) -> None:
        """Add a comment line to the rig-file lines."""
        self.rig.append(f"# {text}")

    def render(self) -> str:
        """The whole report as printed: figures, warnings, notes, the SELV reminder, rig-file lines."""
        out = [self.title, ""]
        width = max([_LABEL_WIDTH, *(len(label) + 2 for label, _ in self.rows)])
        out += [f"  {label:<{width}}{value}" for label, value in self.rows]
        if self.warnings or self.notes:
            out.append("")
        out += [f"warning: {text}" for text in self.warnings]
        out += [f"note: {text}" for text in self.notes]
        out += ["", *(f"caution: {text}" for text in self.cautions), SELV_LINE]
        if self.rig:
            out += ["", "Rig file lines (add them to your rig file; `railtap rig check FILE` reads it back):", ""]
            out += self.rig
        return "\n".join(out) + "\n"

    def rig_text(self) -> str:
        """Only the rig-file lines, as TOML text."""
        return "\n".join(self.rig) + "\n"


def channel_header(report: Report, name: str, role: str, input_index: int) -> None:
    """Start a ``[[channel]]`` table in the report's rig-file lines."""
    report.rig.append("[[channel]]")
    report.rig_line("name", f'"{name}"', "your name for it; becomes the column name in the log")
    report.rig_line("role", f'"{role}"')
    report.rig_line("input", str(input_index), "position of this channel in the device's data lines (0-based)")


def device_comment(report: Report, bits: int, vref_v: float) -> None:
    """Say which ADC the scaling was planned for (the device's header line normally supplies both)."""
    report.rig_comment(f"planned for a {bits}-bit ADC at vref_mv = {round(vref_v * 1000)} "
                       "(the device's header line normally gives adc_bits and vref_mv)")
