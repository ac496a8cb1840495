"""A calibration's assessment as text for the terminal: the points, each model's residuals, the verdict."""

from __future__ import annotations

import numpy as np

from logger.cal.assess import Assessment, Candidate
from logger.figures import to_resolution


def assessment_text(a: Assessment, unit: str) -> str:
    """Per point the residual of each model in the unit and in % of reading; per model the largest error,
    the largest standard uncertainty of a calibrated value over the points' span, and how well it predicts
    left-out points; then the recommendation and any warnings."""
    lo, hi = a.points[0].counts, a.points[-1].counts
    models = [c for c in a.candidates.values() if c.model != "piecewise"]
    # Figures to a tenth of a converter step: a point's mean of many samples resolves below one step, not
    # below a tenth of one (the line's slope is the step in the unit).
    step = abs(a.candidates["line"].curve.slope((lo + hi) / 2)) / 10
    lines = ["  #   reference       counts      sd  " + "".join(f"{c.model + ' residual':>24}" for c in models)]
    for k, p in enumerate(a.points):
        cells = "".join(f"{_residual(c.residuals[k], p.reference, unit, step):>24}" for c in models)
        lines.append(f"{k + 1:>3} {p.reference:>+11.5g} {unit:<2} {p.counts:>10.2f} {p.counts_sd:>7.2f}  {cells}")
    lines.append("")
    lines.append(f"  {'model':<11}{'largest error':>22}{'u(value) over span':>22}{'left-out RMS':>16}"
                 f"{'chi2 / dof (95 % limit)':>28}")
    for c in a.candidates.values():
        lines.append(f"  {c.model:<11}{_largest(c, a, unit, step):>22}{_u(c, lo, hi, unit, step):>22}"
                     f"{_loo(c, unit, step):>16}"
                     f"{_chi2(c):>28}")
    lines.append("")
    lines.append(f"recommended: {a.recommended}: {a.why}")
    lines += [f"warning: {w}" for w in a.warnings]
    return "\n".join(lines)


def _residual(r: float, reference: float, unit: str, step: float) -> str:
    pct = to_resolution(100 * r / reference, 0.001, signed=True) + " %" if reference else "-"
    return f"{to_resolution(r, step, signed=True)} {unit} {pct:>9}"


def _largest(c: Candidate, a: Assessment, unit: str, step: float) -> str:
    if c.model == "piecewise":
        return "exact at the points"
    k = int(np.argmax(np.abs(c.residuals)))
    ref = a.points[k].reference
    pct = f" ({100 * abs(c.residuals[k]) / abs(ref):.3f} %)" if ref else ""
    return f"{to_resolution(c.max_error, step)} {unit}{pct}"


def _u(c: Candidate, lo: float, hi: float, unit: str, step: float) -> str:
    u = c.u_span(lo, hi)
    return f"{to_resolution(u, step)} {unit}" if u > 0 else "not known"


def _loo(c: Candidate, unit: str, step: float) -> str:
    return "-" if c.loo_rms is None else f"{to_resolution(c.loo_rms, step)} {unit}"


def _chi2(c: Candidate) -> str:
    """The fit's chi-squared against its limit, and the Birge ratio when it scaled the uncertainty."""
    if c.fit is None or c.fit.chi2 is None:
        return "-"
    if c.chi2_limit is None:
        return "no scatter to judge"
    scaled = f", x{c.birge:.3g}" if c.birge is not None and c.birge > 1 else ""
    return f"{c.fit.chi2:.3g} / {c.fit.dof} ({c.chi2_limit:.3g}){scaled}"
