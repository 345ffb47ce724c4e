"""Tests for geothermmap.physics.periodic.

Truth comes from outside the module: the closed-form periodic solution of Carslaw and
Jaeger (1959, Conduction of Heat in Solids, 2nd ed., section 2.6), an independent
method-of-lines solution of the heat equation with scipy.integrate.solve_ivp, brute-force
dense sampling with numpy, root finding with scipy.optimize.brentq, and hand arithmetic.
"""

from __future__ import annotations

import math

import dask.array as da
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, sparse
from scipy.integrate import solve_ivp

from geothermmap.physics.harmonics import (
    OMEGA_RAD_DAY,
    YEAR_DAYS,
    HarmonicFit,
    fit_harmonics,
    monthly_means_of_sinusoid,
)
from geothermmap.physics.periodic import (
    FROST_NONE,
    FROST_PERENNIAL,
    amplitude_at_depth,
    damping_depth,
    depth_statistics,
    frost_depth_conduction,
    phase_lag_days,
    surface_heat_flux_amplitude,
    temperature_at_depth,
    zero_amplitude_depth,
)

KAPPA = 5e-7  # m2 s-1, a moist mineral soil (common practice)


def _circular_diff(a, b, period=YEAR_DAYS):
    return (np.asarray(a) - np.asarray(b) + 0.5 * period) % period - 0.5 * period


def _series(fit, d, z, t):
    """Independent evaluation of the periodic solution in complex form (Carslaw and Jaeger
    1959, section 2.6): T = mean + Re sum_n (a_n - i b_n) exp(i n w t - (1 + i) z / d_n)."""
    mean = np.asarray(fit.mean, dtype=float)
    out = np.array(mean, dtype=complex)
    for k in range(np.shape(fit.cos_coef)[0]):
        n = k + 1
        dn = d / np.sqrt(n)
        coef = np.asarray(fit.cos_coef[k]) - 1j * np.asarray(fit.sin_coef[k])
        out = out + coef * np.exp(1j * n * OMEGA_RAD_DAY * t - (1 + 1j) * z / dn)
    return out.real


def _random_fit(rng, n_cells, n_harmonics, strong_higher=False):
    mean = rng.uniform(-15, 25, n_cells)
    scale = np.array([1.0, 0.6, 0.4]) if strong_higher else np.array([1.0, 0.15, 0.08])
    amps = rng.uniform(1, 20, n_cells)[None] * scale[:n_harmonics, None]
    amps = amps * rng.uniform(0.2, 1.0, (n_harmonics, n_cells))
    phase = rng.uniform(0, 2 * np.pi, (n_harmonics, n_cells))
    return HarmonicFit(mean, amps * np.cos(phase), amps * np.sin(phase))


def _brute_force_extrema(fit, d, depths, n_t=2**17):
    """Dense sampling of the year (numpy), refined by the vertex of the sampled parabola.

    Spacing 365.25 / 2**17 = 0.0028 day; the parabola vertex makes the value error
    O(spacing**3) ~ 1e-10 K and the time error far below 0.01 day.
    """
    dt = YEAR_DAYS / n_t
    t = np.arange(n_t) * dt
    res = {k: np.empty((len(depths), fit.mean.size)) for k in ("t_min", "t_max", "t_lo", "t_hi")}
    for i in range(fit.mean.size):
        cell = HarmonicFit(fit.mean[i], fit.cos_coef[:, i], fit.sin_coef[:, i])
        for j, z in enumerate(depths):
            temp = _series(cell, d[i] if np.ndim(d) else d, z, t)
            for key_v, key_t, k in (
                ("t_max", "t_hi", np.argmax(temp)),
                ("t_min", "t_lo", np.argmin(temp)),
            ):
                vm, v0, vp = temp[k - 1], temp[k], temp[(k + 1) % n_t]
                denom = vm - 2 * v0 + vp
                shift = 0.5 * (vm - vp) / denom if denom != 0 else 0.0
                res[key_v][j, i] = v0 - 0.25 * (vm - vp) * shift
                res[key_t][j, i] = (k + shift) * dt % YEAR_DAYS
    return res


# --- damping depth, amplitude and lag ------------------------------------------------


