"""Least-squares calibration curves with their covariance, and the uncertainty of a calibrated value.

A curve maps raw ADC counts ``x`` to the channel's unit ``y``. Polynomials (a straight line, a quadratic) are
fitted in a scaled variable ``t = (x - x0) / xs`` so a quadratic over 65,536 counts stays well conditioned;
``x0`` and ``xs`` are kept with the coefficients.

Two ways to know the scatter of the points, as the GUM and ISO/TS 28037 treat them:

* the uncertainty of each reference value is given (``u_y``): weighted least squares, covariance
  ``(A^T W A)^-1`` and a chi-squared that tells whether the points agree with the model within those
  uncertainties (ISO/TS 28037, weighted least squares with known uncertainties);
* it is not: ordinary least squares, the residual variance ``s^2 = sum(r^2) / (n - p)`` estimated from the
  points and covariance ``s^2 (A^T A)^-1`` (JCGM 100 (GUM), annex H.3).

Either way the standard uncertainty of the curve's value at ``x`` is ``sqrt(g^T V g)`` with
``g = (1, t, t^2, ...)``: what the points say about the curve, not the noise of a single reading.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.polynomial import polynomial as P


@dataclass(frozen=True)
class Polynomial:
    """``y = c0 + c1 t + c2 t^2 ...`` with ``t = (x - x0) / xs``; ``covariance`` is that of ``c``."""

    coefficients: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    x0: float = 0.0
    xs: float = 1.0

    @property
    def degree(self) -> int:
        return len(self.coefficients) - 1

    def value(self, x: np.ndarray | float) -> np.ndarray:
        """The curve at raw counts ``x`` (any shape), as float64."""
        return P.polyval((np.asarray(x, dtype=np.float64) - self.x0) / self.xs, np.array(self.coefficients))

    def uncertainty(self, x: np.ndarray | float) -> np.ndarray:
        """Standard uncertainty of the curve's value at ``x``, from the coefficients' covariance."""
        t = (np.atleast_1d(np.asarray(x, dtype=np.float64)) - self.x0) / self.xs
        g = np.vander(t, self.degree + 1, increasing=True)
        v = np.array(self.covariance)
        return np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", g, v, g), 0.0))

    def shifted(self, dy: float) -> Polynomial:
        """The same curve moved by ``dy`` (a tare); the covariance does not change."""
        return Polynomial((self.coefficients[0] + dy, *self.coefficients[1:]), self.covariance, self.x0, self.xs)

    def slope(self, x: float) -> float:
        """dy/dx at ``x``: units per count, for turning count noise into units."""
        t = (x - self.x0) / self.xs
        return float(P.polyval(t, P.polyder(np.array(self.coefficients)))) / self.xs


@dataclass(frozen=True)
class Fit:
    """A fitted polynomial and what the points say about it."""

    curve: Polynomial
    residuals: np.ndarray
    """``y - curve(x)`` at each point, in the channel's unit."""
    dof: int
    """Points minus coefficients."""
    chi2: float | None
    """Sum of squared weighted residuals, when the reference uncertainties were given."""
    s: float | None
    """Residual standard deviation, when they were not (and ``dof > 0``)."""


def fit_polynomial(
    x: np.ndarray,
    y: np.ndarray,
    degree: int,
    u_y: np.ndarray | float | None = None,
    *,
    x0: float | None = None,
    xs: float | None = None,
) -> Fit:
    """Fit ``y`` on ``x`` with a polynomial of ``degree``.

    Args:
        x: raw counts (or any predictor), one per point.
        y: reference values, one per point.
        degree: 1 for a straight line, 2 for a quadratic.
        u_y: standard uncertainty of each reference value (or one for all); None to estimate the scatter
            from the residuals instead.
        x0, xs: centre and scale of ``t = (x - x0) / xs``; by default the middle and half-width of ``x``.

    Raises:
        ValueError: fewer points than coefficients, or all ``x`` equal.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n, p = len(x), degree + 1
    if n < p:
        raise ValueError(f"a degree-{degree} curve needs at least {p} points, got {n}")
    if np.ptp(x) == 0:
        raise ValueError("every point has the same raw reading; set the rig to different values")
    x0 = float((x.min() + x.max()) / 2) if x0 is None else x0
    xs = float(np.ptp(x) / 2) if xs is None else xs
    a = np.vander((x - x0) / xs, p, increasing=True)
    w = None if u_y is None else 1.0 / np.broadcast_to(np.asarray(u_y, dtype=np.float64), (n,)) ** 2
    root_w = np.ones(n) if w is None else np.sqrt(w)
    c, *_ = np.linalg.lstsq(a * root_w[:, None], y * root_w, rcond=None)
    residuals = y - a @ c
    normal_inv = np.linalg.inv((a * (root_w**2)[:, None]).T @ a)
    dof = n - p
    if w is not None:
        chi2, s, cov = float(np.sum(w * residuals**2)), None, normal_inv
    else:
        s = float(np.sqrt(residuals @ residuals / dof)) if dof > 0 else None
        chi2, cov = None, normal_inv * (s**2 if s is not None else 0.0)
    curve = Polynomial(tuple(float(v) for v in c), tuple(tuple(float(v) for v in row) for row in cov), x0, xs)
    return Fit(curve, residuals, dof, chi2, s)


@dataclass(frozen=True)
class Piecewise:
    """Straight lines between the calibration points, extended past the ends along the end segments.

    Exact at every point by construction, so its residuals say nothing; its uncertainty is that of the
    points themselves (``u_points``), interpolated between them.
    """

    x: tuple[float, ...]
    y: tuple[float, ...]
    u_points: tuple[float, ...]

    def value(self, x: np.ndarray | float) -> np.ndarray:
        xp, yp = np.array(self.x), np.array(self.y)
        x = np.asarray(x, dtype=np.float64)
        out = np.interp(x, xp, yp)
        lo_slope = (yp[1] - yp[0]) / (xp[1] - xp[0])
        hi_slope = (yp[-1] - yp[-2]) / (xp[-1] - xp[-2])
        out = np.where(x < xp[0], yp[0] + (x - xp[0]) * lo_slope, out)
        return np.where(x > xp[-1], yp[-1] + (x - xp[-1]) * hi_slope, out)

    def uncertainty(self, x: np.ndarray | float) -> np.ndarray:
        return np.interp(np.atleast_1d(np.asarray(x, dtype=np.float64)), np.array(self.x), np.array(self.u_points))

    def shifted(self, dy: float) -> Piecewise:
        return Piecewise(self.x, tuple(v + dy for v in self.y), self.u_points)

    def slope(self, x: float) -> float:
        k = int(np.clip(np.searchsorted(self.x, x) - 1, 0, len(self.x) - 2))
        return (self.y[k + 1] - self.y[k]) / (self.x[k + 1] - self.x[k])


def piecewise(x: np.ndarray, y: np.ndarray, u_points: np.ndarray) -> Piecewise:
    """Piecewise-linear curve through the points (sorted by ``x``; at least two, all ``x`` different)."""
    order = np.argsort(x)
    xs = np.asarray(x, dtype=np.float64)[order]
    if len(xs) < 2:
        raise ValueError("a piecewise curve needs at least 2 points")
    if np.any(np.diff(xs) == 0):
        raise ValueError("two points have the same raw reading; a piecewise curve needs them all different")
    return Piecewise(tuple(map(float, xs)), tuple(float(v) for v in np.asarray(y)[order]),
                     tuple(float(v) for v in np.asarray(u_points)[order]))
