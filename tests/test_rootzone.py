"""Tests of geothermmap.physics.rootzone against independent computations.

Sources of truth:
- the exact periodic solution of the heat equation in a half-space (Fourier; Carslaw &
  Jaeger 1959, section 2.6), written out again below in plain numpy, and its depth
  integral by scipy.integrate.quad;
- brute-force evaluation of that solution on very fine time grids (crossing dates, days
  above, extrema) and direct numerical integration (trapezoid, scipy quad) for degree-days.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import rasterio
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

from geothermmap import run_recipe
from geothermmap.physics import harmonics, periodic, properties, rootzone
from geothermmap.physics.harmonics import HarmonicFit
from tests.conftest import make_case, write_recipe

YEAR = 365.25
W = 2 * math.pi / YEAR


def profile(fit_cell: tuple[float, list[float], list[float]], d: float, z, t):
    """Exact periodic solution T(z, t) (Carslaw & Jaeger 1959, sec. 2.6), one cell."""
    mean, a, b = fit_cell
    out = mean + 0.0 * np.asarray(z, dtype=float) * np.asarray(t, dtype=float)
    for k, (ak, bk) in enumerate(zip(a, b, strict=True)):
        n = k + 1
        r = np.asarray(z) * math.sqrt(n) / d
        out = out + np.exp(-r) * (ak * np.cos(n * W * t - r) + bk * np.sin(n * W * t - r))
    return out


def cycle(fit: HarmonicFit, t):
    """Value of a fit's cycle at times t (cells broadcast)."""
    out = np.asarray(fit.mean) + 0.0 * np.asarray(t)
    for k in range(np.shape(fit.cos_coef)[0]):
        n = k + 1
        out = out + fit.cos_coef[k] * np.cos(n * W * t) + fit.sin_coef[k] * np.sin(n * W * t)
    return out


def one_cell(mean, a, b) -> HarmonicFit:
    return HarmonicFit(np.array(mean, float), np.array(a, float), np.array(b, float))


# invented cells: an ordinary annual cycle with a semi-annual harmonic, and one with a
# large semi-annual harmonic (four crossings of a threshold a year)
CELL_A = (8.0, [-9.0, 0.6], [-3.5, -0.4])
CELL_B = (6.0, [-3.0, -5.0], [-1.0, 0.5])


# ---------------------------------------------------------------------------------------
# depth average
# ---------------------------------------------------------------------------------------


@pytest.mark.parametrize("cell", [CELL_A, CELL_B])
@pytest.mark.parametrize(("d", "top", "bottom"),
                         [(2.4, 0.0, 0.3), (1.1, 0.05, 0.6), (3.0, 0.2, 9.0), (0.8, 0.0, 0.01)])
def test_depth_average_equals_quadrature(cell, d, top, bottom):
    fit = one_cell(*cell)
    avg = rootzone.root_zone_fit(fit, d, top, bottom)
    for t in (0.0, 37.5, 123.4, 201.0, 300.9):
        # independent computation: scipy quad of the exact profile over depth
        ref, err = quad(lambda z, t=t: float(profile(cell, d, z, t)), top, bottom,
                        epsabs=0.0, epsrel=1e-13, limit=200)
        ref /= bottom - top
        # 1e-8 relative: quad is accurate to ~1e-13, the closed form to rounding
        assert float(cycle(avg, t)) == pytest.approx(ref, rel=1e-8, abs=1e-12)
        got = rootzone.root_zone_mean_temperature(fit, d, top, bottom, t)
        assert float(got) == pytest.approx(ref, rel=1e-8, abs=1e-12)


@pytest.mark.parametrize("z", [0.0, 0.25, 1.7])
def test_zero_thickness_is_the_point_value(z):
    fit = one_cell(*CELL_A)
    t = np.linspace(0, YEAR, 17)
    exact = profile(CELL_A, 2.0, z, t)  # exact solution at that depth
    point = rootzone.root_zone_fit(fit, 2.0, z, z)
    np.testing.assert_allclose(cycle(point, t), exact, rtol=0, atol=1e-12)
    # a layer 1e-9 m thick: the limit is approached without cancellation; the average
    # differs from the point value by ~ thickness x dT/dz (< 1e-8 K here)
    thin = rootzone.root_zone_fit(fit, 2.0, z, z + 1e-9)
    np.testing.assert_allclose(cycle(thin, t), exact, rtol=0, atol=1e-8)
    at = rootzone.harmonics_at_depth(fit, 2.0, z)
    np.testing.assert_allclose(cycle(at, t), exact, rtol=0, atol=1e-12)