def test_damping_depth_hand_arithmetic():
    # Carslaw and Jaeger (1959) section 2.6: d = sqrt(2 kappa / omega) = sqrt(kappa P / pi).
    # Hand arithmetic: P = 365.25 * 86400 = 31 557 600 s; 5e-7 * 31557600 / pi = 5.02256 m2;
    # sqrt = 2.24111 m. Tolerance: 6 significant figures of the hand value.
    assert damping_depth(KAPPA) == pytest.approx(2.24111, abs=1e-5)
    omega = 2 * np.pi / (365.25 * 86400)
    assert damping_depth(KAPPA) == pytest.approx(np.sqrt(2 * KAPPA / omega), rel=1e-14)
    # diurnal period: sqrt(5e-7 * 86400 / pi) = 0.11727 m (hand arithmetic)
    assert damping_depth(KAPPA, period_days=1.0) == pytest.approx(0.11727, abs=1e-5)


def test_amplitude_and_lag_at_the_damping_depth():
    # Carslaw and Jaeger (1959) section 2.6: at z = d the amplitude is exp(-1) = 36.79 % of
    # the surface amplitude and the lag is 1 rad = 365.25 / (2 pi) = 58.13 days. Checked on
    # dense samples of temperature_at_depth (0.01-day steps: lag resolved to 0.005 day).
    d = damping_depth(KAPPA)
    fit = fit_harmonics(monthly_means_of_sinusoid(8.0, 12.0, 200.0), 1)
    t = np.arange(0, YEAR_DAYS, 0.01)
    surf = temperature_at_depth(fit, d, 0.0, t)
    deep = temperature_at_depth(fit, d, d, t)
    ratio = (deep.max() - deep.min()) / (surf.max() - surf.min())
    assert ratio == pytest.approx(math.exp(-1), abs=1e-6)
    assert ratio == pytest.approx(0.3679, abs=1e-4)
    lag = _circular_diff(t[np.argmax(deep)], t[np.argmax(surf)])
    assert lag == pytest.approx(YEAR_DAYS / (2 * np.pi), abs=0.01)
    assert lag == pytest.approx(58.13, abs=0.01)
    stats = depth_statistics(fit, d, [0.0, d])
    assert stats["amplitude"][1] == pytest.approx(12.0 * math.exp(-1), rel=1e-12)
    assert stats["phase_lag"][1] == pytest.approx(YEAR_DAYS / (2 * np.pi), rel=1e-12)
    assert amplitude_at_depth(12.0, d, d) == pytest.approx(12.0 * math.exp(-1), rel=1e-14)
    assert phase_lag_days(d, d) == pytest.approx(YEAR_DAYS / (2 * np.pi), rel=1e-14)


def test_harmonic_n_damps_with_d_over_sqrt_n():
    # Carslaw and Jaeger (1959) section 2.6 with period P / n: d_n = d / sqrt(n) and the lag
    # in days is (z / d_n) / (n w). Hand arithmetic at z = d, n = 2: amplitude exp(-sqrt 2) =
    # 0.24312, lag sqrt(2) / (2 w) = sqrt(2) * 365.25 / (4 pi) = 41.1051 days.
    d = 2.0
    assert amplitude_at_depth(1.0, d, d, harmonic=2) == pytest.approx(0.24312, abs=1e-5)
    assert phase_lag_days(d, d, harmonic=2) == pytest.approx(41.1051, abs=1e-4)


# --- independent numerical solution of the heat equation ------------------------------


