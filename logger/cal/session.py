"""`railtap cal` at the terminal: take points from a live source (or a CSV), fit, report, save a profile.

The session talks to the user through two callables (``ask`` for a line of input, ``say`` for output), so a
test can drive it with scripted answers and the same code serves a real terminal.
"""

from __future__ import annotations

import csv
import math
import os
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any, Protocol

from logger.cal.assess import MODELS, Assessment, CalPoint, Candidate, assess, gain_only
from logger.cal.capture import DEFAULT_MAX_SD, DEFAULT_SAMPLES, Reading, Recent, take_point
from logger.cal.profile import Profile, save_profile
from logger.cal.report import assessment_text
from logger.cal.zero import zero_refusal
from logger.rig import Channel, Rig
from logger.wire import DeviceHeader

Ask = Callable[[str], str]
Say = Callable[[str], None]


class Tap(Protocol):
    """What a calibration session needs of a running pipeline (``logger.ingest.Pipeline``): its recent raw
    counts, the device header, and whether and why it stopped."""

    counts_ring: Recent | None
    header: DeviceHeader | None
    error: str | None
    message: str

    @property
    def source(self) -> Any: ...

    def wait(self, timeout: float | None = None) -> bool: ...


class CalError(ValueError):
    """A calibration cannot go on; the message is one line naming the thing and what to do."""


@dataclass(frozen=True)
class CalOptions:
    """What the user asked for on the command line."""

    samples: int = DEFAULT_SAMPLES
    max_sd: float = DEFAULT_MAX_SD
    model: str = "auto"
    out: Path | None = None
    reference_note: str = ""
    temperature_note: str = ""
    due_days: int = 365
    u_reference: float | None = None
    timeout_s: float = 60.0


def in_use_range(ch: Channel) -> tuple[float, float] | None:
    """The span of values a channel is used over, from its rig entry: zero to 110 % of nominal or its
    upper limit, below zero for a negative rail (None when the rig says neither)."""
    top = max([v for v in (ch.high, 1.1 * ch.nominal if ch.nominal else None) if v is not None], default=None)
    if top is None:
        return None
    return (-abs(top), 0.0) if ch.negative else (min(0.0, ch.low or 0.0), top)


def profile_path(rig: Rig, ch: Channel, out: Path | None) -> Path:
    """Where to save: as asked, else where the rig already points, else ``cal/<channel>.json`` beside it."""
    if out is not None:
        return out
    base = Path(rig.source).parent if rig.source and not rig.source.startswith("<") else Path()
    return base / (ch.profile_path or f"cal/{ch.name}.json")


def points_from_csv(path: Path, u_reference: float | None = None) -> list[CalPoint]:
    """(reference, counts) pairs from a CSV with a header row; ``counts_sd``, ``samples`` and ``u_reference``
    columns are optional."""
    try:
        with path.open(newline="", encoding="utf-8") as f:
            rows = list(csv.DictReader(f))
    except OSError as exc:
        raise CalError(f"{path}: cannot read ({exc.strerror or exc})") from None
    if not rows or not {"reference", "counts"} <= set(rows[0]):
        raise CalError(f"{path}: expected a header row with at least the columns reference,counts")
    points = []
    for n, row in enumerate(rows, start=2):
        try:
            u = row.get("u_reference") or None
            points.append(CalPoint(float(row["reference"]), float(row["counts"]), float(row.get("counts_sd") or 0),
                                   int(float(row.get("samples") or 1)), float(u) if u else u_reference))
        except (TypeError, ValueError):
            raise CalError(f"{path}: line {n}: reference and counts must be numbers, got {row}") from None
    return points


def wait_for_device(pipeline: Tap, timeout_s: float = 15.0) -> None:
    """Block until samples flow; raise :class:`CalError` with the pipeline's own words if they do not."""
    deadline = time.monotonic() + timeout_s
    while pipeline.counts_ring is None or pipeline.counts_ring.written == 0:
        if pipeline.wait(0.1) or time.monotonic() > deadline:
            raise CalError(pipeline.error or f"no samples from {pipeline.source.name}: {pipeline.message}")


