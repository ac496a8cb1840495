"""Which curve to trust: every model fitted to the same points, their residuals, and a recommendation.

The recommendation rests on how well each model predicts a point it was not fitted to (leave-one-out, on the
inner points, so no model is judged on extrapolation): a straight line that predicts left-out points as well
as a quadratic is the better choice, because it has fewer coefficients to go wrong between the points.

Each point carries a standard uncertainty in the channel's unit: the reference's own (when given), the
standard error of its mean counts, and the converter's quantisation (one LSB, a rectangular distribution:
1/sqrt(12) of a count, JCGM 100 4.3.7), the last two through the curve's local slope. The polynomial fits are
weighted by them, and their chi-squared is checked as ISO/TS 28037 does: when the points scatter more than
those uncertainties allow, the fit's covariance is scaled by the Birge ratio sqrt(chi2 / dof), so the reported
uncertainty is the one the scatter supports, and the report says so.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from logger.cal.fit import Fit, Piecewise, Polynomial, fit_polynomial, piecewise

MODELS = ("line", "quadratic", "piecewise")
DEGREES = {"line": 1, "quadratic": 2}
SIMPLER_WINS = 1.25
"""A simpler model is kept unless a more complex one predicts left-out points this many times better."""
QUANTISATION_COUNTS = 1.0 / np.sqrt(12.0)
"""Standard uncertainty of a reading from the converter's step: one LSB, rectangular (JCGM 100 4.3.7)."""
CONSISTENCY = 0.95
"""The chi-squared test's level: the points agree with the model when chi2 is below this quantile."""


@dataclass(frozen=True)
class CalPoint:
    """One calibration point: the reference value read on a trusted meter and the raw counts meanwhile."""

    reference: float
    counts: float
    """Mean of the raw counts taken at this point."""
    counts_sd: float = 0.0
    samples: int = 1
    u_reference: float | None = None
    """Standard uncertainty of the reference value, in the channel's unit, when known."""


Curve = Polynomial | Piecewise


@dataclass(frozen=True)
class Candidate:
    """One model fitted to the points."""

    model: str
    curve: Curve
    residuals: np.ndarray
    """Reference minus the curve, per point, in the channel's unit."""
    fit: Fit | None = None
    loo_rms: float | None = None
    """Root-mean-square error predicting each inner point from the others (None with too few points)."""
    birge: float | None = None
    """sqrt(chi2 / dof) of a polynomial fit weighted by the points' uncertainties (None with dof 0); above 1
    the points scatter more than their uncertainties, and the curve's covariance has been scaled by its
    square."""
    chi2_limit: float | None = None
    """The chi-squared below which the points agree with the model (its 95 % quantile on dof)."""

    @property
    def consistent(self) -> bool:
        """The chi-squared test: do the points agree with the model within their uncertainties?"""
        fit, limit = self.fit, self.chi2_limit
        return fit is None or fit.chi2 is None or limit is None or fit.chi2 <= limit

    @property
    def max_error(self) -> float:
        return float(np.max(np.abs(self.residuals)))

    def u_span(self, lo: float, hi: float) -> float:
        """The largest standard uncertainty of the curve's value over raw counts ``lo`` to ``hi``."""
        return float(np.max(self.curve.uncertainty(np.linspace(lo, hi, 65))))


@dataclass(frozen=True)
class Assessment:
    points: tuple[CalPoint, ...]
    candidates: dict[str, Candidate]
    recommended: str
    why: str
    warnings: list[str] = field(default_factory=list)


def assess(points: list[CalPoint], in_use: tuple[float, float] | None = None, unit: str = "") -> Assessment:
    """Fit every model the points allow, recommend one, and warn about thin or narrow point sets.

    ``in_use`` is the range of values the channel is used over (from the rig); points that do not reach
    across it leave readings outside to extrapolation.
    """
    pts = tuple(sorted(points, key=lambda p: p.counts))
    if len(pts) < 2:
        raise ValueError("a curve needs at least 2 points (for one point, use a gain-only adjustment)")
    x = np.array([p.counts for p in pts])
    y = np.array([p.reference for p in pts])
    u_y = point_uncertainty(x, y, pts)
    candidates: dict[str, Candidate] = {}
    for model in MODELS:
        if model == "quadratic" and len(pts) < 3:
            continue
        curve, fit = _fit(model, x, y, u_y)
        residuals = y - curve.value(x)
        candidates[model] = _checked(Candidate(model, curve, residuals, fit, _leave_one_out(model, x, y, u_y)))
    recommended, why = _recommend(candidates, unit)
    return Assessment(pts, candidates, recommended, why, _warnings(pts, y, in_use, unit, candidates))


def point_uncertainty(x: np.ndarray, y: np.ndarray, pts: tuple[CalPoint, ...]) -> np.ndarray:
    """Each point's standard uncertainty in the channel's unit: the reference's own (0 when not given), and,
    through the local slope, the standard error of its mean counts and the converter's quantisation."""
    slope = np.abs(np.gradient(y, x)) if len(x) > 1 else np.ones(1)
    counts = np.array([p.counts_sd / np.sqrt(max(p.samples, 1)) for p in pts])
    reference = np.array([p.u_reference or 0.0 for p in pts])
    return np.sqrt(reference**2 + (slope * counts) ** 2 + (slope * QUANTISATION_COUNTS) ** 2)