def _method_of_lines(kappa_m2_s, surface, initial_degC, years, n_out):
    """Heat equation dT/dt = kappa d2T/dz2 by the method of lines (independent of the
    module): geometric grid from 1 cm, 3 % stretching, to 16 damping depths; fixed surface
    temperature; zero flux at the bottom; stiff BDF integration from a uniform start."""
    kappa = kappa_m2_s * 86400.0  # m2 day-1
    d = np.sqrt(kappa * YEAR_DAYS / np.pi)
    z = [0.0]
    h = 0.01
    while z[-1] < 16 * d:
        z.append(z[-1] + h)
        h *= 1.03
    z = np.array(z)
    hh = np.diff(z)
    n = z.size - 1  # unknowns at z[1:]
    main = np.empty(n)
    lower = np.zeros(n - 1)
    upper = np.zeros(n - 1)
    for i in range(1, n):
        hm, hp = hh[i - 1], hh[i]
        c = 2 * kappa / (hm + hp)
        main[i - 1] = -c * (1 / hm + 1 / hp)
        upper[i - 1] = c / hp
        if i > 1:
            lower[i - 2] = c / hm
    main[n - 1] = -2 * kappa / hh[n - 1] ** 2  # mirror node: zero flux
    lower[n - 2] = 2 * kappa / hh[n - 1] ** 2
    jac = sparse.diags([lower, main, upper], [-1, 0, 1], format="csc")
    c_top = 2 * kappa / (hh[0] * (hh[0] + hh[1]))

    def rhs(t, temp):
        out = jac @ temp
        out[0] += c_top * surface(t)
        return out

    t_eval = (years - 1) * YEAR_DAYS + np.arange(n_out) * YEAR_DAYS / n_out
    sol = solve_ivp(
        rhs, (0.0, years * YEAR_DAYS), np.full(n, initial_degC), method="BDF",
        jac=jac, t_eval=t_eval, rtol=1e-8, atol=1e-8,
    )  # fmt: skip
    assert sol.status == 0
    full = np.vstack([surface(sol.t)[None], sol.y])
    return z, sol.t, full


def test_periodic_solution_matches_numerical_heat_equation():
    # Carslaw and Jaeger (1959) section 2.6 periodic solution versus an independent
    # method-of-lines solution (scipy solve_ivp, BDF) after 5 years of spin-up. The surface
    # carries an annual and a semi-annual harmonic; each is extracted from the last year by
    # projection onto cos/sin (exact for uniform samples over one period).
    mean, a1, p1, a2, p2 = 5.0, 10.0, 200.0, 3.0, 20.0

    def surface(t):
        t = np.asarray(t)
        return (
            mean + a1 * np.cos(OMEGA_RAD_DAY * (t - p1)) + a2 * np.cos(2 * OMEGA_RAD_DAY * (t - p2))
        )

    n_out = 730
    z, t, temp = _method_of_lines(KAPPA, surface, mean, years=6, n_out=n_out)
    d = damping_depth(KAPPA)
    fit = HarmonicFit(
        np.float64(mean),
        np.array([a1 * np.cos(OMEGA_RAD_DAY * p1), a2 * np.cos(2 * OMEGA_RAD_DAY * p2)]),
        np.array([a1 * np.sin(OMEGA_RAD_DAY * p1), a2 * np.sin(2 * OMEGA_RAD_DAY * p2)]),
    )
    depths = [0.1, 0.5, 1.0, 2.0, 4.0]
    stats = depth_statistics(fit, d, depths)
    for j, zq in enumerate(depths):
        series = np.array([np.interp(zq, z, temp[:, k]) for k in range(t.size)])
        for n, amp0, peak0 in ((1, a1, p1), (2, a2, p2)):
            c = 2 / n_out * np.sum(series * np.cos(n * OMEGA_RAD_DAY * t))
            s = 2 / n_out * np.sum(series * np.sin(n * OMEGA_RAD_DAY * t))
            amp_num = np.hypot(c, s)
            lag_num = (np.arctan2(s, c) / (n * OMEGA_RAD_DAY) - peak0) % (YEAR_DAYS / n)
            amp_ana = amplitude_at_depth(amp0, d, zq, harmonic=n)
            lag_ana = phase_lag_days(d, zq, harmonic=n)
            # 1 % and 1 day: grid (h/d <= 0.06) and spin-up errors are ~0.1 % and 0.03 day
            assert amp_num == pytest.approx(amp_ana, rel=0.01)
            assert lag_num == pytest.approx(lag_ana, abs=1.0)
            if n == 1:
                assert stats["amplitude"][j] == pytest.approx(amp_ana, rel=1e-12)
                assert stats["phase_lag"][j] == pytest.approx(lag_ana, rel=1e-12)
        # whole series: numerical vs temperature_at_depth; 0.02 K = 0.2 % of the range
        ana = temperature_at_depth(fit, d, zq, t)
        np.testing.assert_allclose(series, ana, atol=0.02)
        # numerical yearly extremes vs depth_statistics (730 samples: 0.5-day spacing,
        # value error of sampling <= 0.5 |T''| (0.25 day)^2 ~ 1e-3 K; plus grid error)
        assert series.max() == pytest.approx(stats["t_max"][j], abs=0.03)
        assert series.min() == pytest.approx(stats["t_min"][j], abs=0.03)


