"""A physics-lite rail for the simulated rig: a 12 V supply with source resistance on a stepped load.

Small on purpose. The supply sags by ``I * R`` under a load that steps through a few currents, carries
mains-like ripple, and is interrupted by scripted brownouts and dropouts; the tap's ADC adds a few LSB of
noise and quantises through the demo rig's divider and shunt amplifier. Every true value is a plain
function of time and the fault script can be listed, so tests can check what the pipeline reports
against what really happened.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from logger.rig import Rig, parse_rig


@dataclass(frozen=True)
class ScriptedFault:
    """One scripted disturbance of the supply: the rail is held at ``level_v`` for ``duration_s``."""

    kind: str
    """``"brownout"`` (a dip that stays above zero) or ``"dropout"`` (a near-total interruption)."""
    start_s: float
    duration_s: float
    level_v: float

    @property
    def end_s(self) -> float:
        """When the rail recovers."""
        return self.start_s + self.duration_s


DEFAULT_SCRIPT = (
    ScriptedFault("brownout", 30.0, 0.400, 9.5),
    ScriptedFault("dropout", 50.0, 0.150, 0.3),
)
"""A brownout at 30 s and a dropout at 50 s; with the default period they come back every 60 s."""


class SimpleRail:
    """A 12 V supply on a stepped load, measured by a 12-bit tap wired like the demo rig file.

    Channel 0 (``out_v``) sees the rail through a divider; channel 1 (``out_a``) sees the load current
    through a shunt and amplifier. Counts are ``pin_volts / vref * 2**bits``, rounded and clipped.

    Args:
        seed: seed for the ADC noise (numpy ``default_rng``); equal seeds give equal counts.
        setpoint_v: the supply's open-circuit voltage.
        source_ohm: the supply's source resistance (output sags by ``I * source_ohm``).
        load_steps_a: load currents, each held for an equal share of ``load_cycle_s``.
        load_cycle_s: period of the whole load pattern.
        ripple_hz: ripple frequency (100 Hz: full-wave rectified 50 Hz mains).
        ripple_pp_v: ripple peak-to-peak.
        noise_lsb: standard deviation of the ADC noise, in counts.
        script: faults within the first period; they repeat every ``fault_period_s``.
        fault_period_s: repeat period of the script; ``None`` plays it once.
        divider: rail volts per ADC-pin volt on ``out_v``.
        shunt_ohm: current shunt on ``out_a``.
        amp_gain: shunt amplifier gain.
    """

    channels = ("out_v", "out_a")
    adc_bits = 12
    vref_mv = 3300

    def __init__(
        self,
        *,
        seed: int | None = 0,
        setpoint_v: float = 12.0,
        source_ohm: float = 0.15,
        load_steps_a: tuple[float, ...] = (0.5, 2.0, 3.5),
        load_cycle_s: float = 20.0,
        ripple_hz: float = 100.0,
        ripple_pp_v: float = 0.040,
        noise_lsb: float = 1.5,
        script: tuple[ScriptedFault, ...] = DEFAULT_SCRIPT,
        fault_period_s: float | None = 60.0,
        divider: float = 11.0,
        shunt_ohm: float = 0.01,
        amp_gain: float = 50.0,
    ) -> None:
        self.setpoint_v = setpoint_v
        self.source_ohm = source_ohm
        self.load_steps_a = np.asarray(load_steps_a, dtype=np.float64)
        self.load_cycle_s = load_cycle_s
        self.ripple_hz = ripple_hz
        self.ripple_pp_v = ripple_pp_v
        self.noise_lsb = noise_lsb
        self.script = tuple(sorted(script, key=lambda f: f.start_s))
        self.fault_period_s = fault_period_s
        self.divider = divider
        self.shunt_ohm = shunt_ohm
        self.amp_gain = amp_gain
        self._rng = np.random.default_rng(seed)
        if fault_period_s is not None and any(f.end_s > fault_period_s for f in self.script):
            raise ValueError("every scripted fault must end within one fault period")

    def load_a(self, t_s: np.ndarray) -> np.ndarray:
        """Load current demanded at each time (before any fault cuts it)."""
        phase = np.mod(np.asarray(t_s, dtype=np.float64), self.load_cycle_s) / self.load_cycle_s
        step = np.minimum((phase * len(self.load_steps_a)).astype(np.int64), len(self.load_steps_a) - 1)
        return self.load_steps_a[step]

    def fault_level_v(self, t_s: np.ndarray) -> np.ndarray:
        """Rail voltage forced by a scripted fault at each time, NaN where none is active."""
        t = np.asarray(t_s, dtype=np.float64)
        phase = t if self.fault_period_s is None else np.mod(t, self.fault_period_s)
        level = np.full(t.shape, np.nan)
        for fault in self.script:
            level[(phase >= fault.start_s) & (phase < fault.end_s)] = fault.level_v
        return level

    def true_values(self, t_s: np.ndarray) -> np.ndarray:
        """True rail volts and load amps at each time, shape (n, 2).

        During a fault the rail is held at the fault's level and the load, taken as resistive, draws
        current in proportion to the voltage it gets.
        """
        t = np.asarray(t_s, dtype=np.float64)
        amps = self.load_a(t)
        steady = self.setpoint_v - amps * self.source_ohm
        volts = steady + 0.5 * self.ripple_pp_v * np.sin(2.0 * np.pi * self.ripple_hz * t)
        level = self.fault_level_v(t)
        hit = ~np.isnan(level)
        volts[hit] = level[hit]
        amps = np.where(hit, amps * level / steady, amps)
        return np.column_stack((volts, amps))

    def faults(self, until_s: float, since_s: float = 0.0) -> list[ScriptedFault]:
        """Every scripted fault that overlaps ``[since_s, until_s)``, in time order, at absolute times."""
        found: list[ScriptedFault] = []
        period = self.fault_period_s
        first = 0 if period is None else max(0, int(since_s // period) - 1)
        last = 0 if period is None else int(until_s // period)
        for k in range(first, last + 1):
            offset = 0.0 if period is None else k * period
            for f in self.script:
                start = f.start_s + offset
                if start < until_s and start + f.duration_s > since_s:
                    found.append(ScriptedFault(f.kind, start, f.duration_s, f.level_v))
        return found

    def pin_volts(self, values: np.ndarray) -> np.ndarray:
        """Volts at the two ADC pins for true (volts, amps) values, shape (n, 2)."""
        return np.column_stack((values[:, 0] / self.divider, values[:, 1] * self.shunt_ohm * self.amp_gain))

    def counts(self, t_s: np.ndarray) -> np.ndarray:
        """What the ADC reads at each time: uint16 counts, shape (n, 2), noise included.

        Draws noise in time order, so asking for the same times in one call or in several gives the
        same counts.
        """
        pins = self.pin_volts(self.true_values(t_s))
        full_scale = 1 << self.adc_bits
        ideal = pins / (self.vref_mv / 1000.0) * full_scale
        noisy = ideal + self._rng.standard_normal(ideal.shape) * self.noise_lsb
        return np.clip(np.rint(noisy), 0, full_scale - 1).astype(np.uint16)


RIG_TOML = """\
# The rig file that matches SimpleRail (two channels, 12-bit ADC at 3.3 V).
name = "simple-rail-12v"

[device]
baud = 1000000
# adc_bits = 12
# vref_mv = 3300

[[channel]]
name = "out_v"
role = "volts"
input = 0
divider = 11.0
nominal = 12.0

[[channel]]
name = "out_a"
role = "amps"
input = 1
shunt_ohm = 0.01
gain = 50.0
nominal = 2.0
high = 5.0
"""


def simple_rig() -> Rig:
    """The rig of :class:`SimpleRail`, for tests and benchmarks that use the simple model."""
    return parse_rig(RIG_TOML, "simple simulated rail")
