"""The link and recording panel: how well bytes become samples, and where they are being kept."""

from __future__ import annotations

from rich.text import Text
from textual.widgets import Static

from logger.ingest.state import Snapshot
from logger.tui.fmt import elapsed_text, size_text

STATE_STYLES = {"running": "bold green", "waiting": "bold yellow", "reconnecting": "bold red",
                "garbled": "bold red", "silent": "bold red",
                "stopped": "bold", "failed": "bold red"}


class StatusPanel(Static):
    """Source, frame rate, lost and rejected frames, resets, reconnects, clock drift, state and message; then
    the run folder, rows, size on disk and elapsed time; then a line per outlet (a broker, commands run on
    events) with what it dropped."""

    DEFAULT_CSS = """
    StatusPanel {
        width: 34;
        height: 1fr;
        border: round $primary 60%;
        border-title-color: $text;
        padding: 0 1;
    }
    """

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__("", id=id)
        self.border_title = "link & recording"
        self._plain = ""

    def show(self, snap: Snapshot) -> None:
        """Rewrite the panel from a snapshot."""
        text = status_text(snap, self.content_size.width)
        if text.plain != self._plain:
            self._plain = text.plain
            self.update(text, layout=False)


def status_text(snap: Snapshot, width: int = 0) -> Text:
    """The panel's lines, most important first so a short panel still shows them; the run folder's name
    is cut to ``width`` (when given) so it keeps to one line."""
    link = snap.link
    text = Text(no_wrap=False)
    text.append(f"{snap.state}", STATE_STYLES.get(snap.state, ""))
    text.append(f"  {link.source}\n", "dim")
    text.append(f"{link.rate_hz:,.0f} frames/s  lost {link.lost:,}\n")
    text.append(f"rejected {link.rejected:,}  resets {link.resets:,}\n")
    drift = f"{link.drift_ppm:+.1f} ppm" if link.drift_ppm is not None else "-"
    text.append(f"reconnects {link.reconnects}  drift {drift}\n")
    rec = snap.recording
    if rec is not None:
        text.append(f"{rec.rows:,} rows  {size_text(rec.bytes_on_disk)}  {elapsed_text(rec.elapsed_s)}\n")
        text.append(f"{_folder_name(rec.folder, width)}\n", "bold")
        if rec.error:
            text.append(f"recorder: {rec.error}\n", "bold red")
    elif snap.recording_on:
        text.append("recording from the device header on\n", "dim")
    else:
        text.append("NOT RECORDING", "bold yellow")
        text.append(" (w starts)\n", "dim")
        if snap.last_run:
            text.append(f"last: {_folder_name(snap.last_run, width - 6)}\n", "dim")
    for line in snap.outlets:
        text.append(f"{line}\n", "bold yellow" if _needs_a_look(line) else "dim")
    text.append(snap.message, "italic")
    return text


def _needs_a_look(outlet_line: str) -> bool:
    """An outlet's line that counts something lost or failed (a broker's ``0 dropped`` is all well)."""
    if outlet_line.endswith(" 0 dropped"):
        return False
    return any(word in outlet_line for word in ("dropped", "failed", "timed out", "cut short"))


def _folder_name(folder: str | None, width: int) -> str:
    """The run folder's own name, cut to ``width`` (when given) so it keeps to one line."""
    name = (folder or "-").rstrip("/").rsplit("/", 1)[-1]
    return name[: width - 1] + "\u2026" if 0 < width < len(name) else name