# --- multi-harmonic extremes against brute force ---------------------------------------


@pytest.mark.parametrize(
    ("n_harmonics", "strong"), [(1, False), (2, False), (2, True), (3, False), (3, True)]
)
def test_extremes_match_dense_sampling(n_harmonics, strong):
    # Brute force (numpy): 2**17 samples per year refined by the sampled parabola (value
    # error ~1e-10 K). "strong" fits have large semi-annual/ter-annual harmonics, so there
    # can be several local extrema per year (exercises the sampled search, not only the
    # dominant-annual fast path). Contract: 1e-6 K and 0.01 day.
    rng = np.random.default_rng(100 + 10 * n_harmonics + strong)
    n_cells = 12
    fit = _random_fit(rng, n_cells, n_harmonics, strong_higher=strong)
    d = rng.uniform(0.5, 4.0, n_cells)
    depths = [0.0, 0.3, 1.2, 3.0]
    stats = depth_statistics(fit, d, depths)
    ref = _brute_force_extrema(fit, d, depths)
    np.testing.assert_allclose(stats["t_max"], ref["t_max"], atol=1e-6)
    np.testing.assert_allclose(stats["t_min"], ref["t_min"], atol=1e-6)
    # times only where the extremum is sharp enough to define a day (always here)
    np.testing.assert_allclose(_circular_diff(stats["doy_max"] - 1, ref["t_hi"]), 0, atol=0.01)
    np.testing.assert_allclose(_circular_diff(stats["doy_min"] - 1, ref["t_lo"]), 0, atol=0.01)
    for key in ("doy_min", "doy_max"):
        assert np.all((stats[key] >= 1.0) & (stats[key] < 1.0 + YEAR_DAYS))
    np.testing.assert_allclose(stats["t_mean"], np.broadcast_to(fit.mean, (4, n_cells)))


def test_single_harmonic_extremes_closed_form():
    # Carslaw and Jaeger (1959) section 2.6: mean +- A exp(-z/d), peak lagged by z/(d w).
    fit = fit_harmonics(monthly_means_of_sinusoid(10.0, 8.0, 190.0), 1)
    d = 2.0
    stats = depth_statistics(fit, d, [0.0, 1.0])
    assert stats["t_max"][1] == pytest.approx(10 + 8 * math.exp(-0.5), abs=1e-9)
    assert stats["t_min"][1] == pytest.approx(10 - 8 * math.exp(-0.5), abs=1e-9)
    assert stats["doy_max"][0] == pytest.approx(191.0, abs=1e-8)
    assert stats["doy_max"][1] == pytest.approx(191.0 + 0.5 / OMEGA_RAD_DAY, abs=1e-8)
    assert stats["doy_min"][0] == pytest.approx(1 + (190 + YEAR_DAYS / 2) % YEAR_DAYS, abs=1e-8)


# --- zero-amplitude depth and heat flux ------------------------------------------------


def test_zero_amplitude_depth_hand_arithmetic():
    # d ln(A / tol): 2 m * ln(10 / 0.1) = 2 * 4.605170 = 9.210340 m (hand arithmetic)
    got = zero_amplitude_depth(np.array([10.0, 0.1, 0.05, np.nan]), 2.0, tolerance_K=0.1)
    assert got[0] == pytest.approx(9.210340, abs=1e-6)
    assert got[1] == 0.0 and got[2] == 0.0
    assert np.isnan(got[3])
    # consistency: the annual amplitude at that depth equals the tolerance
    assert amplitude_at_depth(10.0, 2.0, got[0]) == pytest.approx(0.1, rel=1e-12)
    with pytest.raises(ValueError):
        zero_amplitude_depth(1.0, 1.0, tolerance_K=0.0)