def _fit(model: str, x: np.ndarray, y: np.ndarray, u_y: np.ndarray) -> tuple[Curve, Fit | None]:
    if model in DEGREES:
        fit = fit_polynomial(x, y, DEGREES[model], u_y)
        return fit.curve, fit
    return piecewise(x, y, u_y), None


def _checked(c: Candidate) -> Candidate:
    """A polynomial fit with its chi-squared judged and, when the points scatter more than their uncertainties,
    its covariance scaled by the Birge ratio squared (ISO/TS 28037; the ratio, a common practice)."""
    if c.fit is None or c.fit.chi2 is None or c.fit.dof == 0:
        return c
    birge = float(np.sqrt(c.fit.chi2 / c.fit.dof))
    from scipy.stats import chi2  # here, not at the top: scipy.stats costs ~60 MB that recording never needs

    limit = float(chi2.ppf(CONSISTENCY, c.fit.dof))
    curve = c.curve
    if birge > 1.0:
        curve = replace(curve, covariance=tuple(tuple(v * birge**2 for v in row) for row in curve.covariance))
    return replace(c, curve=curve, birge=birge, chi2_limit=limit)


def _leave_one_out(model: str, x: np.ndarray, y: np.ndarray, u_y: np.ndarray) -> float | None:
    need = {"line": 2, "quadratic": 3, "piecewise": 2}[model]
    inner = range(1, len(x) - 1)
    if len(x) - 1 < need or len(inner) == 0 or (model == "quadratic" and len(x) < 4):
        return None
    errors = []
    for k in inner:
        keep = np.arange(len(x)) != k
        curve, _ = _fit(model, x[keep], y[keep], u_y[keep])
        errors.append(y[k] - float(curve.value(x[k])))
    return float(np.sqrt(np.mean(np.square(errors))))


def _recommend(candidates: dict[str, Candidate], unit: str) -> tuple[str, str]:
    scored = {m: c.loo_rms for m, c in candidates.items() if c.loo_rms is not None}
    if not scored:
        return "line", "too few points to compare models; a straight line is the safe choice"
    best = min(scored.values())
    for model in MODELS:  # simplest first
        if model in scored and scored[model] <= SIMPLER_WINS * best + 1e-12:
            others = ", ".join(f"{m} {v:.3g} {unit}" for m, v in scored.items() if m != model)
            return model, f"predicts left-out points to {scored[model]:.3g} {unit} RMS ({others})"
    raise AssertionError("unreachable")


def _warnings(pts: tuple[CalPoint, ...], y: np.ndarray, in_use: tuple[float, float] | None, unit: str,
              candidates: dict[str, Candidate]) -> list[str]:
    out = []
    if len(pts) == 2:
        out.append("2 points: a line goes through both exactly, so the fit cannot show its own scatter and its "
                   "uncertainty is only the points' stated ones; add a third point")
    elif len(pts) == 3:
        out.append("3 points: a quadratic goes through all three exactly; add points to check it")
    elif len(pts) < 5:
        out.append(f"{len(pts)} points: a piecewise curve is only as good as its points; 5 or more are better")
    for c in candidates.values():
        if not c.consistent:
            out.append(f"{c.model}: the points scatter more than their uncertainties allow (chi2 {c.fit.chi2:.3g} "
                       f"on {c.fit.dof} degrees of freedom, 95 % limit {c.chi2_limit:.3g}; ISO/TS 28037): its "
                       f"uncertainty is scaled by the Birge ratio {c.birge:.3g}; check the reference's stated "
                       "uncertainty and the points")
    if all(p.u_reference is None for p in pts):
        out.append("the reference's uncertainty was not given (--u-ref or a u_reference column): the points' "
                   "uncertainties count only the converter's noise and step")
    if in_use is not None:
        lo, hi = min(in_use), max(in_use)
        width = hi - lo
        if width > 0 and (y.min() > lo + 0.1 * width or y.max() < hi - 0.1 * width):
            out.append(f"the points cover {y.min():.4g} to {y.max():.4g} {unit} but the channel is used from "
                       f"{lo:.4g} to {hi:.4g} {unit}: readings outside the points are extrapolated and "
                       "flagged; add points near the ends")
    return out


def gain_only(point: CalPoint, offset_counts: float, unit: str = "") -> Candidate:
    """A quick fix from one point: keep the zero (``offset_counts``) and set the gain so the curve passes
    through the point. Nothing checks it anywhere else."""
    span = point.counts - offset_counts
    if span == 0:
        raise ValueError("the point reads the same as zero; set the rig to a value well away from zero")
    gain = point.reference / span
    u_gain = 0.0 if point.u_reference is None else point.u_reference / abs(span)
    curve = Polynomial((0.0, gain), ((0.0, 0.0), (0.0, u_gain**2)), x0=offset_counts, xs=1.0)
    return Candidate("gain-only", curve, np.zeros(1))
