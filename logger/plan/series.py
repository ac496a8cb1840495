"""Preferred resistor values: the E12, E24 and E96 series of IEC 60063, typed in from the standard's tables.

The tables are constants, not ``round(10 ** (i / n))``: eight E24 values (2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and
8.2) are not the rounded geometric series, and a formula would hand the user parts nobody stocks. E12 is every
other E24 value. E96 does follow the rounded series to three figures, but is typed in all the same so that every
series comes from the same place.
"""

from __future__ import annotations

import numpy as np

from logger.plan.values import PlanError, format_value

# IEC 60063, E12 series, one decade (values from the standard's table).
E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)

# IEC 60063, E24 series, one decade (values from the standard's table).
E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
       3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)

# IEC 60063, E96 series, one decade (values from the standard's table).
E96 = (1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30,
       1.33, 1.37, 1.40, 1.43, 1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74,
       1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10, 2.15, 2.21, 2.26, 2.32,
       2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
       3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12,
       4.22, 4.32, 4.42, 4.53, 4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49,
       5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65, 6.81, 6.98, 7.15, 7.32,
       7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76)

SERIES = {"E12": E12, "E24": E24, "E96": E96}
"""Series by name, each one decade from 1.0 up to (not including) 10."""

SMALLEST_OHM = 1e-3
LARGEST_OHM = 10e6
"""The span the planner searches: milliohm shunts up to 10 Mohm, about the largest resistor stocked widely."""


def series_name(text: str, option: str = "--series") -> str:
    """The series' canonical name (``e24`` -> ``E24``), or a :class:`PlanError` listing those offered."""
    name = text.strip().upper()
    if name not in SERIES:
        raise PlanError(f"{option}: {text!r} is not offered; use one of {', '.join(SERIES)}")
    return name


def series_values(name: str, low: float = SMALLEST_OHM, high: float = LARGEST_OHM) -> np.ndarray:
    """Every value of the series from ``low`` to ``high`` (both included), ascending.

    Values are built from the table's mantissa in hundredths, scaled by exact integer powers of ten, so that
    4.7 k comes out as exactly 4700.0 and 0.47 as the float nearest 0.47.
    """
    hundredths = np.rint(np.asarray(SERIES[name]) * 100).astype(np.int64)
    decades = np.arange(int(np.floor(np.log10(low))) - 1, int(np.ceil(np.log10(high))) + 1)
    up = np.where(decades >= 2, 10.0 ** np.maximum(decades - 2, 0), 1.0)
    down = np.where(decades < 2, 10.0 ** np.maximum(2 - decades, 0), 1.0)
    values = (hundredths[None, :] * up[:, None] / down[:, None]).ravel()
    keep = (values >= low * (1 - 1e-12)) & (values <= high * (1 + 1e-12))
    return values[keep]


def nearest(value: float, name: str) -> float:
    """The series value closest to ``value`` on a log scale (the way the series are spaced)."""
    values = series_values(name)
    return float(values[np.argmin(np.abs(np.log(values / value)))])


def within(low: float, high: float, name: str) -> np.ndarray:
    """The series values from ``low`` to ``high`` inclusive, ascending (maybe none)."""
    values = series_values(name)
    return values[(values >= low * (1 - 1e-12)) & (values <= high * (1 + 1e-12))]


def neighbours(value: float, name: str) -> tuple[float | None, float | None]:
    """The series values just below and just above ``value`` (``None`` past the ends of the search span)."""
    values = series_values(name)
    below = values[values < value * (1 - 1e-9)]
    above = values[values > value * (1 + 1e-9)]
    return (float(below[-1]) if below.size else None, float(above[0]) if above.size else None)


def describe(name: str) -> str:
    """One line for a report: the series and the span searched."""
    return f"{name} (IEC 60063), {format_value(SMALLEST_OHM, 'ohm')} to {format_value(LARGEST_OHM, 'ohm')}"
