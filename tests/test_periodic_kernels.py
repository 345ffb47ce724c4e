"""Tests of the vectorised fast path of geothermmap.physics.periodic and its fallback.

The fast path (Newton from the annual harmonic's peak and trough, proof check, scalar
fallback) must give the global extremes wherever it is used and hand every other cell
to the general search. References are independent of the module: dense numpy sampling
of the complex-exponential form of the periodic solution (Carslaw and Jaeger 1959,
Conduction of Heat in Solids, 2nd ed., section 2.6), refined by scipy.optimize.brentq
on the time derivative, and scipy.optimize.brentq on the dense yearly minimum in depth.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize

from geothermmap.physics.harmonics import OMEGA_RAD_DAY, YEAR_DAYS, HarmonicFit
from geothermmap.physics.periodic import (
    FROST_NONE,
    FROST_PERENNIAL,
    _exp_neg_finish,
    _exp_neg_parts,
    _rot_cs,
    _sincos,
    depth_statistics,
    frost_depth_conduction,
)

W = OMEGA_RAD_DAY


def _cell_series(mean, cos_c, sin_c, d, z):
    """T(t) and dT/dt of one cell at depth z, complex form (independent of the module)."""
    coef = [(cos_c[k] - 1j * sin_c[k]) * np.exp(-(1 + 1j) * z * math.sqrt(k + 1) / d)
            for k in range(len(cos_c))]  # fmt: skip

    def temp(t):
        t = np.asarray(t, dtype=float)
        return mean + sum(
            (c * np.exp(1j * (k + 1) * W * t)).real for k, c in enumerate(coef)
        )

    def dtemp(t):
        t = np.asarray(t, dtype=float)
        return sum(
            (1j * (k + 1) * W * c * np.exp(1j * (k + 1) * W * t)).real for k, c in enumerate(coef)
        )

    return temp, dtemp


def _reference_extremes(mean, cos_c, sin_c, d, z, n_t=4096):
    """Global min and max (value, time) by dense sampling plus brentq on dT/dt.

    Every sampled local extremum is refined by scipy.optimize.brentq on the sign change
    of dT/dt between its neighbours (xtol 1e-12 day), and the best one kept: value error
    at rounding level, far below the 1e-9 K checked.
    """
    temp, dtemp = _cell_series(mean, cos_c, sin_c, d, z)
    dt = YEAR_DAYS / n_t
    t = np.arange(n_t) * dt
    v = temp(t)
    best = {}
    for sign, key in ((1.0, "max"), (-1.0, "min")):
        sv = sign * v
        cand = np.flatnonzero((sv >= np.roll(sv, 1)) & (sv >= np.roll(sv, -1)))
        top = None
        for k in cand:
            lo, hi = (k - 1) * dt, (k + 1) * dt
            g_lo, g_hi = sign * dtemp(lo), sign * dtemp(hi)
            if g_lo >= 0 >= g_hi and g_lo != g_hi:
                tk = optimize.brentq(lambda x, s=sign: s * dtemp(x), lo, hi, xtol=1e-12)
            else:
                tk = k * dt
            vk = float(temp(tk))
            if top is None or sign * vk > sign * top[0]:
                top = (vk, tk % YEAR_DAYS)
        best[key] = top
    return best


def _circ(a, b):
    return (a - b + 0.5 * YEAR_DAYS) % YEAR_DAYS - 0.5 * YEAR_DAYS


def _check_against_reference(fit, d, depths, atol_k=1e-9, atol_day=1e-4):
    stats = depth_statistics(fit, d, depths)
    for i in range(fit.mean.size):
        for j, z in enumerate(depths):
            ref = _reference_extremes(fit.mean[i], fit.cos_coef[:, i], fit.sin_coef[:, i], d[i], z)
            assert stats["t_max"][j, i] == pytest.approx(ref["max"][0], abs=atol_k)
            assert stats["t_min"][j, i] == pytest.approx(ref["min"][0], abs=atol_k)
            assert abs(_circ(stats["doy_max"][j, i] - 1, ref["max"][1])) < atol_day
            assert abs(_circ(stats["doy_min"][j, i] - 1, ref["min"][1])) < atol_day
    return stats


def _two_harmonic_fit(rng, n, eps):
    """Cells with A_2 / A_1 = eps (array), random phases."""
    a1 = rng.uniform(8, 14, n)
    amps = np.vstack([a1, eps * a1])
    ph = rng.uniform(0, 2 * np.pi, (2, n))
    return HarmonicFit(rng.uniform(2, 12, n), amps * np.cos(ph), amps * np.sin(ph))


def test_rotation_polynomials_match_libm():
    # Closed form: math.cos / math.sin. The Taylor polynomials to x**16 / x**15 have a
    # truncation error below 1e-19 on |x| <= 0.5; allow 2 ulp of rounding.
    x = np.linspace(-0.5, 0.5, 20001)
    for xi in x:
        c, s = _rot_cs(xi)
        assert abs(c - math.cos(xi)) <= 2.3e-16
        assert abs(s - math.sin(xi)) <= 1.2e-16


def _exp_neg(y):
    p, bits = _exp_neg_parts(y)
    return _exp_neg_finish(y, p, np.array([bits], dtype=np.int64).view(np.float64)[0])


def test_vectorisable_exp_and_sincos_match_libm():
    # Closed form: math.exp, math.cos, math.sin. exp(-y): 3e-16 relative where the result
    # is a normal number; 0 beyond 708, NaN for NaN. cos/sin: 3e-16 absolute on the range
    # used (larger arguments go to libm in the kernel).
    rng = np.random.default_rng(27)
    ys = np.concatenate([[0.0, 1e-300, 0.5 * math.log(2), 1.0, 700.0], rng.uniform(0, 3, 3000),
                         rng.uniform(0, 700, 3000)])  # fmt: skip
    for y in ys:
        assert _exp_neg(y) == pytest.approx(math.exp(-y), rel=3e-16, abs=0)
    assert _exp_neg(708.5) == 0.0 and _exp_neg(np.inf) == 0.0
    assert math.isnan(_exp_neg(np.nan))
    xs = np.concatenate([[0.0, math.pi / 4, math.pi / 2, math.pi, 3 * math.pi / 2],
                         rng.uniform(0, 4, 3000), rng.uniform(0, 1e5, 3000)])  # fmt: skip
    for x in xs:
        c, s = _sincos(x)
        assert abs(c - math.cos(x)) <= 3e-16 and abs(s - math.sin(x)) <= 3e-16
    assert all(math.isnan(v) for v in _sincos(np.nan))


def test_extremes_near_the_fast_path_boundary():
    # At depth 0 the fast path needs A_1 sqrt(1 - (2 eps)**2) > 4 A_1 eps, i.e.
    # eps < 1/sqrt(20) = 0.2236; cells straddle it (and the region where the first Newton
    # step is longer than the rotation limit), so both the fast path and the fallback
    # run, in one chunk. Reference: dense sampling + brentq, 1e-9 K and 1e-4 day.
    rng = np.random.default_rng(21)
    eps = np.concatenate([np.linspace(0.15, 0.30, 24), [0.2236, 0.22361, 0.2237]])
    fit = _two_harmonic_fit(rng, eps.size, eps)
    d = rng.uniform(1.5, 3.0, eps.size)
    _check_against_reference(fit, d, [0.0, 0.1, 0.5])


def _three_harmonic_fit(rng, n, a1_range, r2_range, r3_range, mean_range, d_range):
    """n cells of three harmonics: annual amplitude in a1_range, the others as fractions
    of it, random phases; mean and damping depth uniform in their ranges."""
    a1 = rng.uniform(*a1_range, n)
    amps = np.vstack([a1, rng.uniform(*r2_range, n) * a1, rng.uniform(*r3_range, n) * a1])
    ph = rng.uniform(0, 2 * np.pi, (3, n))
    fit = HarmonicFit(rng.uniform(*mean_range, n), amps * np.cos(ph), amps * np.sin(ph))
    return fit, rng.uniform(*d_range, n)


def test_strongly_non_sinusoidal_three_harmonics():
    # Large semi- and ter-annual harmonics: several local extrema per year, the fast path
    # fails its test and the sampled search runs. Reference: dense sampling + brentq.
    fit, d = _three_harmonic_fit(np.random.default_rng(22), 12, (3, 10), (0.3, 0.9),
                                 (0.2, 0.6), (-5, 15), (0.5, 3.0))
    _check_against_reference(fit, d, [0.0, 0.4, 2.0])


def test_realistic_cells_many_chunks_with_nan_cells():
    # 300 cells (three chunks of the kernel, the last one partial) of a realistic
    # two-harmonic climate; NaN inputs scattered through them must give NaN in every output
    # of that cell only. A random subset is checked against dense sampling + brentq.
    rng = np.random.default_rng(23)
    n = 300
    fit = _two_harmonic_fit(rng, n, rng.uniform(0.04, 0.3, n))
    d = rng.uniform(1.5, 3.0, n)
    mean, cc, sc = fit.mean.copy(), fit.cos_coef.copy(), fit.sin_coef.copy()
    bad = np.array([0, 5, 127, 128, 200, 299])
    mean[bad[0]] = np.nan
    cc[0, bad[1]] = np.nan
    sc[1, bad[2]] = np.nan
    d = d.copy()
    d[bad[3]] = np.nan
    d[bad[4]] = 0.0
    cc[1, bad[5]] = np.nan
    fit = HarmonicFit(mean, cc, sc)
    depths = [0.0, 0.1, 0.5, 1.0, 2.0]
    stats = depth_statistics(fit, d, depths)
    good = np.setdiff1d(np.arange(n), bad)
    for key, val in stats.items():
        assert np.all(np.isnan(val[:, bad])), key
        assert np.all(np.isfinite(val[:, good])), key
    frost = frost_depth_conduction(fit, d)
    assert np.all(np.isnan(frost[bad])) and np.all(np.isfinite(frost[good]))
    pick = rng.choice(good, 10, replace=False)
    sub = HarmonicFit(mean[pick], cc[:, pick], sc[:, pick])
    ref_stats = _check_against_reference(sub, d[pick], depths)
    # a cell's answer does not depend on its neighbours in the chunk
    for key in stats:
        np.testing.assert_array_equal(ref_stats[key], stats[key][:, pick])
    np.testing.assert_array_equal(frost_depth_conduction(sub, d[pick]), frost[pick])
    # without the extremum search: the same closed-form outputs (exact exp vs the kernel's
    # polynomial exp: equal to rounding), NaN in the same cells
    closed = depth_statistics(fit, d, depths, extremes=False)
    assert set(closed) == {"t_mean", "amplitude", "phase_lag"}
    for key, val in closed.items():
        np.testing.assert_allclose(val, stats[key], rtol=1e-14, atol=0)
        assert np.all(np.isnan(val[:, bad])), key


def _dense_min(mean, cos_c, sin_c, d, z, n_t=20000):
    temp, _ = _cell_series(mean, cos_c, sin_c, d, z)
    return temp(np.arange(n_t) * (YEAR_DAYS / n_t)).min()


def _brentq_frost(mean, cos_c, sin_c, d):
    upper = d * math.log(np.hypot(cos_c, sin_c).sum() / mean)
    return optimize.brentq(lambda z: _dense_min(mean, cos_c, sin_c, d, z), 0.0, upper, xtol=1e-9)


def _check_frost_against_brentq(fit, d):
    """frost_depth_conduction of every cell against brentq (no frost: the code 0)."""
    got = frost_depth_conduction(fit, d)
    for i in range(d.size):
        args = (fit.mean[i], fit.cos_coef[:, i], fit.sin_coef[:, i], d[i])
        if _dense_min(*args, 0.0) >= 0:
            assert got[i] == FROST_NONE
            continue
        assert got[i] == pytest.approx(_brentq_frost(*args), abs=2e-5)


def test_frost_depth_realistic_and_boundary_cells_vs_brentq():
    # scipy.optimize.brentq on the dense-sampled yearly minimum (20000 samples: minimum
    # good to ~1e-6 K, depth to ~1e-6 m). Cells range over the fast-path boundary (the
    # depth steps then mix fast and general searches). Contract 1 mm; checked to 2e-5 m.
    rng = np.random.default_rng(24)
    n = 24
    fit = _two_harmonic_fit(rng, n, np.linspace(0.05, 0.32, n))
    d = rng.uniform(1.5, 3.0, n)
    _check_frost_against_brentq(fit, d)


def test_frost_depth_three_harmonics_vs_brentq():
    fit, d = _three_harmonic_fit(np.random.default_rng(25), 10, (6, 14), (0.05, 0.5),
                                 (0.02, 0.3), (0.5, 8), (0.8, 3.0))
    _check_frost_against_brentq(fit, d)


@pytest.mark.parametrize("a2", [2.0, 2.6])
def test_frost_when_the_annual_trough_is_above_zero_but_the_minimum_is_not(a2):
    # T at the annual trough only bounds the minimum from above. With the semi-annual
    # harmonic at phase pi/3 relative to the annual one (u-frame), T(trough) = mean - A1 +
    # A2 / 2 while the true minimum lies off the trough and lower. Choose the mean between
    # the two: frost exists, and the depth matches brentq on the dense minimum. A2 / A1 =
    # 0.2 has the surface minimum on the fast path, 0.26 (> 1/sqrt(20)) on the general one.
    a1 = 10.0
    phi1 = 1.3
    # harmonic 2 term A2 cos(2 u + pi/3) with w t = phi1 + u: phase 2 phi1 - pi/3 in t
    ph2 = 2 * phi1 - math.pi / 3
    cos_c = np.array([a1 * math.cos(phi1), a2 * math.cos(ph2)])
    sin_c = np.array([a1 * math.sin(phi1), a2 * math.sin(ph2)])
    d = 2.0
    trough = -a1 + a2 * math.cos(math.pi / 3)
    true_min = _dense_min(0.0, cos_c, sin_c, d, 0.0, n_t=200000)
    assert true_min < trough - 0.05  # the case this test is for
    mean = -0.5 * (trough + true_min)  # mean + trough > 0 > mean + true_min
    fit = HarmonicFit(np.array([mean]), cos_c[:, None], sin_c[:, None])
    got = frost_depth_conduction(fit, np.array([d]))[0]
    assert got > 0
    assert got == pytest.approx(_brentq_frost(mean, cos_c, sin_c, d), abs=2e-5)
    # and just above the minimum: no frost
    fit_none = HarmonicFit(np.array([-true_min + 1e-3]), cos_c[:, None], sin_c[:, None])
    assert frost_depth_conduction(fit_none, np.array([d]))[0] == FROST_NONE


def test_frost_codes_mixed_in_one_chunk():
    # Codes by definition (perennial: mean <= 0; none: envelope or surface minimum >= 0)
    # interleaved with frost cells and NaN in one chunk of the kernel.
    rng = np.random.default_rng(26)
    n = 200
    fit = _two_harmonic_fit(rng, n, rng.uniform(0.05, 0.25, n))
    mean = fit.mean.copy()
    mean[::7] = -1.0
    mean[3::11] = 40.0
    mean[5::13] = np.nan
    fit = HarmonicFit(mean, fit.cos_coef, fit.sin_coef)
    d = rng.uniform(1.5, 3.0, n)
    got = frost_depth_conduction(fit, d)
    nan = np.isnan(mean)
    assert np.all(np.isnan(got[nan]))
    assert np.all(got[~nan & (mean <= 0)] == FROST_PERENNIAL)
    assert np.all(got[~nan & (mean == 40.0)] == FROST_NONE)
    # frost cells: at the frost depth the yearly minimum is 0 degC (dense sampling)
    for i in np.flatnonzero(got > 0)[:15]:
        zmin = _dense_min(mean[i], fit.cos_coef[:, i], fit.sin_coef[:, i], d[i], got[i])
        assert zmin == pytest.approx(0.0, abs=1e-4)