def test_surface_heat_flux_amplitude_hand_arithmetic_and_numerical_gradient():
    # A sqrt(lambda C omega): omega = 2 pi / 31 557 600 s = 1.991021e-7 s-1;
    # 1.5 * 2.0e6 * 1.991021e-7 = 0.5973064; sqrt = 0.7728560; times 10 K = 7.72856 W m-2
    # (hand arithmetic; 6 significant figures).
    lam, cap = 1.5, 2.0e6
    assert surface_heat_flux_amplitude(10.0, lam, cap) == pytest.approx(7.72856, abs=1e-5)
    # Independent check, Carslaw and Jaeger (1959) section 2.6: G = -lambda dT/dz at z = 0
    # by a central difference of the series (h = 1e-4 m, truncation ~(h/d)^2 ~ 1e-9 rel.),
    # and the flux peak leads the temperature peak by P / 8 = 45.66 days.
    kappa = lam / cap
    d = damping_depth(kappa)
    fit = fit_harmonics(monthly_means_of_sinusoid(5.0, 10.0, 200.0), 1)
    t = np.arange(0, YEAR_DAYS, 0.01)
    h = 1e-4
    flux = -lam * (_series(fit, d, h, t) - _series(fit, d, -h, t)) / (2 * h)
    assert flux.max() == pytest.approx(7.72856, rel=1e-5)
    lead = _circular_diff(200.0, t[np.argmax(flux)])
    assert lead == pytest.approx(YEAR_DAYS / 8, abs=0.01)


# --- frost depth --------------------------------------------------------------------


def _dense_min(fit_cell, d, z, n_t=20000):
    t = np.arange(n_t) * (YEAR_DAYS / n_t)
    return _series(fit_cell, d, z, t).min()


def test_frost_depth_single_harmonic_closed_form_vs_brentq():
    # Closed form d ln(A / mean) (Carslaw and Jaeger 1959, section 2.6 amplitude law) versus
    # scipy.optimize.brentq on the dense-sampled yearly minimum. Sampling error of the minimum
    # ~1e-6 K -> depth error ~1e-6 m; contract 1 mm.
    d = 1.8
    fit = fit_harmonics(monthly_means_of_sinusoid(np.array([4.0, 2.0]), 12.0, 200.0), 1)
    got = frost_depth_conduction(fit, d)
    np.testing.assert_allclose(got, d * np.log(12.0 / np.array([4.0, 2.0])), rtol=1e-12)
    for i in range(2):
        cell = HarmonicFit(fit.mean[i], fit.cos_coef[:, i], fit.sin_coef[:, i])
        root = optimize.brentq(lambda z, c=cell: _dense_min(c, d, z), 0.0, 20.0, xtol=1e-9)
        assert got[i] == pytest.approx(root, abs=1e-3)


def test_frost_depth_two_harmonics_vs_brentq_on_dense_minimum():
    # scipy.optimize.brentq on the dense-sampled minimum (independent of the kernel's
    # Newton search). Contract 1 mm; the dense minimum is good to ~1e-5 K -> ~1e-5 m.
    rng = np.random.default_rng(5)
    n_cells = 8
    mean = rng.uniform(0.5, 6.0, n_cells)
    a1 = mean + rng.uniform(1.0, 12.0, n_cells)
    a2 = rng.uniform(0.2, 0.6, n_cells) * a1
    ph = rng.uniform(0, 2 * np.pi, (2, n_cells))
    amps = np.vstack([a1, a2])
    fit = HarmonicFit(mean, amps * np.cos(ph), amps * np.sin(ph))
    d = rng.uniform(0.6, 3.0, n_cells)
    got = frost_depth_conduction(fit, d)
    for i in range(n_cells):
        cell = HarmonicFit(mean[i], fit.cos_coef[:, i], fit.sin_coef[:, i])
        if _dense_min(cell, d[i], 0.0) >= 0:
            assert got[i] == FROST_NONE
            continue
        upper = d[i] * np.log((a1[i] + a2[i]) / mean[i])
        root = optimize.brentq(
            lambda z, c=cell, di=d[i]: _dense_min(c, di, z), 0.0, upper, xtol=1e-9
        )
        assert got[i] == pytest.approx(root, abs=1e-3)
        assert got[i] > 0


