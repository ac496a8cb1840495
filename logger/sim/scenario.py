"""Simulated scenarios: a rig file, the physics behind it and its faults, in one TOML file.

A scenario file holds a ``[rig]`` table with exactly the keys of a rig file (so the pipeline gets the rig
that matches the simulated wiring), and tables for the link, the ADC, the rails (supply, load schedule,
scheduled faults) and any self-powered meters; see :mod:`logger.sim.spec` for the layout. Three invented
scenarios ship in ``logger/sim/scenarios/``; :func:`scenario_names` lists them and :func:`load_scenario`
takes one of those names or a path.
"""

from __future__ import annotations

import json
import math
import tomllib
from dataclasses import dataclass, field
from functools import cached_property
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from logger.durations import format_duration
from logger.rig import Rig, RigError, rig_from_dict
from logger.sim.adc import AdcSpec
from logger.sim.device import LinkFaults, SimDevice
from logger.sim.model import PhysicalRig, Physics, ordered_channels
from logger.sim.spec import Reader, ScenarioError, read_adc, read_physics, repeating
from logger.sim.truth import TrueEvent, Truth

_PACKAGE_DIR = "sim/scenarios"
_TOP_KEYS = ("name", "description", "duration_s", "repeat", "rig", "link", "adc", "rail", "meter")
_ROLES_FOR = {"volts": ("volts",), "amps": ("amps",), "node": ("aux", "volts")}


@dataclass(frozen=True)
class LinkSpec:
    """The device side of a scenario: sample rate, clock drift and link faults."""

    rate_hz: float = 1000.0
    drift_ppm: float = 35.0
    faults: LinkFaults = field(default_factory=LinkFaults)


@dataclass(frozen=True, eq=False)
class Scenario:
    """A loaded scenario: its rig, physics, ADC and link, and the ground truth of what it does.

    Attributes:
        name: short name (the file's ``name``).
        description: what happens in it, in a sentence or two.
        source: where it was read from.
        text: the scenario file as written.
        duration_s: how long a run of it is meant to last, in simulated seconds.
        repeats: whether it starts again after ``duration_s`` (faults and load steps), so that a run may last
            longer; a pack that runs down cannot.
        rig: the matching rig (its ``text`` is a plain rig file of the ``[rig]`` table).
        physics: rails and meters.
        adc: converter and errors.
        link: rate, drift and link faults.
    """

    name: str
    description: str
    source: str
    text: str
    duration_s: float
    rig: Rig
    physics: Physics
    adc: AdcSpec
    link: LinkSpec
    repeats: bool = False

    def run_length_s(self, asked_s: float | None) -> float | None:
        """How long the simulated source runs when ``asked_s`` (``--duration``) is asked for: the scenario's
        own length, or with no end (``None``) when it repeats past it and the run's duration stops it.

        Raises:
            ScenarioError: more is asked for than a scenario that cannot repeat holds.
        """
        if asked_s is None or asked_s <= self.duration_s:
            return self.duration_s
        if not self.repeats:
            raise ScenarioError(f"scenario {self.name!r} lasts {format_duration(self.duration_s)} and cannot repeat "
                                f"(its `repeat` is false); ask for --duration {format_duration(self.duration_s)} or "
                                "less")
        return None

    def make_model(self, seed: int | None = 0) -> PhysicalRig:
        """A fresh physics model (noise seeded with ``seed``) to give to :class:`SimDevice`."""
        return PhysicalRig(self.physics, self.rig, self.adc, seed)

    def make_device(self, seed: int | None = 0, *, clock_start_us: int | None = None,
                    header_period_s: float = 10.0) -> SimDevice:
        """A simulated device running this scenario from boot, with its rate, drift and link faults."""
        return SimDevice(self.make_model(seed), rate_hz=self.link.rate_hz, drift_ppm=self.link.drift_ppm,
                         clock_start_us=clock_start_us, seed=seed, faults=self.link.faults,
                         header_period_s=header_period_s)

    @cached_property
    def truth(self) -> Truth:
        """Ground truth (noise-free, computed on demand, kept between calls)."""
        return Truth(self.physics, ordered_channels(self.rig), self.link.rate_hz)

    def true_events(self, until_s: float) -> list[TrueEvent]:
        """Every true event starting before ``until_s`` (simulated seconds from boot), in time order."""
        return self.truth.events(until_s)

    def true_values(self, t_s: np.ndarray) -> np.ndarray:
        """True channel values at simulated times from boot, shape (n, channels) in data-line order."""
        return self.truth.values(t_s)


def scenario_names() -> list[str]:
    """Names of the scenarios shipped with railtap."""
    folder = resources.files("logger").joinpath(_PACKAGE_DIR)
    return sorted(p.name.removesuffix(".toml") for p in folder.iterdir() if p.name.endswith(".toml"))


