"""What a run says about its link and its clock: the counters and notes that go into ``_run.json`` and onto the
screen's link panel, computed from the decoder's and the time base's own counters."""

from __future__ import annotations

from typing import Any

from logger.ingest.state import LinkHealth
from logger.timebase import TimeBase
from logger.wire import DecoderCounters, DeviceHeader


def link_counts(decoder: DecoderCounters, timebase: TimeBase | None, reconnects: int, header: DeviceHeader | None,
                since: dict[str, int] | None = None, past_end: int = 0) -> dict[str, Any]:
    """The link's counters (less those in ``since``) and the device clock's drift, for ``_run.json``: rows + lost
    is the sequence span; every line is a frame, a header, an answer, or rejected. ``past_end`` frames came
    after the end of ``--duration`` and are not the run's."""
    t = timebase.counters if timebase is not None else None
    now = {"frames": decoder.frames - past_end, "lost": t.lost if t else 0, "inconsistent": t.inconsistent if t else 0,
           "rejected": decoder.rejected, "bad_crc": decoder.bad_crc, "resets": t.resets if t else 0,
           "reconnects": reconnects}
    since = since or {}
    counts: dict[str, Any] = {k: v - since.get(k, 0) for k, v in now.items()}
    drift = timebase.drift_ppm if timebase is not None else None
    counts["drift_ppm"] = None if drift is None else round(drift, 2)
    counts["rate_hz"] = header.rate_hz if header else None
    return counts


def clock_account(timebase: TimeBase | None, start_from: str) -> dict[str, Any]:
    """How the run's UTC labels were made (durations are on the device clock always)."""
    if timebase is None:
        return {}
    labels = timebase.labels
    if not labels.paced:
        made = "the device clock from the first arrival (the data did not arrive in real time)"
    elif labels.anchor == "arrival":
        made = "arrival times of reads on the host's steady clock, one wall offset per run"
    else:
        made = f"the device clock from {start_from} (the source gave no arrival times)"
    account: dict[str, Any] = {"labels": made, "period_us": round(timebase.period_us, 3),
                               "wall_clock_steps": len(labels.steps)}
    if labels.fault:
        account["note"] = labels.fault
    return account


def link_health(source: str, connected: bool, down_since: float | None, decoder: DecoderCounters,
                timebase: TimeBase | None, rate_hz: float, reconnects: int, past_end: int = 0) -> LinkHealth:
    """The link panel's figures (frames after the end of ``--duration`` left out)."""
    t = timebase.counters if timebase is not None else None
    return LinkHealth(
        source=source,
        connected=connected,
        down_since=down_since,
        frames=decoder.frames - past_end,
        rate_hz=rate_hz,
        lost=t.lost if t else 0,
        rejected=decoder.rejected,
        bad_crc=decoder.bad_crc,
        resets=t.resets if t else 0,
        reconnects=reconnects,
        drift_ppm=timebase.drift_ppm if timebase is not None else None,
        decoder=decoder.as_dict(),
    )
