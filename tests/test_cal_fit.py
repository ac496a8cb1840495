"""Calibration curve fitting against published worked examples and certified reference data."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from logger.cal.fit import fit_polynomial, piecewise


def test_gum_annex_h3_thermometer_calibration() -> None:
    # JCGM 100:2008 (GUM), annex H.3, table H.6: eleven thermometer readings t_k and their corrections b_k,
    # fitted as b(t) = y1 + y2 (t - t0) with t0 = 20 degC (data and results typed in from memory; the fit
    # reproducing every published figure below is the check on the typing).
    t = np.array([21.521, 22.012, 22.512, 23.003, 23.507, 23.999, 24.513, 25.002, 25.503, 26.010, 26.511])
    b = np.array([-0.171, -0.169, -0.166, -0.159, -0.164, -0.165, -0.156, -0.157, -0.159, -0.161, -0.160])
    fit = fit_polynomial(t, b, 1, x0=20.0, xs=1.0)
    (y1, y2), cov = fit.curve.coefficients, np.array(fit.curve.covariance)
    u1, u2 = np.sqrt(np.diag(cov))
    assert y1 == pytest.approx(-0.1712, abs=5e-5) and u1 == pytest.approx(0.0029, abs=5e-5)  # GUM H.3.3
    assert y2 == pytest.approx(0.00218, abs=5e-6) and u2 == pytest.approx(0.00067, abs=5e-6)  # GUM H.3.3
    assert cov[0, 1] / (u1 * u2) == pytest.approx(-0.930, abs=5e-4)  # GUM H.3.3, r(y1, y2)
    assert fit.s == pytest.approx(0.0035, abs=5e-5) and fit.dof == 9  # GUM H.3.3
    assert fit.curve.value(30.0) == pytest.approx(-0.1494, abs=5e-5)  # GUM H.3.4, b(30 degC)
    assert fit.curve.uncertainty(30.0)[0] == pytest.approx(0.0041, abs=5e-5)  # GUM H.3.4, u(b(30 degC))


def test_iso_ts_28037_example_1_weighted_line_with_known_uncertainties() -> None:
    # ISO/TS 28037:2010, weighted least squares with known y uncertainties, example 1 (values as given in
    # the issue, which quotes the standard).
    x = np.arange(1.0, 7.0)
    y = np.array([3.3, 5.6, 7.1, 9.3, 10.7, 12.1])
    fit = fit_polynomial(x, y, 1, u_y=0.5, x0=0.0, xs=1.0)
    (a, b), cov = fit.curve.coefficients, np.array(fit.curve.covariance)
    assert a == pytest.approx(1.867, abs=5e-4) and np.sqrt(cov[0, 0]) == pytest.approx(0.465, abs=5e-4)
    assert b == pytest.approx(1.757, abs=5e-4) and np.sqrt(cov[1, 1]) == pytest.approx(0.120, abs=5e-4)
    assert cov[0, 1] == pytest.approx(-0.050, abs=5e-4)
    assert fit.chi2 == pytest.approx(1.665, abs=5e-4) and fit.s is None


def _norris() -> tuple[np.ndarray, np.ndarray, dict[str, float]]:
    """NIST StRD "Norris" data and its certified values, read from the copy the scipy wheel ships."""
    scipy = pytest.importorskip("scipy")
    path = Path(scipy.__file__).parent / "stats/tests/data/nist_linregress/Norris.dat"
    if not path.exists():
        pytest.skip(f"{path} is not in this scipy wheel")
    lines = path.read_text().splitlines()
    certified = {}
    for line in lines[30:46]:
        words = line.split()
        if words[:1] in (["B0"], ["B1"]):
            certified[words[0]], certified[f"sd_{words[0]}"] = float(words[1]), float(words[2])
        elif words[:2] == ["Standard", "Deviation"]:
            certified["s"] = float(words[2])
    data = np.array([[float(v) for v in line.split()] for line in lines[60:96]])
    return data[:, 1], data[:, 0], certified  # the file lists y, then x


def test_nist_strd_norris_certified_values() -> None:
    # NIST Statistical Reference Datasets, linear regression, "Norris": certified to 15 digits.
    x, y, cert = _norris()
    fit = fit_polynomial(x, y, 1, x0=0.0, xs=1.0)
    (b0, b1), cov = fit.curve.coefficients, np.array(fit.curve.covariance)
    assert b0 == pytest.approx(cert["B0"], rel=1e-9) and b1 == pytest.approx(cert["B1"], rel=1e-9)
    assert np.sqrt(cov[0, 0]) == pytest.approx(cert["sd_B0"], rel=1e-9)
    assert np.sqrt(cov[1, 1]) == pytest.approx(cert["sd_B1"], rel=1e-9)
    assert fit.s == pytest.approx(cert["s"], rel=1e-9)


def test_quadratic_matches_numpy_polyfit_on_adc_like_counts() -> None:
    # Reference: numpy.polynomial.polynomial.polyfit on the same points (a general-purpose library).
    rng = np.random.default_rng(3)
    counts = np.array([120.0, 900.0, 1800.0, 2700.0, 3500.0, 4000.0])
    volts = 0.0081 * counts + 2.1e-7 * counts**2 - 0.05 + rng.normal(0, 0.002, len(counts))
    fit = fit_polynomial(counts, volts, 2)
    reference = np.polynomial.polynomial.polyfit(counts, volts, 2)
    probe = np.linspace(0, 4095, 9)
    assert fit.curve.value(probe) == pytest.approx(np.polynomial.polynomial.polyval(probe, reference), abs=1e-9)
    assert fit.dof == 3 and fit.s is not None


def test_piecewise_is_exact_at_the_points_and_extends_the_end_segments() -> None:
    # Linear interpolation and extrapolation: common practice, no source.
    curve = piecewise(np.array([300.0, 100.0, 200.0]), np.array([3.0, 1.0, 2.5]), np.array([0.01, 0.01, 0.02]))
    assert curve.value(np.array([100.0, 150.0, 200.0, 250.0, 300.0])) == pytest.approx([1.0, 1.75, 2.5, 2.75, 3.0])
    assert curve.value(np.array([0.0, 400.0])) == pytest.approx([-0.5, 3.5])
    assert curve.uncertainty(150.0)[0] == pytest.approx(0.015)


def test_too_few_or_degenerate_points_are_refused() -> None:
    with pytest.raises(ValueError, match="at least 3 points"):
        fit_polynomial(np.array([1.0, 2.0]), np.array([1.0, 2.0]), 2)
    with pytest.raises(ValueError, match="same raw reading"):
        fit_polynomial(np.array([5.0, 5.0, 5.0]), np.array([1.0, 2.0, 3.0]), 1)
