"""Aero-map fitting kernel (postproc.kernels.mapfit) and peak/stall along a
rake line (postproc.kernels.peakstall)."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from postproc.kernels.mapfit import MapOptions, fit_map
from postproc.kernels.peakstall import find_peak
from postproc.kernels.terms import FitStatus, SensitivityKind

A, B, C, D = -1.5, 20.0, -8.0, -300.0


def _analytic(hf, hr):
    return A + B * hf + C * hr + D * hf**2


def _grid(fronts, rears):
    hf, hr = np.meshgrid(fronts, rears)
    return hf.ravel(), hr.ravel()


def test_analytic_map_recovered_with_exact_derivatives():
    # A polynomial inside the model's span is reproduced by least squares to
    # round-off (linear algebra; no outside source needed): value and the
    # analytic derivatives ∂/∂h_f = B + 2 D h_f, ∂/∂h_r = C.
    hf, hr = _grid([0.02, 0.03, 0.04, 0.05], [0.03, 0.04, 0.05, 0.06])
    fit = fit_map(hf, hr, _analytic(hf, hr))
    assert fit.ok and fit.model == "poly2"        # the simplest exact model wins the LOO tie with poly3
    assert fit.loo_rms < 1e-12
    for q in ((0.033, 0.047), (0.021, 0.059)):
        s = fit.sensitivity(*q)
        assert s["kind"] == SensitivityKind.PARTIAL
        assert s["d_dh_front"] == pytest.approx(B + 2 * D * q[0], abs=1e-9)
        assert s["d_dh_rear"] == pytest.approx(C, abs=1e-9)
        assert float(fit(*q)) == pytest.approx(_analytic(*q), abs=1e-12)
    assert not fit.extrapolated(0.03, 0.04) and fit.extrapolated(0.06, 0.04)


def test_saturated_design_refused_with_the_reason():
    # 3 x 2 factorial = 6 points: a quadratic has 6 terms (saturated: zero
    # residual, R² = 1 whatever the data); it needs 6 + 3 points.
    hf, hr = _grid([0.02, 0.03, 0.04], [0.03, 0.05])
    fit = fit_map(hf, hr, _analytic(hf, hr))
    poly2 = next(c for c in fit.candidates if c.model == "poly2")
    assert poly2.status is FitStatus.REFUSED and "saturated" in poly2.reason and "at least 9" in poly2.reason
    assert fit.ok and fit.model == "poly1"          # a plane still fits, with 3 residual degrees of freedom
    # 3 points cannot carry even a plane: the whole map is refused, saying why
    tiny = fit_map([0.02, 0.03, 0.02], [0.03, 0.03, 0.04], [1.0, 2.0, 3.0])
    assert tiny.status is FitStatus.REFUSED and "3 points for 3 terms" in tiny.reason
    one = fit_map([0.02], [0.03], [1.0])
    assert one.status is FitStatus.REFUSED and "single operating point" in one.reason


def test_rank_deficient_design_refused():
    # two levels of h_f and of h_r (a 2 x 2 factorial repeated on a second
    # rake pair) cannot identify h_f² — the quadratic column is a copy of the
    # constant on ±1 levels (design of experiments, Montgomery 2013 ch. 6)
    hf = np.array([0.02, 0.04, 0.02, 0.04, 0.02, 0.04, 0.02, 0.04, 0.02, 0.04])
    hr = np.array([0.03, 0.03, 0.05, 0.05, 0.03, 0.03, 0.05, 0.05, 0.03, 0.05]) + np.arange(10) * 1e-4
    fit = fit_map(hf, hr, 1.0 + 10 * hf - 5 * hr, MapOptions(max_degree=2, smooth=False))
    poly2 = next(c for c in fit.candidates if c.model == "poly2")
    assert poly2.status is FitStatus.REFUSED and "rank" in poly2.reason


def test_single_rake_line_gives_only_the_along_line_derivative():
    # one pitch: h_r = h_f + 15 mm. The slope along the line is known, the
    # front/rear split is not (the design spans one direction).
    h = np.arange(0.010, 0.0501, 0.005)
    y = 1.0 - 30.0 * h + 200.0 * h**2
    fit = fit_map(h, h + 0.015, y)
    s = fit.sensitivity(0.03, 0.045)
    assert s["kind"] == SensitivityKind.ALONG_LINE
    assert "d_dh_front" not in s and "d_dh_rear" not in s
    np.testing.assert_allclose(s["direction"], [2**-0.5, 2**-0.5], atol=1e-12)
    # d/ds along the unit direction (1, 1)/√2 of y(h_f): dy/dh_f / √2
    assert s["d_ds"] == pytest.approx((-30.0 + 400.0 * 0.03) / np.sqrt(2), rel=1e-9)
    assert fit.extrapolated(0.03, 0.03)            # off the line
    assert not fit.extrapolated(0.03, 0.045)


def test_loo_and_prediction_interval_match_the_textbook_line():
    # Straight-line regression: the leave-one-out residual equals a refit
    # without the point, and the prediction interval is
    # t·s·√(1 + 1/n + (x0 − x̄)²/Sxx) (Montgomery, Peck & Vining 2012,
    # Introduction to Linear Regression Analysis, eq. 2.45).
    rng = np.random.default_rng(7)
    h = np.linspace(0.01, 0.05, 9)
    y = 0.8 - 12.0 * h + rng.normal(0, 0.01, h.size)
    fit = fit_map(h, h + 0.01, y, MapOptions(max_degree=1, smooth=False))
    assert fit.model == "poly1"
    brute = []
    for i in range(h.size):
        k = np.arange(h.size) != i
        p = np.polyfit(h[k], y[k], 1)
        brute.append(y[i] - np.polyval(p, h[i]))
    assert fit.loo_rms == pytest.approx(np.sqrt(np.mean(np.square(brute))), rel=1e-9)
    p = np.polyfit(h, y, 1)
    s = np.sqrt(np.sum((y - np.polyval(p, h)) ** 2) / (h.size - 2))
    x0 = 0.037
    half = stats.t.ppf(0.975, h.size - 2) * s * np.sqrt(1 + 1 / h.size + (x0 - h.mean()) ** 2 / np.sum((h - h.mean()) ** 2))
    assert float(fit.interval(x0, x0 + 0.01)) == pytest.approx(half, rel=1e-9)


def test_smooth_candidate_chosen_only_by_leave_one_out():
    # A map with a kinked ridge (no low-order polynomial shape), 8 x 8 points:
    # the chosen model is the one with the smallest LOO error (within 5 %,
    # simpler first), whichever it is.
    hf, hr = _grid(np.linspace(0.01, 0.05, 8), np.linspace(0.02, 0.06, 8))
    y = -1.0 - np.abs(hf - 0.027) * 20 + 3 * hr
    fit = fit_map(hf, hr, y)
    ok = [c for c in fit.candidates if c.status is FitStatus.OK]
    assert {c.model for c in ok} >= {"poly1", "poly2", "poly3", "tps"}
    assert fit.loo_rms <= 1.05 * min(c.loo_rms for c in ok) + 1e-12
    assert fit.model == "tps"   # the kink defeats every polynomial here


# --------------------------------------------------------------------------- peak and stall

def _curve(h, h0=0.022):
    """A smooth single-peaked curve with its maximum 1.0 at h0: (h/h0)·e^(1 − h/h0)."""
    return (h / h0) * np.exp(1.0 - h / h0)


def test_peak_at_22_mm_found_within_2_mm_and_stall_reported():
    # Known maximum at 22 mm, sampled every 4 mm from 10 to 50 mm (a constructed
    # curve; the ±2 mm tolerance is half the sample spacing).
    h = np.arange(0.010, 0.0501, 0.004)
    r = find_peak(h, 1.4 * _curve(h), design_h=0.030)
    assert r.stall and r.peak_bracketed
    assert r.peak_h == pytest.approx(0.022, abs=0.002)
    assert r.peak_bracket[0] <= 0.022 <= r.peak_bracket[1]
    assert r.distance_past_peak == pytest.approx(r.peak_h - 0.010)
    assert r.loss_at_lowest == pytest.approx(1 - _curve(0.010) / _curve(r.peak_h), abs=0.01)
    assert r.margin == pytest.approx(0.030 - r.peak_h) and r.margin_bound == "exact"
    # shifting the samples keeps the estimate within 2 mm
    for off in (0.001, 0.002, 0.003):
        assert find_peak(h + off, _curve(h + off)).peak_h == pytest.approx(0.022, abs=0.002)


def test_monotonic_curve_is_not_bracketed_and_not_stalled():
    h = np.arange(0.010, 0.0501, 0.004)
    r = find_peak(h, 1.5 - 10.0 * h, design_h=0.03)
    assert not r.stall and not r.peak_bracketed and r.peak_h is None
    assert "below" in r.note
    assert r.margin == pytest.approx(0.02) and r.margin_bound == "at-least"


def test_whole_range_past_the_peak_and_noise():
    h = np.arange(0.010, 0.0501, 0.004)
    up = find_peak(h, 0.5 + 10.0 * h, design_h=0.03)
    assert up.stall and not up.peak_bracketed and up.distance_is_bound and up.margin_bound == "at-most"
    # a dip smaller than the noise is not a stall
    y = 1.5 - 1.0 * h            # 0.004 per step
    y[0] -= 0.01                 # the lowest point dips 0.006 below its neighbour
    assert find_peak(h, y, noise=0.02).stall is False
    assert find_peak(h, y, noise=0.0).stall is True
    few = find_peak([0.02, 0.03], [1.0, 1.1])
    assert not few.assessed and "fewer than 3" in few.note
