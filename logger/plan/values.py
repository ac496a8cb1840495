"""Values with units as a bench user types and reads them: ``10k``, ``4k7``, ``0.01``, ``100u``, ``3.3V``.

The planner takes every electrical quantity as text and reads it here, so that a mistyped value becomes one
plain :class:`PlanError` line naming the option, never a traceback or a usage dump. Output goes the other way:
three significant figures with an SI prefix (``806 uV``, ``1.53 kohm``), ASCII only so any terminal shows it.
"""

from __future__ import annotations

import math
import re

import numpy as np


class PlanError(ValueError):
    """A planning request that cannot be met or was mistyped; the message names the option and what to do."""


_PREFIXES = {"p": -12, "n": -9, "u": -6, "µ": -6, "μ": -6, "m": -3, "": 0, "k": 3, "K": 3, "M": 6, "G": 9}
"""Powers of ten; a value is read as ``float("4.7e3")`` so that ``100u`` is exactly the float nearest 1e-4."""
_NUMBER = re.compile(r"([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([pnuµμmkKMG]?)")
_RKM = re.compile(r"(\d+)([RrkKM])(\d*)")
"""Resistor code with the multiplier as the decimal point (IEC 60062 style): 4k7, 0R1, 1M5, 10R."""

UNIT_WORDS = {"ohm": "ohms", "V": "volts", "A": "amps", "W": "watts", "%": "percent", "x": "plain numbers",
              "F": "farads"}
_SUFFIXES = {
    "ohm": ("ohms", "ohm", "Ω", "Ω"),
    "V": ("V", "v"),
    "A": ("A", "a"),
    "W": ("W", "w"),
    "F": ("F", "f"),
    "%": ("%",),
    "x": ("x", "X"),
}
_OUT_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p"))


def parse_value(text: str, unit: str, option: str) -> float:
    """Read a value such as ``4.7k``, ``4k7``, ``10mA`` or ``0.5 W``; ``m`` is milli and ``M`` mega.

    Args:
        text: what the user typed.
        unit: the quantity's unit (``ohm``, ``V``, ``A``, ``W``, ``F``; ``%`` or ``x`` for plain numbers, which take
            no prefix); typing it is optional.
        option: the command-line option, named in the error.

    Returns:
        The value in base units (ohms, volts, amps, watts, farads; percent as typed).

    Raises:
        PlanError: the text is not a number in that unit.
    """
    body = text.strip()
    for suffix in _SUFFIXES[unit]:
        if body.endswith(suffix) and len(body) > len(suffix):
            body = body[: -len(suffix)].rstrip()
            break
    plain = unit in ("%", "x")
    if not plain:
        rkm = _RKM.fullmatch(body)
        if rkm and (rkm.group(3) or rkm.group(2) in "Rr"):
            whole, letter, fraction = rkm.groups()
            power = 0 if letter in "Rr" else _PREFIXES[letter]
            return float(f"{whole}.{fraction or 0}e{power}")
    match = _NUMBER.fullmatch(body)
    if match is None or (plain and match.group(2)):
        example = {"ohm": "4.7k, 4k7 or 0.01", "V": "48, 3.3 or 500m", "A": "5, 100m or 250u",
                   "W": "0.25 or 500m", "F": "100u or 1m", "%": "5", "x": "50"}[unit]
        kind = "a plain number" if unit == "x" else f"a value in {UNIT_WORDS[unit]}"
        raise PlanError(f"{option}: {text!r} is not {kind}; give a number such as {example}")
    mantissa, _, power = match.group(1).lower().partition("e")
    value = float(f"{mantissa}e{int(power or 0) + _PREFIXES[match.group(2)]}")
    if not math.isfinite(value):
        raise PlanError(f"{option}: {text!r} is not a finite number")
    return value


def positive(value: float, option: str, what: str) -> float:
    """``value`` itself if above zero, else a :class:`PlanError` saying what the option should hold."""
    if not value > 0:
        raise PlanError(f"{option}: expected {what} above zero, got {format_value(value, '')}".rstrip())
    return value


def exceeds(value: float, limit: float) -> bool:
    """``value`` above ``limit`` by more than rounding: a pair designed to sit exactly at a limit is no fault."""
    return value > limit * (1 + 1e-9)


def format_value(value: float, unit: str, digits: int = 3) -> str:
    """``value`` to ``digits`` significant figures with an SI prefix: ``806 uV``, ``1.53 kohm``, ``0 W``.

    Resistances below one ohm are written as decimals (``0.01 ohm``): ``10 mohm`` reads too much like mega.
    """
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}".rstrip()
    rounded = float(f"{value:.{digits}g}")
    if abs(rounded) < 1e-12:
        return f"{rounded:.{digits}g} {unit}".rstrip()
    if unit == "ohm" and abs(rounded) < 1:
        return f"{np.format_float_positional(rounded, trim='-')} ohm"
    scale, prefix = next(((s, p) for s, p in _OUT_PREFIXES if abs(rounded) >= s), _OUT_PREFIXES[-1])
    mantissa = np.format_float_positional(rounded / scale, precision=digits, unique=True, fractional=False,
                                          trim="-")
    return f"{mantissa} {prefix}{unit}".rstrip()


def short_ohms(value: float) -> str:
    """A resistance as written on a schematic: ``560k``, ``4.7k``, ``1M``, ``10``, ``0.01``."""
    return format_value(value, "ohm", digits=3).removesuffix("ohm").replace(" ", "")


def toml_float(value: float, digits: int = 6) -> str:
    """A float as a TOML literal, rounded to ``digits`` significant figures (``11.0``, ``0.0015``, ``18.9697``)."""
    return repr(float(f"{value:.{digits}g}"))


def percent(fraction: float, digits: int = 2) -> str:
    """A fraction as a signed percentage: ``+0.42 %``."""
    return f"{fraction * 100:+.{digits}f} %"