def load_scenario(name_or_path: str | Path) -> Scenario:
    """Load a shipped scenario by name, or a scenario file by path.

    Raises:
        ScenarioError: the file is missing, unreadable or wrong (one line naming the file and key).
    """
    name = str(name_or_path)
    if isinstance(name_or_path, str) and name in scenario_names():
        resource = resources.files("logger").joinpath(f"{_PACKAGE_DIR}/{name}.toml")
        return parse_scenario(resource.read_text(encoding="utf-8"), f"{name}.toml")
    path = Path(name_or_path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ScenarioError(f"{path}: no such scenario file or shipped scenario "
                            f"(shipped: {', '.join(scenario_names())})") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ScenarioError(f"{path}: cannot read scenario file ({exc})") from None
    return parse_scenario(text, str(path))


def parse_scenario(text: str, source: str = "<scenario>") -> Scenario:
    """Parse scenario TOML text; ``source`` names it in errors."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{source}: not valid TOML ({exc})") from None
    return scenario_from_dict(doc, source, text)


def scenario_from_dict(doc: dict[str, Any], source: str = "<scenario>", text: str = "") -> Scenario:
    """Check an already-parsed scenario table and build the scenario."""
    r = Reader(source)
    r.keys(doc, "", _TOP_KEYS)
    rig_table = r.table(doc.get("rig"), "rig")
    try:
        rig = rig_from_dict(rig_table, f"{source}: rig", rig_text(rig_table))
    except RigError as exc:
        raise ScenarioError(str(exc)) from None
    physics = read_physics(r, doc)
    duration_s = r.number(doc, "duration_s", "", 600.0, positive=True)
    repeats = r.flag(doc, "repeat", "", False)
    if repeats:
        physics = repeating(r, physics, duration_s)
    adc = read_adc(r, doc.get("adc", {}))
    link = _read_link(r, doc.get("link", {}))
    _check_wiring(r, rig, physics, adc)
    return Scenario(
        name=r.text(doc, "name", "", Path(source).stem),
        description=r.text(doc, "description", "", ""),
        source=source,
        text=text,
        duration_s=duration_s,
        rig=rig,
        physics=physics,
        adc=adc,
        link=link,
        repeats=repeats,
    )


def rig_text(table: dict[str, Any]) -> str:
    """A plain rig file for a ``[rig]`` table, to store with runs as a rig file would be."""
    lines = [f"{k} = {_toml(v)}" for k, v in table.items() if not isinstance(v, dict | list)]
    for key, value in table.items():
        if isinstance(value, dict):
            lines += ["", f"[{key}]", *(f"{k} = {_toml(v)}" for k, v in value.items())]
        elif isinstance(value, list):
            for item in value:
                lines += ["", f"[[{key}]]", *(f"{k} = {_toml(v)}" for k, v in item.items())]
    return "\n".join(lines) + "\n"


def _toml(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, float) and not math.isfinite(value):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml(v)}" for k, v in value.items()) + " }"
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    return repr(value)


def _read_link(r: Reader, table: Any) -> LinkSpec:
    t = r.keys(table, "link", ("rate_hz", "drift_ppm", "drop_line", "corrupt_byte", "drop_byte"))
    chances = {k: r.number(t, k, "link", 0.0, low=0.0) for k in ("drop_line", "corrupt_byte", "drop_byte")}
    if sum(chances.values()) > 1.0:
        raise r.fail("link", "drop_line + corrupt_byte + drop_byte must not exceed 1")
    return LinkSpec(rate_hz=r.number(t, "rate_hz", "link", 1000.0, positive=True),
                    drift_ppm=r.number(t, "drift_ppm", "link", 35.0), faults=LinkFaults(**chances))


def _check_wiring(r: Reader, rig: Rig, physics: Physics, adc: AdcSpec) -> None:
    """Every rig channel fed by exactly one thing of the right kind, inputs 0..n-1, ADC as the rig says."""
    inputs = sorted(ch.input for ch in rig.channels)
    if inputs != list(range(len(inputs))):
        raise r.fail("rig.channel", f"inputs must be 0 to {len(inputs) - 1} with none skipped, got {inputs}")
    names = {ch.name: ch for ch in rig.channels}
    keys = [(f"rail[{i}].{w}", getattr(s, w), w) for i, s in enumerate(physics.rails) for w in ("volts", "amps")]
    keys += [(f"meter[{i}].channel", m.channel, "node") for i, m in enumerate(physics.meters)]
    fed: set[str] = set()
    for key, name, what in keys:
        if name is None:
            continue
        if name not in names:
            raise r.fail(key, f"no rig channel named {name!r} (channels: {', '.join(names)})")
        if name in fed:
            raise r.fail(key, f"channel {name!r} is already fed by another rail or meter")
        if names[name].role not in _ROLES_FOR[what]:
            raise r.fail(key, f"channel {name!r} has role {names[name].role}; expected {' or '.join(_ROLES_FOR[what])}")
        fed.add(name)
    missing = [n for n in names if n not in fed]
    if missing:
        raise r.fail("rig.channel", f"nothing in the scenario feeds {', '.join(missing)}")
    for key in ("adc_bits", "vref_mv"):
        given = getattr(rig.device, key)
        have = adc.bits if key == "adc_bits" else adc.vref_mv
        if given is not None and given != have:
            raise r.fail(f"rig.device.{key}", f"{given} disagrees with the scenario's ADC ({have})")
    for key in ("offset_lsb", "gain_error"):
        for name in getattr(adc, key):
            if name not in names:
                raise r.fail(f"adc.{key}.{name}", f"no rig channel named {name!r}")