def test_frost_codes_and_nan():
    # Codes by definition: mean <= 0 -> perennial; surface minimum >= 0 -> none.
    fit = HarmonicFit(
        mean=np.array([-1.0, 0.0, 15.0, 2.0, np.nan, 2.0]),
        cos_coef=np.array([[5.0, 5.0, 5.0, 10.0, 5.0, np.nan], [0.5, 0.5, 0.5, 1.0, 0.5, 0.5]]),
        sin_coef=np.zeros((2, 6)),
    )
    got = frost_depth_conduction(fit, np.array([1.0, 1.0, 1.0, 1.0, 1.0, 1.0]))
    assert got[0] == FROST_PERENNIAL and got[1] == FROST_PERENNIAL
    assert got[2] == FROST_NONE
    assert got[3] > 0
    assert np.isnan(got[4]) and np.isnan(got[5])
    clipped = frost_depth_conduction(fit, 1.0, max_depth_m=0.5)
    assert clipped[3] == 0.5 and clipped[0] == FROST_PERENNIAL
    bad_d = frost_depth_conduction(fit, np.array([1.0, 1.0, 0.0, -1.0, 1.0, 1.0]))
    assert np.isnan(bad_d[2]) and np.isnan(bad_d[3])


def test_frost_depth_is_where_the_yearly_minimum_reaches_zero():
    # Definition check with the module's own extremum search: t_min at the frost depth is
    # 0 degC (to the 1e-6 m depth tolerance times the slope ~ a few K m-1).
    rng = np.random.default_rng(11)
    fit = _random_fit(rng, 50, 3, strong_higher=True)
    fit = HarmonicFit(np.abs(fit.mean) + 0.5, fit.cos_coef, fit.sin_coef)
    d = rng.uniform(0.5, 3, 50)
    zf = frost_depth_conduction(fit, d)
    ok = zf > 0
    assert ok.sum() > 10
    for i in np.flatnonzero(ok):
        cell = HarmonicFit(fit.mean[i], fit.cos_coef[:, i], fit.sin_coef[:, i])
        assert depth_statistics(cell, d[i], zf[i])["t_min"][0] == pytest.approx(0.0, abs=1e-4)


# --- invariants (hypothesis) ----------------------------------------------------------

coef = st.floats(-15, 15, allow_nan=False)


@st.composite
def fits(draw):
    h = draw(st.integers(1, 3))
    mean = draw(st.floats(-20, 30))
    c = [draw(coef) / (k + 1) for k in range(h)]
    s = [draw(coef) / (k + 1) for k in range(h)]
    return HarmonicFit(np.float64(mean), np.array(c), np.array(s))


@settings(max_examples=60, deadline=None)
@given(
    fit=fits(),
    d=st.floats(0.2, 6.0),
    depths=st.lists(st.floats(0, 15), min_size=2, max_size=6).map(sorted),
)
def test_invariants_with_depth(fit, d, depths):
    # Physics: Carslaw and Jaeger (1959) section 2.6, amplitude exp(-z/d) never grows with
    # depth; by the maximum principle the yearly range shrinks and the yearly minimum rises
    # with depth; extremes bracket the mean. 1e-9 K allows for rounding in the search.
    stats = depth_statistics(fit, d, depths)
    assert np.all(np.diff(stats["amplitude"]) <= 1e-12)
    assert np.all(np.diff(stats["t_max"] - stats["t_min"]) <= 1e-9)
    assert np.all(np.diff(stats["t_min"]) >= -1e-9)
    assert np.all(np.diff(stats["t_max"]) <= 1e-9)
    assert np.all(stats["t_min"] <= stats["t_mean"] + 1e-9)
    assert np.all(stats["t_mean"] <= stats["t_max"] + 1e-9)
    doy = stats["doy_max"]
    flat = np.sum(np.hypot(fit.cos_coef, fit.sin_coef)) < 1e-9  # constant: no day (NaN)
    assert np.all(np.isnan(doy)) if flat else np.all((doy >= 1) & (doy < 1 + YEAR_DAYS))
    zf = frost_depth_conduction(fit, d)
    assert zf == FROST_PERENNIAL or zf >= 0