def capture(pipeline: Tap, k: int, opts: CalOptions, say: Say) -> Reading:
    """One point's raw counts, taken once settled; the progress line is rewritten in place."""
    def progress(r: Reading) -> None:
        shown = f"mean {r.mean:.2f}, sd {r.sd:.2f} counts; " if math.isfinite(r.mean) else ""
        say(f"\r  {shown}{r.why or 'settled'}".ljust(100)[:100] + "\r")

    full_scale = (1 << pipeline.header.adc_bits) - 1 if pipeline.header else None
    reading = take_point(pipeline.counts_ring, k, opts.samples, opts.max_sd, full_scale=full_scale,
                         timeout_s=opts.timeout_s, cancelled=lambda: pipeline.wait(0), progress=progress)
    say("\r" + " " * 100 + "\r")
    return reading


def collect_points(pipeline: Tap, ch: Channel, k: int, opts: CalOptions, ask: Ask, say: Say,
                   most: int | None = None) -> list[CalPoint]:
    """Ask for reference values and take a settled point for each, until the user is done (or ``most``)."""
    points: list[CalPoint] = []
    say(f"Set the rig so {ch.name} reads a steady value, read it on your reference meter, and type it in "
        f"{ch.unit}. Enter on its own when done, u to undo the last point, q to give up.\n")
    while most is None or len(points) < most:
        say(_now_reading(pipeline, k))
        answer = ask(f"point {len(points) + 1}, reference in {ch.unit}: ").strip().lower()
        if answer in ("", "done"):
            break
        if answer == "q":
            raise CalError("calibration given up; nothing saved")
        if answer == "u":
            say(f"  removed point {len(points)}\n" if points else "  no point to remove\n")
            points = points[:-1]
            continue
        try:
            reference = float(answer)
        except ValueError:
            say(f"  {answer!r} is not a number; type the reference value in {ch.unit}\n")
            continue
        if any(p.reference == reference for p in points):
            say(f"  note: {reference:g} {ch.unit} was taken already; a second point there only weighs it twice\n")
        reading = capture(pipeline, k, opts, say)
        if not reading.settled:
            say(f"  not taken: {reading.why}. Let the rig settle, then type the value again.\n")
            continue
        points.append(CalPoint(reference, reading.mean, reading.sd, reading.samples, opts.u_reference))
        say(f"  point {len(points)}: {reference:g} {ch.unit} at {reading.mean:.2f} counts "
            f"(sd {reading.sd:.2f}, {reading.samples} samples)\n")
    return points


def _now_reading(pipeline: Tap, k: int) -> str:
    """The channel's raw reading over the last second, so the user sees it before typing a value."""
    ring = pipeline.counts_ring
    rate = pipeline.header.rate_hz if pipeline.header else 1000.0
    if ring is None or ring.written < 8:
        return ""
    counts = ring.latest(min(ring.capacity, max(8, round(rate))))[1][:, k]
    return f"  now reading {counts.mean():.2f} counts (sd {counts.std():.2f})\n"


def choose(a: Assessment, model: str) -> Candidate:
    if model == "auto":
        return a.candidates[a.recommended]
    if model not in a.candidates:
        raise CalError(f"--model {model}: not possible with {len(a.points)} points (possible: "
                       f"{', '.join(a.candidates)})")
    return a.candidates[model]


def make_profile(ch: Channel, chosen: Candidate, points: list[CalPoint], span: tuple[float, float],
                 opts: CalOptions, adc_bits: int | None, vref_mv: int | None, notes: tuple[str, ...] = ()) -> Profile:
    now = datetime.now(UTC)
    return Profile(
        channel=ch.name, unit=ch.unit, model=chosen.model, curve=chosen.curve, points=tuple(points),
        span_counts=(min(span), max(span)), created=now.isoformat(timespec="seconds"),
        due=(now + timedelta(days=opts.due_days)).date().isoformat() if opts.due_days > 0 else None,
        reference_note=opts.reference_note, temperature_note=opts.temperature_note,
        adc_bits=adc_bits, vref_mv=vref_mv, notes=notes,
    )


