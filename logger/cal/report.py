"""A calibration's assessment as text for the terminal: the points, each model's residuals, the verdict."""

from __future__ import annotations

import numpy as np

from logger.cal.assess import Assessment, Candidate


def assessment_text(a: Assessment, unit: str) -> str:
    """Per point the residual of each model in the unit and in % of reading; per model the largest error,
    the largest standard uncertainty of a calibrated value over the points' span, and how well it predicts
    left-out points; then the recommendation and any warnings."""
    lo, hi = a.points[0].counts, a.points[-1].counts
    models = [c for c in a.candidates.values() if c.model != "piecewise"]
    size = max(abs(p.reference) for p in a.points) or 1.0
    places = int(np.clip(6 - np.floor(np.log10(size)), 1, 8))
    lines = ["  #   reference       counts      sd  " + "".join(f"{c.model + ' residual':>24}" for c in models)]
    for k, p in enumerate(a.points):
        cells = "".join(f"{_residual(c.residuals[k], p.reference, unit, places):>24}" for c in models)
        lines.append(f"{k + 1:>3} {p.reference:>+11.5g} {unit:<2} {p.counts:>10.2f} {p.counts_sd:>7.2f}  {cells}")
    lines.append("")
    lines.append(f"  {'model':<11}{'largest error':>22}{'u(value) over span':>22}{'left-out RMS':>16}"
                 f"{'chi2 / dof (95 % limit)':>28}")
    for c in a.candidates.values():
        lines.append(f"  {c.model:<11}{_largest(c, a, unit):>22}{_u(c, lo, hi, unit):>22}{_loo(c, unit):>16}"
                     f"{_chi2(c):>28}")
    lines.append("")
    lines.append(f"recommended: {a.recommended}: {a.why}")
    lines += [f"warning: {w}" for w in a.warnings]
    return "\n".join(lines)


def _residual(r: float, reference: float, unit: str, places: int) -> str:
    pct = f"{100 * r / reference:+.3f} %" if reference else "-"
    return f"{r:+.{places}f} {unit} {pct:>9}"


def _largest(c: Candidate, a: Assessment, unit: str) -> str:
    if c.model == "piecewise":
        return "exact at the points"
    k = int(np.argmax(np.abs(c.residuals)))
    ref = a.points[k].reference
    pct = f" ({100 * abs(c.residuals[k]) / abs(ref):.3f} %)" if ref else ""
    return f"{c.max_error:.4g} {unit}{pct}"


def _u(c: Candidate, lo: float, hi: float, unit: str) -> str:
    u = c.u_span(lo, hi)
    return f"{u:.3g} {unit}" if u > 0 else "not known"


def _loo(c: Candidate, unit: str) -> str:
    return "-" if c.loo_rms is None else f"{c.loo_rms:.3g} {unit}"


def _chi2(c: Candidate) -> str:
    """The fit's chi-squared against its limit, and the Birge ratio when it scaled the uncertainty."""
    if c.fit is None or c.fit.chi2 is None:
        return "-"
    if c.chi2_limit is None:
        return "no scatter to judge"
    scaled = f", x{c.birge:.3g}" if c.birge is not None and c.birge > 1 else ""
    return f"{c.fit.chi2:.3g} / {c.fit.dof} ({c.chi2_limit:.3g}){scaled}"