@settings(max_examples=30, deadline=None)
@given(fit=fits(), which=st.integers(0, 2))
def test_nan_in_gives_nan_out(fit, which):
    mean, c, s = np.float64(fit.mean), fit.cos_coef.copy(), fit.sin_coef.copy()
    if which == 0:
        mean = np.float64(np.nan)
    elif which == 1:
        c[-1] = np.nan
    else:
        s[0] = np.nan
    bad = HarmonicFit(mean, c, s)
    stats = depth_statistics(bad, 2.0, [0.0, 1.0])
    for val in stats.values():
        assert np.all(np.isnan(val))
    assert np.isnan(frost_depth_conduction(bad, 2.0))
    assert np.all(np.isnan(temperature_at_depth(bad, 2.0, 1.0, np.arange(5.0))))
    ok = HarmonicFit(np.float64(fit.mean), fit.cos_coef, fit.sin_coef)
    assert np.all(np.isnan(depth_statistics(ok, np.nan, [0.5])["t_min"]))


# --- containers, shapes, point equals map cell ---------------------------------------


def test_same_answer_for_scalar_ndarray_and_dask():
    kappa = np.array([[3e-7, 5e-7], [7e-7, 9e-7]])
    ref = damping_depth(kappa)
    assert damping_depth(5e-7) == pytest.approx(ref[0, 1], rel=0)
    lazy = damping_depth(da.from_array(kappa, chunks=1))
    assert isinstance(lazy, da.Array)
    np.testing.assert_array_equal(lazy.compute(), ref)

    amp = np.array([[0.05, 3.0], [10.0, 20.0]])
    for fn, args in (
        (zero_amplitude_depth, (amp, ref)),
        (surface_heat_flux_amplitude, (amp, 1.2 + 0 * amp, 2.2e6 + 0 * amp)),
        (amplitude_at_depth, (amp, ref, 1.5)),
    ):
        full = fn(*args)
        lazy = fn(*(da.from_array(a, chunks=1) if np.ndim(a) else a for a in args))
        assert isinstance(lazy, da.Array)
        np.testing.assert_array_equal(lazy.compute(), full)
        scalar = fn(*(a[1, 0] if np.ndim(a) else a for a in args))
        assert scalar == full[1, 0]

    fit = fit_harmonics(monthly_means_of_sinusoid(np.array([[4.0, 6.0], [8.0, 10.0]]), 9.0, 200.0))
    t = 30.0
    full = temperature_at_depth(fit, ref, 1.0, t)
    lazy_fit = HarmonicFit(*(da.from_array(x) for x in fit))
    lazy = temperature_at_depth(lazy_fit, da.from_array(ref, chunks=1), 1.0, t)
    assert isinstance(lazy, da.Array)
    np.testing.assert_allclose(lazy.compute(), full, rtol=0, atol=1e-12)

    # the compiled functions stay lazy on dask input, chunk by chunk of the cells
    stats = depth_statistics(fit, ref, [0.5, 2.0])
    stats_dask = depth_statistics(lazy_fit, da.from_array(ref, chunks=1), [0.5, 2.0])
    for key in stats:
        assert isinstance(stats_dask[key], da.Array)
        np.testing.assert_array_equal(stats_dask[key].compute(), stats[key])
    closed = depth_statistics(lazy_fit, da.from_array(ref, chunks=1), [0.5], extremes=False)
    assert set(closed) == {"t_mean", "amplitude", "phase_lag"}
    np.testing.assert_array_equal(closed["amplitude"].compute(), stats["amplitude"][:1])
    # xarray in, xarray out: cell coordinates kept, a depth coordinate added
    import xarray as xr

    coords = {"y": [10.0, 20.0], "x": [1.0, 2.0]}
    d_xr = xr.DataArray(ref, dims=("y", "x"), coords=coords)
    stats_xr = depth_statistics(fit, d_xr, [0.5, 2.0])
    assert stats_xr["t_min"].dims == ("depth", "y", "x")
    assert list(stats_xr["t_min"]["depth"].values) == [0.5, 2.0]
    np.testing.assert_array_equal(stats_xr["t_min"].values, stats["t_min"])
    frost_xr = frost_depth_conduction(fit, d_xr.chunk({"x": 1}))
    assert frost_xr.dims == ("y", "x") and isinstance(frost_xr.data, da.Array)
    np.testing.assert_array_equal(frost_xr.values, frost_depth_conduction(fit, ref))
    cell = HarmonicFit(float(fit.mean[1, 0]), fit.cos_coef[:, 1, 0], fit.sin_coef[:, 1, 0])
    stats_cell = depth_statistics(cell, float(ref[1, 0]), [0.5, 2.0])
    for key in stats:
        np.testing.assert_allclose(stats_cell[key], stats[key][:, 1, 0], rtol=0, atol=1e-12)
    lazy_frost = frost_depth_conduction(lazy_fit, da.from_array(ref))
    assert isinstance(lazy_frost, da.Array)
    np.testing.assert_array_equal(lazy_frost.compute(), frost_depth_conduction(fit, ref))


