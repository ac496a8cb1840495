"""The rig file (TOML): which device input is which rail, how counts become volts and amps, what is nominal.

Errors always name the file, the key and what was expected, because a rig file is written by hand.
"""

from __future__ import annotations

import difflib
import keyword
import math
import re
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from logger.cal.profile import Profile, ProfileError, load_profile

ROLES = ("volts", "amps", "aux")
UNITS = {"volts": "V", "amps": "A", "aux": "V"}  # an aux tap is a voltage through a divider, unless it says
_NAME = re.compile(r"^[a-z][a-z0-9_]{0,23}$")
RESERVED = ("utc", "device_us", "seq", "segment")
"""Columns every run's sample table has: no channel may take their names."""


class RigError(ValueError):
    """A rig file is missing, unreadable or wrong; the message names the file and key."""


@dataclass(frozen=True)
class Channel:
    """One measured quantity and how to get it from raw ADC counts."""

    name: str
    role: str
    input: int
    """Position of this channel's counts in the device's data lines (0-based)."""
    divider: float = 1.0
    """Volts at the rail per volt at the ADC pin (volts and aux)."""
    shunt_ohm: float = 0.0
    gain: float = 1.0
    """Amplifier gain between shunt and ADC pin (amps)."""
    negative: bool = False
    """A negative rail: the tap sees its magnitude, the value is reported below zero."""
    offset_counts: float = 0.0
    nominal: float | None = None
    low: float | None = None
    high: float | None = None
    unit: str = ""
    events: dict[str, float] = field(default_factory=dict)
    """Detector settings that differ from the defaults (see :mod:`logger.events.rules`)."""
    profile: Profile | None = None
    """The channel's calibration profile, when the rig names one; it replaces the scaling above."""
    profile_path: str | None = None
    zero_limit_pct: float = 5.0
    """The largest reading, as a share of the ADC's range, that may be taken as zero (amps): a tare taken
    with current flowing would offset every reading after it."""

    def units_per_pin_volt(self) -> float:
        """Calibrated units per volt at the ADC pin, sign included."""
        per_volt = 1.0 / (self.shunt_ohm * self.gain) if self.role == "amps" else self.divider
        return -per_volt if self.negative else per_volt


@dataclass(frozen=True)
class Device:
    port: str | None = None
    baud: int = 1_000_000
    adc_bits: int | None = None
    vref_mv: int | None = None


@dataclass(frozen=True)
class PowerPair:
    """One rail's volts and amps channels, as positions in the rig's channel order."""

    rail: str
    volts: int
    amps: int
    sign: float = 1.0
    """-1 for a negative rail: its volts read below zero while its shunt sees the current's size, and the power
    it delivers is counted positive."""

    @property
    def name(self) -> str:
        """The rail's power, as a column name: ``out_w``."""
        return f"{self.rail}_w"


def _rail_of(name: str) -> str:
    for suffix in ("_v", "_a", "_volts", "_amps"):
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return name


@dataclass(frozen=True)
class Rig:
    name: str
    channels: tuple[Channel, ...]
    device: Device = field(default_factory=Device)
    source: str = ""
    """Where it was read from, for messages and metadata."""
    text: str = ""
    """The file as written, stored with every run."""

    def power_pairs(self) -> tuple[PowerPair, ...]:
        """Each volts channel with the amps channel of the same rail, found by name (``out_v`` and ``out_a``
        are the rail ``out``): their product is the rail's power, its integrals charge and energy."""
        pairs = []
        for i, v in enumerate(self.channels):
            if v.role != "volts":
                continue
            for j, a in enumerate(self.channels):
                if a.role == "amps" and _rail_of(a.name) == _rail_of(v.name):
                    pairs.append(PowerPair(_rail_of(v.name), i, j, -1.0 if v.negative else 1.0))
                    break
        return tuple(pairs)

    def warnings(self) -> list[str]:
        """Things to tell the user at start that do not stop a run: calibration profiles past due."""
        return [f"{ch.profile_path}: calibration of {ch.name} was due {ch.profile.due}; redo it with "
                f"`railtap cal {ch.name}`" for ch in self.channels if ch.profile is not None and ch.profile.overdue()]

    def channel(self, name: str) -> Channel:
        for ch in self.channels:
            if ch.name == name:
                return ch
        raise KeyError(name)


