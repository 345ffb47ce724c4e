"""Tests of the closed-form frost estimates, indices and classes (physics.frost).

Sources are named beside each check. Hand computations are written out in the
comments so that each number can be checked on paper.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad
from scipy.optimize import brentq
from scipy.special import erf, erfc

from geothermmap.physics import frost as fr
from geothermmap.physics.freezethaw import MONTH_DAYS_365, daily_forcing_from_monthly

L_WATER = 1000.0 * 3.34e5  # J m-3 per unit water content (rho_w L_f, common practice values)


# ------------------------------------------------------------ freezing index


def test_freezing_index_of_constructed_winters():
    # Winter 1: 100 days at -10 degC, the rest +5: F = 100 * 10 = 1000 degC d,
    # 100 freezing days. Winter 2: 31 days at -2 and 31 at -4: F = 186, 62 days.
    t = np.full((730, 1), 5.0)
    t[150:250] = -10.0
    t[365 + 150 : 365 + 181] = -2.0
    t[365 + 181 : 365 + 212] = -4.0
    fi, days = fr.freezing_index_per_winter(t)
    assert fi.shape == (2, 1)
    np.testing.assert_allclose(fi[:, 0], [1000.0, 186.0])
    np.testing.assert_allclose(days[:, 0], [100.0, 62.0])
    # a step length other than 1 d scales both (degree-days, days)
    fi2, days2 = fr.freezing_index_per_winter(t, 365, 365.25 / 365)
    np.testing.assert_allclose(fi2, fi * 365.25 / 365)
    np.testing.assert_allclose(days2, days * 365.25 / 365)
    with pytest.raises(ValueError):
        fr.freezing_index_per_winter(t[:400])


def test_freezing_index_from_monthly_means_of_a_sinusoid():
    # Independent computation: F of T(t) = m - A cos(w t), integrated with scipy
    # quad; the input is the exact monthly means of that curve, turned into days
    # with the mean-preserving interpolation of physics.freezethaw.
    m, a = 2.0, 12.0
    w = 2 * np.pi / 365.0

    def temp(t):
        return m - a * np.cos(w * t)

    edges = np.concatenate([[0], np.cumsum(MONTH_DAYS_365)])
    monthly = np.array(
        [quad(temp, lo, hi)[0] / (hi - lo) for lo, hi in zip(edges[:-1], edges[1:], strict=True)]
    )
    exact = quad(lambda t: max(0.0, -temp(t)), 0, 365, limit=200)[0]
    daily = daily_forcing_from_monthly(monthly[:, None])
    fi, _ = fr.freezing_index_per_winter(daily)
    # 2 %: the piecewise-linear daily curve rounds the peak of the winter
    assert fi[0, 0] == pytest.approx(exact, rel=0.02)
    # monthly means times month lengths (the cruder practice) underestimates F
    crude = np.sum(np.maximum(-monthly, 0.0) * MONTH_DAYS_365)
    assert crude < fi[0, 0]


def test_design_freezing_index():
    # USACE practice (UFC 3-130-01 / TM 5-852-6, from memory): mean of the
    # three coldest winters. Record: 10 winters, coldest 900, 850, 800 -> 850.
    winters = np.array([300, 900, 450, 500, 850, 620, 800, 100, 700, 640], dtype=float)
    design, used = fr.design_freezing_index(winters)
    assert design == pytest.approx(850.0)
    np.testing.assert_array_equal(np.flatnonzero(used), [1, 4, 6])
    # vectorised over cells
    grid = np.stack([winters, winters[::-1] * 0.5], axis=1)
    design2, used2 = fr.design_freezing_index(grid)
    np.testing.assert_allclose(design2, [850.0, 425.0])
    assert used2.sum(axis=0).tolist() == [3, 3]
    # documented short-record behaviour: fewer winters than n_coldest -> all averaged
    assert fr.design_freezing_index(np.array([300.0, 420.0]))[0] == pytest.approx(360.0)


# ------------------------------------------------------------------ n-factors


def test_ground_surface_harmonics_against_quadrature():
    # Independent check with scipy.integrate.quad: for T_a = mu + A cos(w t) the
    # ground-surface mean is (1/P) int n(T_a) T_a dt (Lunardini 1978 definition of
    # n-factors on the degree-day integrals) and the annual cosine coefficient is
    # (2/P) int n(T_a) T_a cos(w t) dt. Tolerance 0.01 K: 365 midpoint samples of a cycle
    # with a kink at 0 degC (the quadrature itself is exact to 1e-10).
    from scipy.integrate import quad

    from geothermmap.physics.harmonics import HarmonicFit

    period = 365.25
    w = 2 * np.pi / period
    mu = np.array([-3.0, 2.0, 6.0, 15.0])
    amp = np.array([12.0, 10.0, 4.0, 8.0])
    n_f, n_t = 0.5, 1.3
    air = HarmonicFit(mu, np.vstack([amp, 0.3 * amp]), np.zeros((2, 4)))
    got = fr.ground_surface_harmonics(air, n_f, n_t, cells_per_pass=3)  # two passes
    for i in range(4):
        def ground(t, i=i):
            ta = mu[i] + amp[i] * np.cos(w * t) + 0.3 * amp[i] * np.cos(2 * w * t)
            return (n_f if ta < 0 else n_t) * ta
        mean = quad(ground, 0, period, limit=200)[0] / period
        a1 = 2 * quad(lambda t, i=i: ground(t) * np.cos(w * t), 0, period, limit=200)[0] / period
        assert got.mean[i] == pytest.approx(mean, abs=0.01)
        assert got.cos_coef[0, i] == pytest.approx(a1, abs=0.01)
        assert abs(got.sin_coef[0, i]) < 1e-9  # an even cycle stays even
    # one factor for both seasons scales the whole cycle exactly
    same = fr.ground_surface_harmonics(air, 0.8, 0.8)
    np.testing.assert_allclose(same.mean, 0.8 * mu, rtol=1e-12)
    np.testing.assert_allclose(same.cos_coef, 0.8 * air.cos_coef, rtol=1e-9, atol=1e-12)


def test_n_factor_conversion():
    air = np.array([-10.0, -1.0, 0.0, 4.0, 20.0])
    # Lunardini (1978): T_s = n_f T_a below 0, n_t T_a above
    np.testing.assert_allclose(
        fr.surface_temperature_n_factor(air, 0.5, 1.8), [-5.0, -0.5, 0.0, 7.2, 36.0]
    )
    # so the surface freezing index of a daily series is n_f times the air index
    rng = np.random.default_rng(1)
    t_air = rng.normal(2.0, 9.0, (365, 4))
    t_s = fr.surface_temperature_n_factor(t_air)  # recipe defaults 0.7 / 1.4
    np.testing.assert_allclose(
        fr.freezing_index_per_winter(t_s)[0], 0.7 * fr.freezing_index_per_winter(t_air)[0]
    )
    # TM 5-852-4 / AFM 88-19 Chap. 4, Table 4-1 (reproduced in UFC 3-130-04): the recipe
    # defaults are its bare-soil row, and a few rows as printed there
    assert fr.N_FACTORS["bare_soil"] == (0.7, 1.4)
    assert fr.N_FACTORS["turf"] == (0.5, 0.8)
    assert fr.N_FACTORS["portland_cement_concrete"] == (0.75, 1.5)
    for n_f, n_t in fr.N_FACTORS.values():  # table rows are physical ratios
        assert 0.0 < n_f <= 1.0 and (np.isnan(n_t) or 0.0 < n_t <= 2.5)


# ----------------------------------------------------------- Stefan, Berggren


def test_stefan_arithmetic():
    # X = sqrt(2 k F / L): k = 2, F = 1000 degC d = 8.64e7 degC s,
    # L = 0.2 * 1000 * 3.34e5 = 6.68e7 J m-3 -> X = sqrt(3.456e8 / 6.68e7) = 2.2746 m
    assert fr.stefan_frost_depth(1000.0, 2.0, 0.2) == pytest.approx(2.27458, rel=1e-5)
    assert fr.stefan_frost_depth(0.0, 2.0, 0.2) == 0.0
    assert fr.latent_heat_volumetric(0.2) == pytest.approx(6.68e7)


def _lambda_independent(alpha, mu):
    """Aldrich & Paynter (1953) relation solved with brentq: equal-property
    Neumann problem (Carslaw & Jaeger 1959 Sec. 11.2), lambda = beta sqrt(2/mu)
    with exp(-b^2)/erf(b) - alpha exp(-b^2)/erfc(b) = sqrt(pi) b / mu."""

    def g(b):
        return np.exp(-b * b) / erf(b) - alpha * np.exp(-b * b) / erfc(b) - np.sqrt(np.pi) * b / mu

    beta = brentq(g, 1e-12, 6.0)
    return beta * np.sqrt(2.0 / mu)


def test_berggren_coefficient_against_independent_root_and_limits():
    alphas = np.array([0.0, 0.5, 1.0, 2.0, 4.0])
    mus = np.array([0.05, 0.2, 0.5, 1.0, 1.5])
    lam = fr.berggren_coefficient(alphas[:, None], mus[None, :])
    ref = np.array([[_lambda_independent(a, m) for m in mus] for a in alphas])
    np.testing.assert_allclose(lam, ref, rtol=1e-9)  # same equation, both roots to 1e-9
    # limit mu -> 0: lambda -> 1 (Stefan is exact without sensible heat)
    assert fr.berggren_coefficient(2.0, 1e-8) == pytest.approx(1.0, abs=1e-3)
    assert fr.berggren_coefficient(0.0, 1e-8) == pytest.approx(1.0, abs=1e-6)
    # alpha = 0 is the one-phase Neumann problem: lambda = beta sqrt(2/St) with
    # beta e^{beta^2} erf(beta) = St / sqrt(pi). Tabulated roots (Alexiades &
    # Solomon 1993, Mathematical Modeling of Melting and Freezing Processes,
    # table of the one-phase Stefan problem; from memory): St 0.1 -> 0.2200,
    # 0.5 -> 0.4648, 1.0 -> 0.6201.
    for st_, beta in [(0.1, 0.2200), (0.5, 0.4648), (1.0, 0.6201)]:
        # 1e-4 in beta: the table has four decimals
        assert fr.berggren_coefficient(0.0, st_) == pytest.approx(
            beta * np.sqrt(2.0 / st_), abs=1e-4 * np.sqrt(2.0 / st_)
        )


@settings(max_examples=40, deadline=None)
@given(
    a=st.floats(0.0, 5.0),
    da=st.floats(0.01, 2.0),
    m=st.floats(0.01, 2.0),
    dm=st.floats(0.01, 1.0),
)
def test_berggren_coefficient_decreases_with_alpha_and_mu(a, da, m, dm):
    # more sensible heat to remove (larger alpha or mu) -> smaller correction
    lam = fr.berggren_coefficient(a, m)
    assert 0.0 < lam <= 1.0
    assert fr.berggren_coefficient(a + da, m) < lam
    assert fr.berggren_coefficient(a, m + dm) < lam


def test_berggren_frost_depth_composition():
    f, mat, season = 800.0, 4.0, 110.0
    kf, ku, cf, cu, water = 2.2, 1.6, 1.9e6, 2.5e6, 0.25
    x = fr.berggren_frost_depth(f, season, mat, kf, ku, cf, cu, water)
    k, c = 0.5 * (kf + ku), 0.5 * (cf + cu)
    lat = water * L_WATER
    v_s = f / season  # Aldrich (1956): v_s = F / t, alpha = v_0 / v_s, mu = C v_s / L
    lam = _lambda_independent(mat / v_s, c * v_s / lat)
    assert x == pytest.approx(lam * np.sqrt(2 * k * f * 86400.0 / lat), rel=1e-8)
    assert x < fr.stefan_frost_depth(f, k, water)  # lambda < 1
    assert fr.berggren_frost_depth(0.0, 0.0, mat, kf, ku, cf, cu, water) == 0.0


@settings(max_examples=40, deadline=None)
@given(
    f=st.floats(10.0, 4000.0),
    df=st.floats(1.0, 1000.0),
    k=st.floats(0.5, 3.0),
    water=st.floats(0.02, 0.5),
    mat=st.floats(0.0, 15.0),
)
def test_closed_form_frost_depth_grows_with_freezing_index(f, df, k, water, mat):
    assert fr.stefan_frost_depth(f + df, k, water) > fr.stefan_frost_depth(f, k, water)
    # Berggren at fixed season length and mean annual temperature
    d1 = fr.berggren_frost_depth(f, 120.0, mat, k, k, 2e6, 2e6, water)
    d2 = fr.berggren_frost_depth(f + df, 120.0, mat, k, k, 2e6, 2e6, water)
    assert d2 > d1


# --------------------------------------------------------------- frost classes


def test_frost_class_codes_and_legend():
    depth = np.array([np.nan, 0.0, 0.49, 0.5, 1.2, 1.5, 1.99, 2.0, 7.0, 0.3])
    perennial = np.array([False] * 9 + [True])
    codes = fr.frost_class(depth, (0.5, 1.0, 1.5, 2.0), perennial)
    assert codes.dtype == np.uint8
    # documented codes: 0 nodata, 1 no frost, 2 (0, 0.5), 3 [0.5, 1), ..., 6 >= 2,
    # 7 frozen at depth
    np.testing.assert_array_equal(codes, [0, 1, 2, 3, 4, 5, 5, 6, 6, 7])
    legend = fr.frost_class_legend((0.5, 1.0, 1.5, 2.0))
    assert sorted(legend) == [1, 2, 3, 4, 5, 6, 7]
    colours = [legend[c][1] for c in sorted(legend)]
    assert all(len(c) == 7 and c.startswith("#") for c in colours)
    assert len(set(colours)) == len(colours)


# ------------------------------------------------ Neumann roots and further checks


@pytest.mark.parametrize(
    ("stefan", "xi"),
    # One-phase Stefan problem, root of xi exp(xi^2) erf(xi) = St / sqrt(pi): the classic
    # table (Carslaw & Jaeger 1959 Sec. 11.2; Alexiades & Solomon 1993 Table 2.1), values
    # from memory, confirmed below by an independent brentq root.
    [(0.1, 0.2200), (0.5, 0.4648), (1.0, 0.6201)],
)
def test_neumann_one_phase_table(stefan, xi):
    got = float(fr.neumann_front_coefficient(0.0, stefan))
    # table printed to 4 decimals
    assert got == pytest.approx(xi, abs=1e-4)
    ref = brentq(lambda x: x * np.exp(x * x) * erf(x) - stefan / np.sqrt(np.pi), 1e-6, 5.0)
    assert got == pytest.approx(ref, rel=1e-10)  # bisection to machine precision


@pytest.mark.parametrize("alpha", [0.2, 1.0, 3.0])
@pytest.mark.parametrize("mu", [0.05, 0.5, 2.0])
def test_neumann_two_phase_independent_root(alpha, mu):
    # Equal-property two-phase Neumann condition (Carslaw & Jaeger 1959 Sec. 11.2), root
    # by scipy brentq, written out here independently of the package
    def g(x):
        return np.exp(-x * x) * (1.0 / erf(x) - alpha / erfc(x)) - np.sqrt(np.pi) * x / mu

    ref = brentq(g, 1e-9, 6.0, xtol=1e-14)
    assert float(fr.neumann_front_coefficient(alpha, mu)) == pytest.approx(ref, rel=1e-9)


def test_berggren_equals_neumann_front():
    # For a step freezing season the modified Berggren depth is the equal-property Neumann
    # front 2 xi sqrt(a t) (Carslaw & Jaeger 1959 Sec. 11.2), independent root by brentq
    k, c, theta, t_days, vs, v0 = 1.6, 2.2e6, 0.25, 120.0, 8.0, 4.0
    lat = theta * L_WATER
    mu, alpha = c * vs / lat, v0 / vs

    def g(x):
        return np.exp(-x * x) * (1.0 / erf(x) - alpha / erfc(x)) - np.sqrt(np.pi) * x / mu

    xi = brentq(g, 1e-9, 6.0, xtol=1e-14)
    exact = 2.0 * xi * np.sqrt(k / c * t_days * 86400.0)
    got = fr.berggren_frost_depth(vs * t_days, t_days, v0, k, k, c, c, theta)
    assert float(got) == pytest.approx(exact, rel=1e-9)
    # and it is below the Stefan estimate (sensible heat slows the front)
    assert float(got) < float(fr.stefan_frost_depth(vs * t_days, k, theta))


def test_freezing_index_of_a_sinusoid():
    # Degree-days below 0 of m + A cos(w t): independent scipy quadrature; the daily sum
    # is a midpoint rule, 1e-3 relative covers it
    m, a = -1.0, 10.0
    t = np.arange(365) + 0.5
    temp = m + a * np.cos(2 * np.pi * t / 365.0)
    fi, days = fr.freezing_index_per_winter(temp[:, None], 365)
    ref, _ = quad(lambda x: max(0.0, -(m + a * np.cos(2 * np.pi * x / 365.0))), 0, 365,
                  limit=200)
    assert fi[0, 0] == pytest.approx(ref, rel=1e-3)
    # days below 0: 365 (1 - arccos(-m/a) / pi), within one day of sampling
    assert days[0, 0] == pytest.approx(365 * (1 - np.arccos(-m / a) / np.pi), abs=1.0)


@settings(max_examples=40, deadline=None)
@given(
    fi=st.floats(10.0, 3000.0),
    k=st.floats(0.3, 3.0),
    theta=st.floats(0.05, 0.5),
    mat=st.floats(0.0, 12.0),
    days=st.floats(30.0, 200.0),
)
def test_closed_forms_monotone(fi, k, theta, mat, days):
    # Invariants of both equations (Stefan 1891; Aldrich & Paynter 1953): more latent heat
    # to remove -> shallower frost; larger freezing index -> deeper frost
    c = 2.0e6
    s1 = fr.stefan_frost_depth(fi, k, theta)
    s2 = fr.stefan_frost_depth(fi, k, theta * 1.2)
    s3 = fr.stefan_frost_depth(fi * 1.2, k, theta)
    assert s2 < s1 < s3
    b1 = fr.berggren_frost_depth(fi, days, mat, k, k, c, c, theta)
    b2 = fr.berggren_frost_depth(fi, days, mat, k, k, c, c, theta * 1.2)
    b3 = fr.berggren_frost_depth(fi * 1.2, days, mat, k, k, c, c, theta)
    assert b2 < b1 < b3
    assert b1 <= s1 * (1 + 1e-12)


def test_dask_stays_lazy_and_xarray_keeps_dims():
    # the value-by-value functions give the numpy numbers on dask (lazy) and xarray input
    import dask.array as da
    import xarray as xr

    fi = np.array([[0.0, 300.0, 900.0], [1500.0, np.nan, 50.0]])
    kf = np.full(fi.shape, 1.8)
    water = np.array([[0.1, 0.2, 0.3], [0.0, 0.25, 0.4]])
    calls = [
        (fr.stefan_frost_depth, (fi, kf, water), {}),
        (fr.berggren_frost_depth, (fi, 120.0, 3.0, kf, 1.2, 1.9e6, 2.6e6, water), {}),
        (fr.frost_class, (np.array([[0.0, 0.3, 1.2], [2.5, np.nan, 0.7]]),),
         {"thresholds_m": [0.5, 1.0, 2.0]}),
    ]
    for fn, args, kw in calls:
        ref = fn(*args, **kw)
        lazy = fn(*(da.from_array(a, chunks=(1, 2)) if np.ndim(a) else a for a in args), **kw)
        assert isinstance(lazy, da.Array)
        np.testing.assert_array_equal(lazy.compute(), ref)
        on_xr = fn(*(xr.DataArray(a, dims=("y", "x")) if np.ndim(a) else a for a in args),
                   **kw)
        assert isinstance(on_xr, xr.DataArray) and on_xr.dims == ("y", "x")
        np.testing.assert_array_equal(on_xr.values, ref)
