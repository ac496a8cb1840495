"""The headless view of a running pipeline: each event as it ends and a status line every few seconds on
stderr, and the final report; like the screen, it reads only the pipeline's published snapshots."""

from __future__ import annotations

import sys
import time
from datetime import UTC, datetime

from logger.events import Event
from logger.ingest import Pipeline, Snapshot


def print_status(pipeline: Pipeline, quiet: bool) -> None:
    """The headless log: each event as it ends and a status line every few seconds, until the run ends."""
    every = 2.0 if sys.stderr.isatty() else 10.0
    shown = 0
    while not pipeline.wait(every):
        if not quiet:
            snap = pipeline.snapshot()
            # The snapshot holds the last 500 events: a burst between two status lines (a flickering meter)
            # all reaches the log.
            fresh = [e for e in snap.events if (e.id or 0) > shown][::-1]
            shown = max([shown, *(e.id or 0 for e in fresh)])
            for event in fresh:
                print(event_line(event), file=sys.stderr)
            print(status_line(snap), file=sys.stderr, flush=True)


def report(pipeline: Pipeline) -> int:
    snap = pipeline.snapshot()
    for final in pipeline.sealed:
        print(f"{final['folder']}: {final.get('rows', 0)} rows, "
              f"{len(final.get('parts', []))} part(s); {final.get('stop_reason', pipeline.stop_reason)}")
    link = snap.link
    drift = f"{link.drift_ppm:+.1f} ppm" if link.drift_ppm is not None else "not measured (needs 30 s of arrivals)"
    print(f"frames {link.frames}, lost {link.lost}, rejected lines {link.rejected} (bad CRC {link.bad_crc}), "
          f"device resets {link.resets}, reconnects {link.reconnects}, device clock drift {drift}")
    for note in pipeline.notes.values():
        print(f"railtap: note: {note}", file=sys.stderr)
    if pipeline.error:
        if pipeline.crash and not pipeline.sealed:  # no run folder to keep the traceback in
            print(pipeline.crash, file=sys.stderr, end="")
        print(f"railtap: {pipeline.error}", file=sys.stderr)
        return 1
    return 0


def event_line(event: Event) -> str:
    """One event as a line of the headless log: when, what, where, how long, details."""
    when = datetime.fromtimestamp(event.start_us / 1e6, tz=UTC).astimezone().strftime("%H:%M:%S.%f")[:-3]
    lasted = f" {event.duration_s:.3f} s" if event.duration_s is not None else ""
    return f"  {when} {event.kind.upper()} {event.channel or 'link'}{lasted}: {event.detail}"


def status_line(snap: Snapshot) -> str:
    """One line for a terminal or a log: time, values, link and recording state."""
    parts = [time.strftime("%H:%M:%S")]
    if snap.latest is not None:
        limits = snap.at_limit or (False,) * len(snap.channels)
        outside = snap.outside_cal or (False,) * len(snap.channels)
        parts.append("  ".join(
            f"{n} {v:8.3f} {u}{' (at ADC limit)' if at else ' (outside cal span)' if out else ''}"
            for n, v, u, at, out in zip(snap.channels, snap.latest, snap.units, limits, outside, strict=True)
        ))
    link = snap.link
    parts.append(f"{link.rate_hz:6.0f} frames/s, lost {link.lost}, rejected {link.rejected}")
    if snap.recording is not None:
        parts.append(f"{snap.recording.rows} rows, {snap.recording.bytes_on_disk / 1e6:.1f} MB")
    if snap.active:
        parts.append("NOW: " + ", ".join(f"{e.kind} on {e.channel}" for e in snap.active))
    parts.extend(snap.outlets)
    if snap.state != "running":
        parts.append(snap.message)
    return " | ".join(parts)