def load_rig(path: str | Path) -> Rig:
    """Read and check a rig file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise RigError(f"{path}: no such rig file; write an example with `railtap rig init {path}`") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RigError(f"{path}: cannot read rig file ({exc})") from None
    return parse_rig(text, str(path))


def demo_rig_text() -> str:
    """The commented example rig, which also describes the built-in simulated rig."""
    return resources.files("logger").joinpath("templates/rig.toml").read_text(encoding="utf-8")


def parse_rig(text: str, source: str = "<rig>", *, profiles: bool = True) -> Rig:
    """Parse rig TOML text; ``source`` names it in errors. ``profiles=False`` leaves the calibration
    profiles it names unread (a rig kept in a run's metadata, whose profiles were stored with it)."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RigError(f"{source}: not valid TOML ({exc})") from None
    return rig_from_dict(doc, source, text, profiles=profiles)


def rig_from_dict(doc: dict[str, Any], source: str = "<rig>", text: str = "", *, profiles: bool = True) -> Rig:
    """Check an already-parsed rig table (a rig file, or the ``[rig]`` table of a simulated scenario)."""
    checker = _Checker(source)
    checker.known(doc, TOP_KEYS, "")
    name = checker.get(doc, "name", str, "rig")
    device = _device(checker, doc.get("device", {}))
    raw_channels = doc.get("channel")
    if not isinstance(raw_channels, list) or not raw_channels:
        raise RigError(f"{source}: no [[channel]] tables; at least one channel is needed")
    base = Path(source).parent if source and not source.startswith("<") else Path()
    channels = tuple(_channel(checker, i, t, base if profiles else None) for i, t in enumerate(raw_channels))
    _check_unique(source, channels)
    return Rig(name=name, channels=channels, device=device, source=source, text=text)


TOP_KEYS = ("name", "device", "channel")
DEVICE_KEYS = ("port", "baud", "adc_bits", "vref_mv")
CHANNEL_KEYS = ("name", "role", "input", "divider", "shunt_ohm", "gain", "negative", "offset_counts", "nominal",
                "low", "high", "unit", "events", "profile", "zero_limit_pct")


class _Checker:
    def __init__(self, source: str) -> None:
        self.source = source

    def known(self, table: dict[str, Any], keys: tuple[str, ...], where: str) -> None:
        """Refuse a key the rig file does not have (a typo would otherwise be ignored without a word)."""
        for key in table:
            if key not in keys:
                close = difflib.get_close_matches(key, keys, n=1)
                hint = f"did you mean {close[0]!r}?" if close else f"known keys: {', '.join(keys)}"
                raise RigError(f"{self.source}: {where}{key}: unknown key; {hint}")

    def fail(self, key: str, expected: str) -> RigError:
        return RigError(f"{self.source}: {key}: expected {expected}")

    def get(self, table: dict[str, Any], key: str, kind: type, default: Any = None, where: str = "") -> Any:
        value = table.get(key, default)
        label = f"{where}{key}"
        if value is None:
            return None
        if kind is float and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        if not isinstance(value, kind) or isinstance(value, bool) != (kind is bool):
            raise self.fail(label, f"a {kind.__name__}, got {value!r}")
        if kind is float and not math.isfinite(value):
            raise self.fail(label, "a finite number")
        return value


def _device(c: _Checker, table: dict[str, Any]) -> Device:
    w = "device."
    c.known(table, DEVICE_KEYS, w)
    baud = c.get(table, "baud", int, 1_000_000, w)
    bits = c.get(table, "adc_bits", int, None, w)
    if baud <= 0:
        raise c.fail("device.baud", "a positive integer")
    if bits is not None and not 1 <= bits <= 16:
        raise c.fail("device.adc_bits", "1 to 16")
    vref_mv = c.get(table, "vref_mv", int, None, w)
    if vref_mv is not None and not 1 <= vref_mv <= 65_535:
        raise c.fail("device.vref_mv", "the ADC's reference in millivolts, 1 to 65535")
    return Device(port=c.get(table, "port", str, None, w), baud=baud, adc_bits=bits, vref_mv=vref_mv)


def _channel(c: _Checker, index: int, table: dict[str, Any], base: Path | None) -> Channel:
    w = f"channel[{index}]."
    name = c.get(table, "name", str, None, w)
    if name is None or not _NAME.match(name) or keyword.iskeyword(name):
        raise c.fail(f"{w}name", "a lower-case name such as out_v (letters, digits, _; up to 24; not a Python word)")
    if name in RESERVED or name.endswith("_counts"):
        raise c.fail(f"{w}name", f"a name other than {', '.join(RESERVED)} and not ending in _counts (the sample "
                     "table has those columns)")
    w = f"channel {name!r}: "
    c.known(table, CHANNEL_KEYS, w)
    role = c.get(table, "role", str, None, w)
    if role not in ROLES:
        raise c.fail(f"{w}role", f"one of {', '.join(ROLES)}")
    numbers = {k: c.get(table, k, float, None, w) for k in
               ("divider", "shunt_ohm", "gain", "offset_counts", "nominal", "low", "high")}
    if role == "amps" and not (numbers["shunt_ohm"] or 0) > 0:
        raise c.fail(f"{w}shunt_ohm", "a positive resistance in ohms for an amps channel")
    for key in ("divider", "gain"):
        if numbers[key] is not None and numbers[key] <= 0:
            raise c.fail(f"{w}{key}", "a positive number")
    events = _event_settings(c, table.get("events", {}), w)
    negative = c.get(table, "negative", bool, False, w)
    nominal = numbers["nominal"]
    if nominal == 0:
        raise c.fail(f"{w}nominal", "the rail's normal value, not 0 (events are measured against it; leave nominal "
                     "out to watch no events)")
    if nominal is not None and nominal < 0 and not negative and role != "amps":
        raise c.fail(f"{w}nominal", f"a positive value, or `negative = true` for a rail below zero (got {nominal:g})")
    low, high = numbers["low"], numbers["high"]
    below_zero = negative or (nominal is not None and nominal < 0)
    for key, value in (("low", low), ("high", high)):  # limits are magnitudes: a dip is toward zero either way
        if value is not None and (value == 0 or (value < 0 and not below_zero)):
            raise c.fail(f"{w}{key}", f"a limit above zero (or `negative = true` for a rail below zero; got "
                         f"{value:g})")
    if low is not None and high is not None and abs(low) >= abs(high):
        raise c.fail(f"{w}low", f"a smaller magnitude than high ({high:g})")
    given = {k: v for k, v in numbers.items() if v is not None}
    zero_limit = c.get(table, "zero_limit_pct", float, 5.0, w)
    if not 0 < zero_limit <= 100:
        raise c.fail(f"{w}zero_limit_pct", "a share of the ADC's range above 0 and up to 100 (%)")
    unit = c.get(table, "unit", str, UNITS.get(role, ""), w)
    profile_path = c.get(table, "profile", str, None, w)
    return Channel(
        name=name,
        role=role,
        input=_input(c, table, w),
        negative=negative,
        unit=unit,
        events=events,
        profile=_profile(c, base, profile_path, name, unit, w),
        profile_path=profile_path,
        zero_limit_pct=zero_limit,
        **given,
    )


def _profile(c: _Checker, base: Path | None, path: str | None, name: str, unit: str, where: str) -> Profile | None:
    """The calibration profile a channel names (a path relative to the rig file), checked against it."""
    if path is None or base is None:
        return None
    try:
        profile = load_profile(base / path)
    except ProfileError as exc:
        raise RigError(f"{c.source}: {where}profile: {exc}") from None
    if profile.channel != name:
        raise c.fail(f"{where}profile", f"a profile made for {name!r}; {path} was made for {profile.channel!r} "
                     f"(make one with `railtap cal {name}`)")
    if profile.unit != unit:
        raise c.fail(f"{where}profile", f"a profile in {unit!r}; {path} is in {profile.unit!r}")
    return profile


EVENT_RANGES = {
    "brownout_pct": (1.0, 99.0, "a share of nominal from 1 to 99 (%)"),
    "dropout_pct": (0.0, 99.0, "a share of nominal from 0 to 99 (%)"),
    "overvoltage_pct": (101.0, 1000.0, "a share of nominal from 101 to 1000 (%)"),
    "hysteresis_pct": (0.0, 50.0, "a share of nominal from 0 to 50 (%)"),
    "min_event_s": (0.0, 3600.0, "seconds, 0 to 3600"),
    "mean_window_s": (0.0, 1.0, "seconds, 0 to 1 (a short mean against single noisy samples)"),
    "overcurrent_s": (0.0, 3600.0, "seconds, 0 to 3600"),
    "flicker_window_s": (0.001, 3600.0, "seconds, 0.001 to 3600"),
}
EVENT_KEYS = tuple(EVENT_RANGES)


def _event_settings(c: _Checker, table: dict[str, Any], where: str) -> dict[str, float]:
    """The optional ``[channel.events]`` table: detector settings for this channel."""
    if not isinstance(table, dict):
        raise c.fail(f"{where}events", "a table of detector settings")
    unknown = sorted(set(table) - set(EVENT_KEYS))
    if unknown:
        raise c.fail(f"{where}events.{unknown[0]}", f"one of {', '.join(EVENT_KEYS)}")
    settings = {k: c.get(table, k, float, None, f"{where}events.") for k in table}
    for key, value in settings.items():
        low, high, words = EVENT_RANGES[key]
        if not low <= value <= high:
            raise c.fail(f"{where}events.{key}", words)
    return settings


def _input(c: _Checker, table: dict[str, Any], where: str) -> int:
    value = c.get(table, "input", int, None, where)
    if value is None or not 0 <= value < 8:
        raise c.fail(f"{where}input", "the channel's position in the data line, 0 to 7")
    return value


def _check_unique(source: str, channels: tuple[Channel, ...]) -> None:
    seen_names: set[str] = set()
    seen_inputs: dict[int, str] = {}
    for ch in channels:
        if ch.name in seen_names:
            raise RigError(f"{source}: channel {ch.name!r}: name used twice")
        if ch.input in seen_inputs:
            raise RigError(f"{source}: channel {ch.name!r}: input {ch.input} already used by {seen_inputs[ch.input]!r}")
        seen_names.add(ch.name)
        seen_inputs[ch.input] = ch.name