def test_chunked_equals_unchunked_and_point_equals_map_cell():
    rng = np.random.default_rng(9)
    monthly = rng.normal(5, 3, (12, 6, 7)) + monthly_means_of_sinusoid(
        rng.uniform(-2, 12, (6, 7)), rng.uniform(3, 15, (6, 7)), 200.0
    )
    fit = fit_harmonics(monthly, 2)
    d = rng.uniform(0.5, 3.0, (6, 7))
    depths = [0.1, 0.5, 1.0, 2.0]
    full = depth_statistics(fit, d, depths)
    frost = frost_depth_conduction(fit, d)
    for key in full:
        assert full[key].shape == (4, 6, 7)
    for rows in (slice(0, 3), slice(3, 6)):
        part = HarmonicFit(fit.mean[rows], fit.cos_coef[:, rows], fit.sin_coef[:, rows])
        sub = depth_statistics(part, d[rows], depths)
        for key in full:
            np.testing.assert_array_equal(sub[key], full[key][:, rows])
        np.testing.assert_array_equal(frost_depth_conduction(part, d[rows]), frost[rows])
    # point equals map cell, including the temperature series
    i, j = 4, 2
    cell = HarmonicFit(fit.mean[i, j], fit.cos_coef[:, i, j], fit.sin_coef[:, i, j])
    point = depth_statistics(cell, d[i, j], depths)
    for key in full:
        np.testing.assert_array_equal(point[key], full[key][:, i, j])
    z = np.array(depths)[:, None, None]
    t_grid = temperature_at_depth(fit, d, z, 100.0)
    assert t_grid.shape == (4, 6, 7)
    np.testing.assert_allclose(
        t_grid[:, i, j], temperature_at_depth(cell, d[i, j], z[:, 0, 0], 100)
    )
    # damping depth broadcast as a scalar
    assert depth_statistics(fit, 1.5, depths)["t_min"].shape == (4, 6, 7)


def test_temperature_at_depth_matches_complex_series_and_validates_depth():
    rng = np.random.default_rng(2)
    fit = _random_fit(rng, 5, 3, strong_higher=True)
    d = rng.uniform(0.5, 3, 5)
    t = rng.uniform(0, 400, 5)
    z = rng.uniform(0, 5, 5)
    # independent complex-exponential form of the same solution; rounding only
    np.testing.assert_allclose(
        temperature_at_depth(fit, d, z, t), _series(fit, d, z, t), rtol=0, atol=1e-12
    )
    with pytest.raises(ValueError):
        temperature_at_depth(fit, d, -0.1, 0.0)
    with pytest.raises(ValueError):
        depth_statistics(fit, d, [0.5, -1.0])


def test_constant_temperature_has_no_day_of_extremes():
    # a constant cycle has its minimum everywhere: doy_min/doy_max are undefined (NaN),
    # t_min = t_max = mean (exact: Carslaw & Jaeger 1959 Sec. 2.6 with zero amplitude)
    from geothermmap.physics.harmonics import fit_harmonics

    fit = fit_harmonics(np.full((12, 3), 5.0), 2)
    from geothermmap.physics import periodic

    out = periodic.depth_statistics(fit, np.full(3, 2.0), [0.1, 1.0])
    assert np.isnan(out["doy_min"]).all() and np.isnan(out["doy_max"]).all()
    np.testing.assert_allclose(out["t_min"], 5.0, atol=1e-12)
    np.testing.assert_allclose(out["t_max"], 5.0, atol=1e-12)