def test_depth_average_keeps_the_mean_and_damps():
    fit = one_cell(*CELL_A)
    avg = rootzone.root_zone_fit(fit, 2.0, 0.0, 1.0)
    assert float(avg.mean) == CELL_A[0]  # the periodic solution has no gradient
    amp0 = np.hypot(fit.cos_coef, fit.sin_coef)
    amp = np.hypot(avg.cos_coef, avg.sin_coef)
    assert np.all(amp < amp0)


def test_depth_average_validates_and_propagates_nan():
    fit = HarmonicFit(np.array([8.0, np.nan, 8.0, 8.0]),
                      np.array([[-9.0, -9.0, np.nan, -9.0]]), np.array([[-3.0] * 4]))
    d = np.array([2.0, 2.0, 2.0, np.nan])
    avg = rootzone.root_zone_fit(fit, d, 0.0, 0.5)
    ok = np.isfinite(cycle(avg, 10.0))
    assert ok.tolist() == [True, False, False, False]
    out = rootzone.root_zone_fit(fit, np.array([2.0, 2.0, 2.0, 0.0]), 0.0, 0.5)
    assert not np.isfinite(cycle(out, 10.0)[3])  # damping depth <= 0 -> NaN
    with pytest.raises(ValueError):
        rootzone.root_zone_fit(fit, d, 0.5, 0.2)
    with pytest.raises(ValueError):
        rootzone.root_zone_fit(fit, d, -0.1, 0.2)


def test_map_of_times_and_single_cell_broadcasting():
    fit = one_cell(*CELL_A)
    t = np.array([10.0, 200.0])[:, None]
    d = np.array([0.7, 1.5, 2.5])
    got = rootzone.root_zone_mean_temperature(fit, d, 0.0, 0.4, t)
    assert got.shape == (2, 3)
    for j, dj in enumerate(d):  # a single-cell fit against 3 damping depths
        ref = quad(lambda z, dj=dj: float(profile(CELL_A, dj, z, 200.0)), 0.0, 0.4,
                   epsabs=0.0, epsrel=1e-13)[0] / 0.4
        assert got[1, j] == pytest.approx(ref, rel=1e-8)


def test_root_zone_statistics_against_dense_sampling():
    rng = np.random.default_rng(7)  # invented cells
    n = 40
    fit = HarmonicFit(rng.uniform(-5, 15, n), rng.uniform(-10, 10, (2, n)),
                      rng.uniform(-10, 10, (2, n)))
    d = rng.uniform(0.5, 4.0, n)
    stats = rootzone.root_zone_statistics(fit, d, 0.1, 0.6)
    avg = rootzone.root_zone_fit(fit, d, 0.1, 0.6)
    t = np.linspace(0, YEAR, 365_251)[:, None]  # 0.001-day grid (independent)
    v = cycle(avg, t)
    # the sampled min/max is within T'' dt^2 / 8 < 1e-7 K of the true one, from outside
    np.testing.assert_allclose(stats["t_min"], v.min(0), atol=1e-6)
    np.testing.assert_allclose(stats["t_max"], v.max(0), atol=1e-6)
    assert np.all(stats["t_min"] <= v.min(0) + 1e-9)
    np.testing.assert_allclose(stats["t_mean"], fit.mean)


# ---------------------------------------------------------------------------------------
# threshold crossings and degree-days: brute force on a 0.001-day grid
# ---------------------------------------------------------------------------------------

DT = 0.001
T_FINE = np.arange(0.0, YEAR, DT)


def brute_force(cell, d, z, thr):
    """First upward / last downward crossing and time above, from a 0.001-day grid."""
    v = profile(cell, d, z, T_FINE)
    above = v > thr
    if not above.any():
        return rootzone.NEVER_ABOVE, rootzone.NEVER_ABOVE, 0.0
    if above.all():
        return rootzone.ALWAYS_ABOVE, rootzone.ALWAYS_ABOVE, YEAR
    nxt = np.roll(above, -1)
    up = np.flatnonzero(~above & nxt)
    down = np.flatnonzero(above & ~nxt)
    # crossing between sample i and i+1: linear interpolation of the values
    vn = np.roll(v, -1)

    def when(i):
        return T_FINE[i] + DT * (thr - v[i]) / (vn[i] - v[i])

    return 1 + when(up.min()), 1 + when(down.max()), above.mean() * YEAR


