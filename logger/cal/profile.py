"""Calibration profiles on disk: one JSON file per channel, named by the rig file.

A profile keeps everything needed to trust, redo or audit a calibration: the points as taken, the model and
its coefficients with their covariance, the raw-count span the points cover, when it was made and when it is
due again, and free-text notes on the reference instrument and the temperature. JSON rather than TOML: the
file is written by railtap and read back exactly (floats round-trip), while the rig file stays the one
hand-written file.
"""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import dataclass, field, replace
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

import numpy as np

from logger.cal.assess import CalPoint, Curve
from logger.cal.fit import Piecewise, Polynomial

FORMAT = "railtap calibration profile 1"


class ProfileError(ValueError):
    """A profile file is missing, unreadable or wrong; the message names the file and the key."""


@dataclass(frozen=True)
class Profile:
    """One channel's calibration: raw counts to the channel's unit."""

    channel: str
    unit: str
    model: str
    """line, quadratic, piecewise or gain-only."""
    curve: Curve
    points: tuple[CalPoint, ...]
    span_counts: tuple[float, float]
    """Raw counts the points cover; readings outside are extrapolated, and flagged."""
    created: str
    """UTC, ISO 8601."""
    due: str | None = None
    """ISO date after which the profile should be redone."""
    reference_note: str = ""
    temperature_note: str = ""
    adc_bits: int | None = None
    vref_mv: int | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)
    """What was done to it after fitting (a one-point gain fix, a tare), in words, oldest first."""

    def value(self, counts: np.ndarray | float) -> np.ndarray:
        return self.curve.value(counts)

    def uncertainty(self, counts: np.ndarray | float) -> np.ndarray:
        return self.curve.uncertainty(counts)

    def outside(self, counts: np.ndarray) -> np.ndarray:
        """Which raw readings lie outside the calibrated span."""
        lo, hi = self.span_counts
        return (counts < lo) | (counts > hi)

    def overdue(self, today: date | None = None) -> bool:
        return self.due is not None and (today or datetime.now(UTC).date()) > date.fromisoformat(self.due)

    def tared(self, counts: float, when: str) -> Profile:
        """The same profile made to read zero at ``counts`` (taken with no current flowing)."""
        dy = -float(self.curve.value(counts))
        note = f"zeroed {when}: {counts:.2f} counts taken as 0 {self.unit} (shift {dy:+.4g} {self.unit})"
        return replace(self, curve=self.curve.shifted(dy), notes=(*self.notes, note))

    def to_dict(self) -> dict[str, Any]:
        return {
            "format": FORMAT,
            "channel": self.channel,
            "unit": self.unit,
            "model": self.model,
            "curve": _curve_dict(self.curve),
            "span_counts": list(self.span_counts),
            "points": [_point_dict(p) for p in self.points],
            "created": self.created,
            "due": self.due,
            "reference_note": self.reference_note,
            "temperature_note": self.temperature_note,
            "adc_bits": self.adc_bits,
            "vref_mv": self.vref_mv,
            "notes": list(self.notes),
        }


def save_profile(profile: Profile, path: Path) -> None:
    """Write atomically (a crash leaves the old file or the new one, never half of either)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            json.dump(profile.to_dict(), f, indent=2)
            f.write("\n")
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def load_profile(path: Path) -> Profile:
    """Read and check a profile file."""
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ProfileError(f"{path}: no such calibration profile; make one with `railtap cal`") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ProfileError(f"{path}: cannot read calibration profile ({exc})") from None
    except json.JSONDecodeError as exc:
        raise ProfileError(f"{path}: not a calibration profile (bad JSON: {exc})") from None
    return profile_from_dict(doc, str(path))


def profile_from_dict(doc: Any, source: str = "<profile>") -> Profile:
    """Check an already-parsed profile (a file, or the copy kept in a run's metadata)."""
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise ProfileError(f"{source}: not a calibration profile (format should be {FORMAT!r})")
    try:
        return Profile(
            channel=str(doc["channel"]),
            unit=str(doc.get("unit", "")),
            model=str(doc["model"]),
            curve=_curve(doc["curve"]),
            points=tuple(CalPoint(**p) for p in doc.get("points", [])),
            span_counts=(float(doc["span_counts"][0]), float(doc["span_counts"][1])),
            created=str(doc.get("created", "")),
            due=doc.get("due"),
            reference_note=str(doc.get("reference_note", "")),
            temperature_note=str(doc.get("temperature_note", "")),
            adc_bits=doc.get("adc_bits"),
            vref_mv=doc.get("vref_mv"),
            notes=tuple(doc.get("notes", ())),
        )
    except KeyError as exc:
        raise ProfileError(f"{source}: missing key {exc.args[0]!r}") from None
    except (TypeError, ValueError, IndexError) as exc:
        raise ProfileError(f"{source}: malformed calibration profile ({exc})") from None


def _curve_dict(curve: Curve) -> dict[str, Any]:
    if isinstance(curve, Polynomial):
        return {"kind": "polynomial", "coefficients": list(curve.coefficients),
                "covariance": [list(r) for r in curve.covariance], "x0": curve.x0, "xs": curve.xs}
    return {"kind": "piecewise", "x": list(curve.x), "y": list(curve.y), "u": list(curve.u_points)}


def _curve(doc: dict[str, Any]) -> Curve:
    if doc["kind"] == "polynomial":
        return Polynomial(tuple(map(float, doc["coefficients"])),
                          tuple(tuple(map(float, r)) for r in doc["covariance"]), float(doc["x0"]), float(doc["xs"]))
    if doc["kind"] == "piecewise":
        return Piecewise(tuple(map(float, doc["x"])), tuple(map(float, doc["y"])), tuple(map(float, doc["u"])))
    raise ValueError(f"unknown curve kind {doc['kind']!r}")


def _point_dict(p: CalPoint) -> dict[str, Any]:
    return {"reference": p.reference, "counts": p.counts, "counts_sd": p.counts_sd, "samples": p.samples,
            "u_reference": p.u_reference}
