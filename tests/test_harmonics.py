"""Tests for geothermmap.physics.harmonics.

Truth comes from outside the module: exact integrals of sinusoids (mathematical
identities), scipy.integrate.quad, and scipy.linalg.lstsq as an independent solver.
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, linalg

from geothermmap.physics.harmonics import (
    MONTH_EDGES_DAYS,
    MONTH_MID_DAYS,
    OMEGA_RAD_DAY,
    YEAR_DAYS,
    HarmonicFit,
    amplitude,
    fit_harmonics,
    monthly_basis_averages,
    monthly_means_of_sinusoid,
    peak_day,
)

# Exact-arithmetic checks: the fit of exact monthly averages reproduces the sinusoid up to
# rounding; 1e-10 leaves ~1e4 ulps of room for the 12-term sums and the pseudo-inverse.
EXACT_TOL = 1e-10


def _circular_diff(a, b, period):
    """Signed difference a - b wrapped to [-period/2, period/2)."""
    return (np.asarray(a) - np.asarray(b) + 0.5 * period) % period - 0.5 * period


# --- month boundaries ------------------------------------------------------------------


def test_month_edges_are_calendar_months_scaled_to_365_25_days():
    # Gregorian calendar, common year: 31 28 31 30 31 30 31 31 30 31 30 31 days
    calendar = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float)
    assert MONTH_EDGES_DAYS.shape == (13,)
    assert MONTH_MID_DAYS.shape == (12,)
    assert MONTH_EDGES_DAYS[0] == 0.0
    # scaling identity: 365 days * 365.25 / 365 = 365.25 days (rounding only)
    assert MONTH_EDGES_DAYS[-1] == pytest.approx(YEAR_DAYS, abs=1e-12)
    np.testing.assert_allclose(np.diff(MONTH_EDGES_DAYS), calendar * 365.25 / 365.0, rtol=1e-14)
    # hand arithmetic: mid-January = 15.5 * 365.25 / 365 = 15.510616... days
    assert MONTH_MID_DAYS[0] == pytest.approx(15.5 * 365.25 / 365.0, rel=1e-14)


# --- design matrix against scipy quadrature --------------------------------------------


@pytest.mark.parametrize("n_harmonics", [1, 2, 3])
def test_basis_averages_match_scipy_quad(n_harmonics):
    # Independent computation: scipy.integrate.quad of cos(n w t), sin(n w t) over each
    # month divided by its length. quad is accurate to ~1e-14 for these smooth integrands;
    # 1e-12 absolute allows for its error estimate.
    g = monthly_basis_averages(n_harmonics)
    assert g.shape == (12, 2 * n_harmonics + 1)
    for k in range(12):
        t0, t1 = MONTH_EDGES_DAYS[k], MONTH_EDGES_DAYS[k + 1]
        assert g[k, 0] == 1.0
        for n in range(1, n_harmonics + 1):
            c, _ = integrate.quad(lambda t, n=n: np.cos(n * OMEGA_RAD_DAY * t), t0, t1)
            s, _ = integrate.quad(lambda t, n=n: np.sin(n * OMEGA_RAD_DAY * t), t0, t1)
            assert g[k, n] == pytest.approx(c / (t1 - t0), abs=1e-12)
            assert g[k, n_harmonics + n] == pytest.approx(s / (t1 - t0), abs=1e-12)


@pytest.mark.parametrize("harmonic", [1, 2, 3])
def test_monthly_means_of_sinusoid_match_scipy_quad(harmonic):
    # Independent computation with scipy.integrate.quad; tolerance as above.
    mean, amp, peak = 7.5, 11.0, 203.0
    got = monthly_means_of_sinusoid(mean, amp, peak, harmonic=harmonic)
    assert got.shape == (12,)
    nw = harmonic * OMEGA_RAD_DAY
    for k in range(12):
        t0, t1 = MONTH_EDGES_DAYS[k], MONTH_EDGES_DAYS[k + 1]
        val, _ = integrate.quad(lambda t: mean + amp * np.cos(nw * (t - peak)), t0, t1)
        assert got[k] == pytest.approx(val / (t1 - t0), abs=1e-12)


# --- exact recovery -----------------------------------------------------------------


@pytest.mark.parametrize("n_harmonics", [1, 2, 3])
def test_fit_recovers_exact_annual_sinusoid(n_harmonics):
    # Mathematical identity: exact monthly averages of mean + A cos(w (t - t_peak)) lie in
    # the column space of the design matrix, so least squares returns them exactly.
    mean, amp, peak = 9.0, 12.5, 201.3
    fit = fit_harmonics(monthly_means_of_sinusoid(mean, amp, peak), n_harmonics)
    assert isinstance(fit, HarmonicFit)
    assert fit.n_harmonics == n_harmonics
    assert fit.mean == pytest.approx(mean, abs=EXACT_TOL)
    assert amplitude(fit)[0] == pytest.approx(amp, abs=EXACT_TOL)
    assert peak_day(fit)[0] == pytest.approx(peak, abs=EXACT_TOL)
    np.testing.assert_allclose(amplitude(fit)[1:], 0.0, atol=EXACT_TOL)


def test_fit_recovers_three_exact_harmonics_on_a_map():
    # Mathematical identity (as above), summed over three harmonics, on a 2-D map of cells.
    rng = np.random.default_rng(42)
    shape = (4, 5)
    mean = rng.uniform(-10, 25, shape)
    amps = [rng.uniform(0.5, 20, shape), rng.uniform(0.1, 4, shape), rng.uniform(0.1, 2, shape)]
    peaks = [rng.uniform(0, YEAR_DAYS / n, shape) for n in (1, 2, 3)]
    monthly = monthly_means_of_sinusoid(mean, amps[0], peaks[0], harmonic=1)
    for n in (2, 3):
        monthly = monthly + monthly_means_of_sinusoid(0.0, amps[n - 1], peaks[n - 1], harmonic=n)
    fit = fit_harmonics(monthly, 3)
    assert fit.mean.shape == shape
    assert fit.cos_coef.shape == (3,) + shape
    np.testing.assert_allclose(fit.mean, mean, atol=EXACT_TOL)
    for n in (1, 2, 3):
        np.testing.assert_allclose(fit.amplitude[n - 1], amps[n - 1], atol=EXACT_TOL)
        period = YEAR_DAYS / n
        # the peak of harmonic n is defined modulo its period
        np.testing.assert_allclose(
            _circular_diff(fit.peak_day[n - 1], peaks[n - 1], period), 0.0, atol=1e-8
        )


def test_averaging_correction_is_the_sinc_factor():
    # Mathematical identity: the average of cos over a window of length L centred on the
    # peak is sin(x)/x with x = w L / 2. For a twelfth of a year x = pi / 12 and
    # sin(pi/12) = (sqrt 6 - sqrt 2) / 4, so the annual harmonic keeps 3 (sqrt 6 - sqrt 2) / pi
    # = 0.98862 of its amplitude, and sampling mid-month values and fitting them as
    # point values would under-estimate the amplitude by ~1.1 %. Equal-month comparison:
    # Epstein (1991, J. Climate 4, 365-368) uses the same factor.
    length = YEAR_DAYS / 12
    x = OMEGA_RAD_DAY * length / 2
    sinc = np.sin(x) / x
    assert sinc == pytest.approx(3 * (np.sqrt(6) - np.sqrt(2)) / np.pi, rel=1e-14)
    assert sinc == pytest.approx(0.98862, abs=5e-6)
    monthly = monthly_means_of_sinusoid(0.0, 10.0, 180.0)
    naive = np.linalg.lstsq(
        np.column_stack(
            [
                np.ones(12),
                np.cos(OMEGA_RAD_DAY * MONTH_MID_DAYS),
                np.sin(OMEGA_RAD_DAY * MONTH_MID_DAYS),
            ]
        ),
        monthly,
        rcond=None,
    )[0]
    naive_amp = np.hypot(naive[1], naive[2])
    # unequal months make the ratio differ slightly from the equal-month sinc: 0.1 %
    assert naive_amp / 10.0 == pytest.approx(sinc, rel=1e-3)
    assert amplitude(fit_harmonics(monthly, 1))[0] == pytest.approx(10.0, abs=EXACT_TOL)


@settings(max_examples=50, deadline=None)
@given(
    mean=st.floats(-30, 35),
    amp=st.floats(0.01, 30),
    peak=st.floats(0, YEAR_DAYS, exclude_max=True),
)
def test_fit_recovers_random_sinusoids(mean, amp, peak):
    # Mathematical identity as above; tolerance scales with the magnitudes involved.
    fit = fit_harmonics(monthly_means_of_sinusoid(mean, amp, peak), 2)
    tol = EXACT_TOL * (1 + abs(mean) + amp)
    assert fit.mean == pytest.approx(mean, abs=tol)
    assert amplitude(fit)[0] == pytest.approx(amp, abs=tol)
    # phase error ~ coefficient error / amplitude, in days
    assert _circular_diff(peak_day(fit)[0], peak, YEAR_DAYS) == pytest.approx(
        0.0, abs=tol / amp / OMEGA_RAD_DAY
    )


# --- least squares against an independent solver -------------------------------------


@pytest.mark.parametrize("n_harmonics", [1, 2, 3, 4, 5])
def test_fit_equals_scipy_lstsq_on_noisy_data(n_harmonics):
    # Independent computation: scipy.linalg.lstsq on the design matrix, cell by cell, with
    # the design matrix rebuilt here from the exact integrals (not from the module).
    rng = np.random.default_rng(7)
    monthly = rng.normal(10, 8, (12, 6))
    t0, t1 = MONTH_EDGES_DAYS[:-1], MONTH_EDGES_DAYS[1:]
    cols_c, cols_s = [], []
    for n in range(1, n_harmonics + 1):
        nw = n * 2 * np.pi / 365.25
        cols_c.append((np.sin(nw * t1) - np.sin(nw * t0)) / (nw * (t1 - t0)))
        cols_s.append((np.cos(nw * t0) - np.cos(nw * t1)) / (nw * (t1 - t0)))
    g = np.column_stack([np.ones(12)] + cols_c + cols_s)
    fit = fit_harmonics(monthly, n_harmonics)
    for i in range(monthly.shape[1]):
        coef = linalg.lstsq(g, monthly[:, i])[0]
        # agreement to rounding of two different solvers; H = 5 is worse conditioned
        np.testing.assert_allclose(fit.mean[i], coef[0], atol=1e-9)
        np.testing.assert_allclose(fit.cos_coef[:, i], coef[1 : n_harmonics + 1], atol=1e-9)
        np.testing.assert_allclose(fit.sin_coef[:, i], coef[n_harmonics + 1 :], atol=1e-9)


# --- conventions, shapes, NaN, validation ---------------------------------------------


def test_peak_day_range_and_convention():
    # T = 10 cos(w t) peaks at t = 0; T = -10 cos(w t) at half a year (identity)
    fit = HarmonicFit(
        mean=np.array([0.0, 0.0, 0.0]),
        cos_coef=np.array([[10.0, -10.0, 0.0]]),
        sin_coef=np.array([[0.0, 0.0, -1e-300]]),
    )
    pk = peak_day(fit)
    assert pk[0, 0] == 0.0
    assert pk[0, 1] == pytest.approx(YEAR_DAYS / 2, abs=1e-12)
    assert 0.0 <= pk[0, 2] < YEAR_DAYS  # tiny negative angle must not round to 365.25
    # harmonic 2 peaks within [0, 365.25 / 2)
    rng = np.random.default_rng(1)
    fit2 = fit_harmonics(rng.normal(0, 5, (12, 500)), 3)
    pk2 = peak_day(fit2)
    for n in (1, 2, 3):
        assert np.all((pk2[n - 1] >= 0) & (pk2[n - 1] < YEAR_DAYS / n))


def test_nan_in_any_month_gives_nan_coefficients_for_that_cell_only():
    monthly = monthly_means_of_sinusoid(np.array([5.0, 6.0, 7.0]), 10.0, 200.0)
    monthly[3, 1] = np.nan
    fit = fit_harmonics(monthly, 2)
    assert np.isnan(fit.mean[1])
    assert np.all(np.isnan(fit.cos_coef[:, 1])) and np.all(np.isnan(fit.sin_coef[:, 1]))
    assert np.all(np.isfinite(fit.mean[[0, 2]]))
    assert np.all(np.isfinite(fit.cos_coef[:, [0, 2]]))


def test_float64_output_from_float32_input():
    monthly = monthly_means_of_sinusoid(5.0, 10.0, 200.0).astype(np.float32)
    fit = fit_harmonics(monthly, 2)
    assert fit.mean.dtype == np.float64 and fit.cos_coef.dtype == np.float64
    # float32 input rounding (~1e-6 relative of 15 K) limits agreement
    assert amplitude(fit)[0] == pytest.approx(10.0, abs=1e-5)


@pytest.mark.parametrize("bad", [0, 6, -1, 2.5, True])
def test_invalid_n_harmonics_raises(bad):
    with pytest.raises(ValueError):
        fit_harmonics(np.zeros(12), bad)


def test_wrong_number_of_months_raises():
    with pytest.raises(ValueError):
        fit_harmonics(np.zeros((11, 3)))
    with pytest.raises(ValueError):
        fit_harmonics(5.0)


def test_trailing_shapes_and_list_input():
    monthly = monthly_means_of_sinusoid(np.arange(6.0).reshape(2, 3), 8.0, 190.0)
    fit_map = fit_harmonics(monthly, 2)
    fit_list = fit_harmonics(monthly[:, 1, 2].tolist(), 2)
    assert fit_map.mean.shape == (2, 3)
    assert fit_list.mean.shape == ()
    # point equals map cell: same linear map, same result to rounding
    assert fit_list.mean == pytest.approx(fit_map.mean[1, 2], abs=1e-12)
    np.testing.assert_allclose(fit_list.cos_coef, fit_map.cos_coef[:, 1, 2], atol=1e-12)


def test_dask_input_stays_lazy_and_chunked_equals_unchunked():
    rng = np.random.default_rng(3)
    monthly = rng.normal(10, 6, (12, 8, 10))
    ref = fit_harmonics(monthly, 2)
    lazy = fit_harmonics(da.from_array(monthly, chunks=(12, 3, 4)), 2)
    assert isinstance(lazy.mean, da.Array)
    # same pseudo-inverse, same sums: agreement to rounding
    np.testing.assert_allclose(lazy.mean.compute(), ref.mean, atol=1e-12)
    np.testing.assert_allclose(lazy.cos_coef.compute(), ref.cos_coef, atol=1e-12)
    np.testing.assert_allclose(lazy.sin_coef.compute(), ref.sin_coef, atol=1e-12)


def test_invalid_harmonic_for_sinusoid_raises():
    with pytest.raises(ValueError):
        monthly_means_of_sinusoid(0.0, 1.0, 0.0, harmonic=0)