@pytest.mark.parametrize(("cell", "d", "z", "thr"), [
    (CELL_A, 2.0, 0.1, 5.0),
    (CELL_A, 2.0, 0.1, 10.0),
    (CELL_A, 1.2, 0.5, 12.0),
    (CELL_B, 2.0, 0.0, 5.0),  # large semi-annual harmonic: four crossings a year
    (CELL_B, 2.0, 0.2, 7.0),
    ((10.0, [8.0], [2.0]), 2.0, 0.3, 12.0),  # southern-hemisphere-like: warm in January
    ((4.0, [-7.0], [-2.0]), 1.5, 0.3, 5.0),  # one harmonic
])
def test_crossings_against_brute_force(cell, d, z, thr):
    fit = one_cell(*cell)
    got = rootzone.threshold_crossings(fit, d, z, thr)
    warm, cool, days = brute_force(cell, d, z, thr)
    # 0.001-day grid + linear interpolation: dates to better than 1e-5 day; days_above
    # is counted in whole samples (error <= 0.001 day per crossing). 0.005 day leaves room.
    assert float(got["warming_doy"]) == pytest.approx(warm, abs=0.005)
    assert float(got["cooling_doy"]) == pytest.approx(cool, abs=0.005)
    assert float(got["days_above"]) == pytest.approx(days, abs=0.005)


def test_four_crossings_and_southern_hemisphere_conventions():
    v = profile(CELL_B, 2.0, 0.0, T_FINE)
    above = v > 5.0
    n_changes = np.count_nonzero(above != np.roll(above, 1))
    assert n_changes == 4  # the test case really has two warm spells
    south = rootzone.threshold_crossings(one_cell(10.0, [8.0], [2.0]), 2.0, 0.3, 12.0)
    # above on January 1st: the cooling date is before the warming date
    assert float(south["cooling_doy"]) < float(south["warming_doy"])


def test_single_cell_against_several_thresholds():
    # regression: a single-cell fit (coefficients of shape (H,)) broadcast against an
    # array of thresholds must give the scalar results, not mix harmonics with cells
    fit = one_cell(0.0, [0.0, 0.0], [0.0, 1.0])
    both = rootzone.threshold_crossings(fit, 1.0, 0.0, np.array([0.0, 1.0]))
    for i, thr in enumerate((0.0, 1.0)):
        one = rootzone.threshold_crossings(fit, 1.0, 0.0, thr)
        for key in both:
            assert both[key][i] == pytest.approx(float(one[key]), abs=1e-9), key


def test_threshold_met_exactly_on_january_first():
    # T(0) equals the threshold and T falls through it at the end of the year: a crossing
    # at t = 365.25 exactly. Exact answer (half of each cycle of -sin - sin 2wt is above 0,
    # by symmetry t -> -t): days above = 365.25 / 2; checked against brute force too.
    cell = (0.0, [0.0, 0.0], [-1.0, -1.0])
    got = rootzone.threshold_crossings(one_cell(*cell), 1.0, 0.0, 0.0)
    warm, cool, days = brute_force(cell, 1.0, 0.0, 0.0)
    assert float(got["days_above"]) == pytest.approx(YEAR / 2, abs=1e-6)
    assert float(got["days_above"]) == pytest.approx(days, abs=0.005)
    assert 1.0 <= float(got["cooling_doy"]) < 1.0 + YEAR
    dd = float(rootzone.degree_days(one_cell(*cell), 1.0, 0.0, 0.0))
    ref = quad(lambda s: max(float(profile(cell, 1.0, 0.0, s)), 0.0), 0.0, YEAR,
               limit=500, epsabs=1e-10)[0]  # independent: scipy quad
    assert dd == pytest.approx(ref, abs=1e-6)


def test_empty_input():
    fit = HarmonicFit(np.zeros(0), np.zeros((2, 0)), np.zeros((2, 0)))
    got = rootzone.threshold_crossings(fit, np.zeros(0) + 1.0, 0.1, 5.0)
    assert got["days_above"].shape == (0,)
    assert rootzone.degree_days(fit, np.zeros(0) + 1.0, 0.1, 5.0).shape == (0,)