def fit_and_save(rig: Rig, ch: Channel, points: list[CalPoint], opts: CalOptions, say: Say,
                 adc_bits: int | None = None, vref_mv: int | None = None) -> Path:
    """Assess the points, report, save the chosen model's profile, and say how the rig file names it."""
    if opts.model not in ("auto", *MODELS):
        raise CalError(f"--model {opts.model}: expected auto, {', '.join(MODELS)}")
    try:
        a = assess(points, in_use_range(ch), ch.unit)
    except ValueError as exc:
        raise CalError(str(exc)) from None
    say(assessment_text(a, ch.unit) + "\n")
    chosen = choose(a, opts.model)
    counts = [p.counts for p in a.points]
    profile = make_profile(ch, chosen, list(a.points), (min(counts), max(counts)), opts, adc_bits, vref_mv)
    return _save(rig, ch, profile, opts, say)


def one_point(rig: Rig, ch: Channel, point: CalPoint, opts: CalOptions, say: Say,
              adc_bits: int | None = None, vref_mv: int | None = None) -> Path:
    """The quick fix: gain only, through one point, keeping the rig's zero; labelled as such everywhere."""
    try:
        chosen = gain_only(point, ch.offset_counts, ch.unit)
    except ValueError as exc:
        raise CalError(str(exc)) from None
    note = (f"gain-only from one point ({point.reference:g} {ch.unit} at {point.counts:.2f} counts), zero kept at "
            f"{ch.offset_counts:g} counts: right at that point, not checked anywhere else")
    say(f"warning: {note}\n")
    profile = make_profile(ch, chosen, [point], (ch.offset_counts, point.counts), opts, adc_bits, vref_mv, (note,))
    return _save(rig, ch, profile, opts, say)


def _save(rig: Rig, ch: Channel, profile: Profile, opts: CalOptions, say: Say) -> Path:
    path = profile_path(rig, ch, opts.out)
    try:
        save_profile(profile, path)
    except OSError as exc:
        raise CalError(f"{path}: cannot write the profile ({exc.strerror or exc})") from None
    say(f"saved {profile.model} profile for {ch.name} to {path} (due again {profile.due or 'never'})\n")
    if ch.profile_path is None or profile_path(rig, ch, None) != path:
        on_disk = bool(rig.source) and Path(rig.source).is_file()
        named = Path(os.path.relpath(path, Path(rig.source).parent)).as_posix() if on_disk else str(path)
        where = rig.source if on_disk else "your rig file (a simulated rig's: `railtap sim --write-rig FILE`)"
        say(f"to use it, add to channel {ch.name!r} of {where}:  profile = \"{named}\"\n")
    return path


def zero(pipeline: Tap, rig: Rig, ch: Channel, k: int, opts: CalOptions, ask: Ask, say: Say) -> None:
    """Zero a current channel with no current flowing: shift its profile, or give the rig's offset_counts."""
    ask(f"Make sure no current flows through the shunt of {ch.name}, then press Enter: ")
    reading = capture(pipeline, k, opts, say)
    if not reading.settled:
        raise CalError(f"{ch.name}: not zeroed: {reading.why}")
    header = pipeline.header
    refusal = zero_refusal(ch, reading.mean, header.adc_bits) if header is not None else None
    if refusal is not None:
        raise CalError(refusal)
    if ch.profile is None:
        say(f"{ch.name} reads {reading.mean:.2f} counts with no current (sd {reading.sd:.2f}); put this line in "
            f"channel {ch.name!r} of {rig.source or 'the rig file'}:\n  offset_counts = {reading.mean:.2f}\n")
        return
    when = datetime.now(UTC).isoformat(timespec="seconds")
    _save(rig, ch, ch.profile.tared(reading.mean, when), opts, say)


def terminal_say(text: str) -> None:
    sys.stderr.write(text)
    sys.stderr.flush()
