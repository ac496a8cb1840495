"""Why no samples come, said plainly: bytes that never make a valid line (most often a wrong baud rate), no bytes
at all (a device without power, stuck or resetting), or frames without the header that says how to read them."""

from __future__ import annotations

import time

QUIET_S = 2.0
"""After this long without a valid frame the screen is told why: garbage only, or nothing at all."""
ASK_EVERY_S = 2.0
"""How often the device is asked for its header while none has come."""


class FlowWatch:
    """Watches the pace of bytes and frames on the ingest thread's own clock (``time.monotonic``)."""

    def __init__(self, source_name: str) -> None:
        self.source_name = source_name
        self.started_at = self.bytes_at = self.frames_at = self.asked_at = time.monotonic()
        self.frames_seen = 0
        self.rejects_seen = 0

    def restart(self) -> None:
        """The source was (re)opened: quiet is measured from now."""
        self.bytes_at = self.frames_at = time.monotonic()

    def bytes_came(self) -> None:
        self.bytes_at = time.monotonic()

    def frames_so_far(self, frames: int) -> None:
        if frames != self.frames_seen:
            self.frames_seen, self.frames_at = frames, time.monotonic()

    def ask_header_now(self) -> bool:
        """Whether it is time to ask the device for its header again."""
        now = time.monotonic()
        if now - self.asked_at >= ASK_EVERY_S:
            self.asked_at = now
            return True
        return False

    def waited_s(self) -> float:
        return time.monotonic() - self.started_at

    def verdict(self, state: str, rejected: int, have_header: bool) -> tuple[str, str] | None:
        """A new (state, message) when the flow of data changed its story, else None. Back to running (or
        waiting for a header) when frames flow again."""
        if state not in ("waiting", "running", "garbled", "silent"):
            return None
        now = time.monotonic()
        quiet = now - self.frames_at
        if quiet < QUIET_S:
            self.rejects_seen = rejected
            if state in ("garbled", "silent"):
                return ("running" if have_header else "waiting"), f"receiving from {self.source_name} again"
            return None
        if now - self.bytes_at < QUIET_S and rejected > self.rejects_seen:
            return "garbled", (
                f"bytes arrive but no valid line for {quiet:.0f} s ({rejected:,} rejected): most likely the "
                f"baud rate is wrong; {self.source_name} must match the firmware (--baud, or device.baud in "
                "the rig file)"
            )
        if now - self.bytes_at >= QUIET_S and (have_header or self.frames_seen == 0):
            return "silent", (
                f"nothing from {self.source_name} for {now - self.bytes_at:.0f} s: is this the tap's port, is the "
                "device powered and its firmware running? (the run goes on when data comes back)"
            )
        return None