def test_codes_never_and_always():
    fit = HarmonicFit(np.array([2.0, 20.0, 5.0]), np.array([[3.0, 3.0, 0.0]]),
                      np.array([[0.0, 0.0, 0.0]]))
    got = rootzone.threshold_crossings(fit, 2.0, 0.1, 10.0)
    assert got["warming_doy"].tolist()[:2] == [rootzone.NEVER_ABOVE, rootzone.ALWAYS_ABOVE]
    assert got["cooling_doy"].tolist()[:2] == [rootzone.NEVER_ABOVE, rootzone.ALWAYS_ABOVE]
    assert got["days_above"].tolist() == [0.0, YEAR, 0.0]
    assert rootzone.NEVER_ABOVE < 1 and rootzone.ALWAYS_ABOVE < 1  # never a day of year
    dd = rootzone.degree_days(fit, 2.0, 0.1, 10.0)
    # always above: DD = (mean - base) x 365.25 exactly (the harmonics integrate to zero)
    assert dd.tolist() == pytest.approx([0.0, 10.0 * YEAR, 0.0], abs=1e-9)


def test_nan_in_nan_out():
    fit = HarmonicFit(np.array([8.0, np.nan, 8.0, 8.0, 8.0]),
                      np.array([[-9.0, -9.0, np.nan, -9.0, -9.0]]), np.array([[-3.0] * 5]))
    d = np.array([2.0, 2.0, 2.0, np.nan, -1.0])
    got = rootzone.threshold_crossings(fit, d, 0.1, 5.0)
    for key in ("warming_doy", "cooling_doy", "days_above"):
        assert np.isfinite(got[key]).tolist() == [True, False, False, False, False], key
    dd = rootzone.degree_days(fit, d, 0.1, 5.0)
    assert np.isfinite(dd).tolist() == [True, False, False, False, False]
    stats = rootzone.root_zone_statistics(fit, d, 0.0, 0.3)
    for key, val in stats.items():
        assert np.isfinite(val).tolist() == [True, False, False, False, False], key


@pytest.mark.parametrize(("cell", "d", "z", "base"), [
    (CELL_A, 2.0, 0.1, 5.0),
    (CELL_A, 0.9, 0.5, 10.0),
    (CELL_B, 2.0, 0.0, 5.0),
    ((10.0, [8.0], [2.0]), 2.0, 0.3, 12.0),
])
def test_degree_days_against_direct_integration(cell, d, z, base):
    got = float(rootzone.degree_days(one_cell(*cell), d, z, base))
    # independent 1: trapezoid of max(T - base, 0) on a 1e-4-day periodic grid
    # (error ~ dt^2 x curvature x year, plus the kink at crossings: < 1e-5 degC day)
    t = np.linspace(0.0, YEAR, 3_652_501)
    f = np.maximum(profile(cell, d, z, t) - base, 0.0)
    trap = float(np.sum(0.5 * (f[1:] + f[:-1])) * (t[1] - t[0]))
    assert got == pytest.approx(trap, abs=1e-4)
    # independent 2: scipy quad with the kinks (brute-force crossings) as break points
    kinks = T_FINE[np.flatnonzero(np.diff(profile(cell, d, z, T_FINE) > base))]
    ref, _ = quad(lambda s: max(float(profile(cell, d, z, s)) - base, 0.0), 0.0, YEAR,
                  points=kinks.tolist() or None, limit=500, epsabs=1e-9, epsrel=1e-12)
    assert got == pytest.approx(ref, abs=1e-6)  # quad converges to ~1e-9 here


def test_map_shapes_and_point_equals_map_cell():
    rng = np.random.default_rng(3)  # invented map
    shape = (5, 7)
    fit = HarmonicFit(rng.uniform(0, 14, shape), rng.uniform(-9, 9, (2, *shape)),
                      rng.uniform(-9, 9, (2, *shape)))
    d = rng.uniform(0.8, 3.0, shape)
    got = rootzone.threshold_crossings(fit, d, 0.2, 5.0)
    dd = rootzone.degree_days(fit, d, 0.2, 5.0)
    assert got["days_above"].shape == shape and dd.shape == shape
    j, i = 3, 4
    cell = HarmonicFit(fit.mean[j, i], fit.cos_coef[:, j, i], fit.sin_coef[:, j, i])
    one = rootzone.threshold_crossings(cell, d[j, i], 0.2, 5.0)
    for key in got:
        assert float(one[key]) == pytest.approx(got[key][j, i], abs=1e-9)
    assert float(rootzone.degree_days(cell, d[j, i], 0.2, 5.0)) == pytest.approx(
        dd[j, i], abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(mean=st.floats(-5, 20), a1=st.floats(-12, 12), b1=st.floats(-12, 12),
       a2=st.floats(-2, 2), b2=st.floats(-2, 2), d=st.floats(0.3, 5.0),
       z=st.floats(0.0, 2.0), thr=st.floats(-2, 15))
def test_invariants(mean, a1, b1, a2, b2, d, z, thr):
    fit = one_cell(mean, [a1, a2], [b1, b2])
    got = rootzone.threshold_crossings(fit, d, z, np.array([thr, thr + 1.0]))
    days = got["days_above"]
    # time above a threshold is within [0, year] and never grows with the threshold
    assert np.all((days >= 0) & (days <= YEAR))
    assert days[1] <= days[0] + 1e-9
    dd = rootzone.degree_days(fit, d, z, thr)
    assert dd >= 0
    # degree-days are bounded by (max - base) x days above (physics: definition)
    stats = rootzone.root_zone_statistics(fit, d, z, z)
    assert dd <= max(float(stats["t_max"]) - thr, 0.0) * days[0] + 1e-6
    # the root-zone amplitude never exceeds the surface range
    avg = rootzone.root_zone_statistics(fit, d, 0.0, z + 0.1)
    surf = rootzone.root_zone_statistics(fit, d, 0.0, 0.0)
    assert float(avg["t_max"]) <= float(surf["t_max"]) + 1e-9
    assert float(avg["t_min"]) >= float(surf["t_min"]) - 1e-9


# ------------------------------------------------------------------ kernel, end to end
# Reference: the physics functions called on the inputs of one cell read directly from
# the test files (an independent path from the block pipeline: no windows, no kernel).


def test_run_recipe_root_zone_and_thresholds(tmp_path):
    files = make_case(tmp_path)
    recipe = write_recipe(
        tmp_path, files, depths=[0.1, 0.3],
        outputs=["t_mean", "root_zone_t_mean", "root_zone_t_min", "root_zone_t_max",
                 "warming_doy", "cooling_doy", "days_above", "degree_days"],
        root_zone={"top": 0.0, "bottom": 0.3},
        thresholds={"depth": 0.1, "values": [5, 10], "degree_day_base": 5})
    result = run_recipe(recipe, tmp_path / "out")

    def read(name: str) -> np.ndarray:
        path = Path(result.outputs[name])
        assert path.exists()
        with rasterio.open(path) as src:
            return src.read().astype(np.float64)

    maps = {n: read(n) for n in result.outputs}
    for name in ("root_zone_t_mean", "root_zone_t_min", "root_zone_t_max", "degree_days"):
        assert maps[name].shape[0] == 1
    for name in ("warming_doy", "cooling_doy", "days_above"):
        assert maps[name].shape[0] == 2  # one band per threshold
    with rasterio.open(result.outputs["warming_doy"]) as src:
        assert src.tags()["code_never_above"].startswith("-1")

    row, col = 40, 60
    with rasterio.open(files["surface_temperature"]) as src:
        t12 = src.read()[:, row, col].astype(np.float64)
    cell = {}
    for name in ("sand", "clay", "water_content"):
        with rasterio.open(files[name]) as src:
            cell[name] = float(src.read(1)[row, col])
    props = properties.soil_thermal_properties(
        np.array([cell["sand"] / 100]), np.array([cell["clay"] / 100]),
        np.array([cell["water_content"]]), np.array([1450.0]), np.array([0.02]))
    fit = harmonics.fit_harmonics(t12.reshape(12, 1), 2)
    d = periodic.damping_depth(props["diffusivity_m2_s"])
    rz_stats = rootzone.root_zone_statistics(fit, d, 0.0, 0.3)
    # float32 maps: 1e-5 relative plus 1e-4 absolute for rounding of the stored value
    for key in ("t_mean", "t_min", "t_max"):
        assert maps[f"root_zone_{key}"][0, row, col] == pytest.approx(
            rz_stats[key][0], rel=1e-5, abs=1e-4)
    for i, thr in enumerate((5.0, 10.0)):
        ref = rootzone.threshold_crossings(fit, d, 0.1, thr)
        for key in ("warming_doy", "cooling_doy", "days_above"):
            assert maps[key][i, row, col] == pytest.approx(ref[key][0], rel=1e-5, abs=1e-3)
    ref_dd = rootzone.degree_days(fit, d, 0.1, 5.0)[0]
    assert maps["degree_days"][0, row, col] == pytest.approx(ref_dd, rel=1e-5)
    # nodata hole of make_case stays nodata
    assert np.isnan(maps["days_above"][:, 11, 22]).all()


def test_dask_stays_lazy_and_xarray_keeps_coordinates():
    # the same numbers as numpy: the same kernels run on each chunk of cells (the lazy
    # harmonic fit itself may round differently in the last bit: 1e-12 K, 1e-9 day)
    import dask.array as da
    import xarray as xr

    rng = np.random.default_rng(5)
    monthly = rng.normal(6.0, 9.0, (12, 4, 6))
    fit = harmonics.fit_harmonics(monthly, 2)
    d = rng.uniform(1.5, 3.0, (4, 6))
    thr = rng.uniform(3.0, 8.0, (4, 6))
    lazy_fit = harmonics.fit_harmonics(da.from_array(monthly, chunks=(12, 2, 3)), 2)
    lazy_d = da.from_array(d, chunks=(2, 3))
    calls = [
        (rootzone.root_zone_statistics, (0.1, 0.5)),
        (rootzone.threshold_crossings, (0.5, thr)),
        (rootzone.degree_days, (0.5, thr)),
    ]
    coords = {"y": np.arange(4.0), "x": np.arange(6.0) * 30}
    for fn, args in calls:
        ref = fn(fit, d, *args)
        lazy = fn(lazy_fit, lazy_d, args[0], da.from_array(args[1]) if np.ndim(args[1])
                  else args[1])
        on_xr = fn(fit, xr.DataArray(d, dims=("y", "x"), coords=coords), *args)
        pairs = ([(ref[k], lazy[k], on_xr[k]) for k in ref] if isinstance(ref, dict)
                 else [(ref, lazy, on_xr)])
        for r, lz, x in pairs:
            assert isinstance(lz, da.Array)
            np.testing.assert_allclose(lz.compute(), r, rtol=0, atol=1e-9)
            assert x.dims == ("y", "x") and list(x["x"].values) == list(coords["x"])
            np.testing.assert_array_equal(x.values, r)


def test_lazy_inputs_by_keyword_and_their_chunks_are_kept():
    import dask.array as da
    import xarray as xr

    rng = np.random.default_rng(6)
    fit = harmonics.fit_harmonics(rng.normal(6.0, 9.0, (12, 4, 6)), 2)
    d = rng.uniform(1.5, 3.0, (4, 6))
    thr = rng.uniform(3.0, 8.0, (4, 6))
    ref = rootzone.degree_days(fit, d, 0.5, thr)
    lazy_thr = da.from_array(thr, chunks=(2, 3))
    lazy = rootzone.degree_days(fit, d, depth_m=0.5, base_degC=lazy_thr)
    assert isinstance(lazy, da.Array) and lazy.numblocks == (2, 2)  # the map's chunks
    np.testing.assert_array_equal(lazy.compute(), ref)
    crossing = rootzone.threshold_crossings(fit, damping_depth_m=d, depth_m=0.5,
                                            threshold_degC=xr.DataArray(thr, dims=("y", "x")))
    assert crossing["days_above"].dims == ("y", "x")
    # coefficients labelled with the harmonic dim last are found by its name
    lab = HarmonicFit(xr.DataArray(fit.mean, dims=("y", "x")),
                      xr.DataArray(np.moveaxis(fit.cos_coef, 0, -1), dims=("y", "x", "harmonic")),
                      xr.DataArray(np.moveaxis(fit.sin_coef, 0, -1), dims=("y", "x", "harmonic")))
    np.testing.assert_array_equal(periodic.frost_depth_conduction(lab, d).values,
                                  periodic.frost_depth_conduction(fit, d))
