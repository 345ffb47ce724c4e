"""End-to-end frost runs on small invented rasters (tests/conftest.py helpers).

Checks: contract file names, uint8 frost_class with a legend, thaw_depth nodata where the
ground does not stay frozen at depth, one map cell equal to the direct physics computation,
and the design outputs of a multi-year (36-band) input.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import rasterio

from geothermmap import run_recipe
from geothermmap.kernel_frost import solver_grid
from geothermmap.physics import freezethaw, frost, harmonics, properties
from tests.conftest import make_case, write_recipe, write_tif

FROST_FILES = [
    "frost_depth_latent", "thaw_depth", "frozen_days", "t_min_latent", "t_max_latent",
    "freezing_index", "frost_depth_stefan", "frost_depth_berggren", "frost_class",
]
MULTI_FILES = ["design_freezing_index", "design_frost_depth", "frost_depth_winters"]
DEPTHS = [0.1, 0.5, 1.0, 2.0]


def _read(path: Path) -> tuple[np.ndarray, dict, object]:
    with rasterio.open(path) as ds:
        return ds.read(masked=True), ds.tags(), ds


@pytest.fixture(scope="module")
def single_year(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("frost1")
    files = make_case(tmp, width=40, height=30)
    recipe = write_recipe(tmp, files, freeze_thaw={"enabled": True}, depths=DEPTHS)
    return run_recipe(recipe, tmp / "out"), files


def test_files_and_tags(single_year):
    res, _ = single_year
    for name in FROST_FILES:
        path = res.output_dir / f"{name}.tif"
        assert path.exists(), name
        with rasterio.open(path) as ds:
            tags = ds.tags()
            assert "Screening estimate" in tags["caution"], name
            if name == "frost_class":
                assert ds.dtypes[0] == "uint8"
                assert tags["class_1"] == "no frost" and tags["class_1_color"].startswith("#")
                assert "frozen at depth" in tags["class_7"]
    for name in MULTI_FILES:  # a 12-band input has no design outputs
        assert not (res.output_dir / f"{name}.tif").exists()


def test_thaw_depth_only_where_frozen_at_depth(single_year):
    res, _ = single_year
    thaw, _, _ = _read(res.output_dir / "thaw_depth.tif")
    cls, _, _ = _read(res.output_dir / "frost_class.tif")
    frozen_at_depth = cls[0].filled(0) == 7
    assert frozen_at_depth.any() and (~frozen_at_depth & ~cls[0].mask).any()
    np.testing.assert_array_equal(~thaw[0].mask, frozen_at_depth)
    days, _, _ = _read(res.output_dir / "frozen_days.tif")
    fd, _, _ = _read(res.output_dir / "frost_depth_latent.tif")
    # never-freezing cells: frost depth 0 and no frozen days
    calm = (cls[0].filled(0) == 1)
    assert calm.any()
    assert np.all(fd[0][calm] == 0.0) and np.all(days[:, calm] == 0.0)


def test_point_equals_direct_physics(single_year):
    res, files = single_year
    row, col = 25, 5  # a cold cell with seasonal frost (invented data, see make_case)
    vals = {}
    for key in ("surface_temperature", "sand", "clay", "water_content"):
        with rasterio.open(files[key]) as ds:
            vals[key] = ds.read()[:, row, col].astype(np.float64)
    sand, clay, water = vals["sand"][0] / 100, vals["clay"][0] / 100, vals["water_content"][0]
    args = (sand, clay, water, 1450.0, 0.02)
    unf = properties.soil_thermal_properties(*args)
    frz = properties.soil_thermal_properties(*args, frozen=True)
    fit = harmonics.fit_harmonics(vals["surface_temperature"][:, None], 2)
    daily = freezethaw.daily_forcing_from_harmonics(fit.mean, fit.cos_coef, fit.sin_coef)
    r = freezethaw.solve_freeze_thaw(
        daily, unf["conductivity_w_mk"], frz["conductivity_w_mk"], unf["heat_capacity_j_m3k"],
        frz["heat_capacity_j_m3k"], water, DEPTHS, bottom_heat_flux_w_m2=0.06,
        dt_days=365.25 / 365, grid_m=solver_grid(DEPTHS))
    fi, _ = frost.freezing_index_per_winter(daily, 365, 365.25 / 365)
    assert r.frost_depth_m[0] > 0.0
    fd, _, _ = _read(res.output_dir / "frost_depth_latent.tif")
    tmin, _, _ = _read(res.output_dir / "t_min_latent.tif")
    fmap, _, _ = _read(res.output_dir / "freezing_index.tif")
    # float32 storage of the maps: relative 1e-6
    assert float(fd[0, row, col]) == pytest.approx(float(r.frost_depth_m[0]), rel=1e-5)
    np.testing.assert_allclose(tmin[:, row, col], r.t_min_degC[:, 0], rtol=1e-5, atol=1e-5)
    assert float(fmap[0, row, col]) == pytest.approx(float(fi[0, 0]), rel=1e-5)


def test_multi_year_design_outputs(tmp_path):
    files = make_case(tmp_path, width=24, height=20, nodata_hole=False)
    with rasterio.open(files["surface_temperature"]) as ds:
        t12, crs, tr = ds.read(), ds.crs, ds.transform
    # three invented winters: mild, cold, medium (offsets of the whole year)
    t36 = np.concatenate([t12 + 1.5, t12 - 2.0, t12]).astype(np.float32)
    files["surface_temperature"] = write_tif(tmp_path / "t36.tif", t36, crs, tr)
    recipe = write_recipe(tmp_path, files, freeze_thaw={"enabled": True}, depths=DEPTHS)
    res = run_recipe(recipe, tmp_path / "out")
    for name in FROST_FILES + MULTI_FILES:
        assert (res.output_dir / f"{name}.tif").exists(), name
    fi, _, _ = _read(res.output_dir / "freezing_index.tif")
    dfi, _, _ = _read(res.output_dir / "design_freezing_index.tif")
    winters, _, _ = _read(res.output_dir / "frost_depth_winters.tif")
    design, _, _ = _read(res.output_dir / "design_frost_depth.tif")
    assert fi.shape[0] == 3 and winters.shape[0] == 3
    # the invented region has northern winters (coldest month January): band 1 would be
    # the record's first Jan-Jun joined to its first Jul-Dec, not a winter -> nodata
    assert fi[0].mask.all() and winters[0].mask.all()
    # bands 2 and 3: degree-days below 0 degC from July 1st (day 181 of a 365-day year)
    # to June 30th of the next year, summed by hand from the daily forcing
    daily = freezethaw.daily_forcing_from_monthly(t36.reshape(36, -1).astype(np.float64))
    for band in (1, 2):
        window = daily[181 + 365 * (band - 1): 181 + 365 * band]
        by_hand = np.maximum(-window, 0.0).sum(axis=0).reshape(fi.shape[1:])
        np.testing.assert_allclose(fi[band], by_hand, rtol=1e-5, atol=1e-3)
    # the design index is the mean of the (up to) 3 coldest complete winters (U.S. Army
    # practice), here both complete ones; float32 storage
    np.testing.assert_allclose(dfi[0], fi[1:].mean(axis=0), rtol=1e-5, atol=1e-3)
    np.testing.assert_allclose(design[0], winters[1:].mean(axis=0), rtol=1e-5, atol=1e-5)


def _block_inputs(n_months: int = 12, air: bool = False) -> dict[str, np.ndarray]:
    """Invented block: 6 x 8 cells from warm (no frost) to cold (frozen at depth)."""
    rows, cols = 6, 8
    yy, xx = np.mgrid[0:rows, 0:cols]
    mean = 12.5 - 2.2 * xx - 0.3 * yy
    mid = (np.arange(n_months) + 0.5) * 365.25 / 12
    t = mean[None] - 11.0 * np.cos(2 * np.pi * (mid - 15.0) / 365.25)[:, None, None]
    t = t + 0.5 * np.sin(np.arange(n_months) * 0.7)[:, None, None]  # year-to-year noise
    inputs = {
        "surface_temperature": t.astype(np.float32),
        "sand": np.full((1, rows, cols), 0.4, np.float32),
        "clay": np.full((1, rows, cols), 0.2, np.float32),
        "water_content": (0.1 + 0.04 * yy[None]).astype(np.float32),
        "bulk_density": np.full((1, rows, cols), 1450.0, np.float32),
        "organic_matter": np.full((1, rows, cols), 0.02, np.float32),
    }
    if air:
        inputs["n_factor_freezing"] = np.full((1, rows, cols), 0.6, np.float32)
        inputs["n_factor_thawing"] = np.full((1, rows, cols), 1.2, np.float32)
    return inputs


def _config(n_years: int, kind: str = "ground"):
    from geothermmap.kernel import KernelConfig
    from geothermmap.outputs import OUTPUTS

    names = tuple(n for n, o in OUTPUTS.items()
                  if o.group == "freeze_thaw" or (n_years > 1 and o.group == "multi_year"))
    return KernelConfig(outputs=names, depths_m=tuple(DEPTHS), extras={
        "freeze_thaw": {"enabled": True, "freezing_range": (-1.0, 0.0),
                        "bottom_heat_flux": 0.06, "years": "auto"},
        "surface_kind": kind, "frost_classes": [0.5, 1.0, 1.5, 2.0], "n_years": n_years})


@pytest.mark.parametrize("n_years", [1, 3])
def test_block_split_equals_whole(n_years):
    # chunked equals unchunked: a cell's result must not depend on the block around it
    from geothermmap.kernel import compute_block

    inputs = _block_inputs(12 * n_years)
    cfg = _config(n_years)
    whole = compute_block(inputs, cfg).outputs
    left = compute_block({k: v[:, :, :3] for k, v in inputs.items()}, cfg).outputs
    right = compute_block({k: v[:, :, 3:] for k, v in inputs.items()}, cfg).outputs
    for name, arr in whole.items():
        np.testing.assert_array_equal(arr, np.concatenate([left[name], right[name]], axis=2),
                                      err_msg=name)
    cls = whole["frost_class"][0]
    assert {1, 7} <= set(np.unique(cls).tolist())  # warm and frozen-at-depth cells present


def test_air_input_uses_n_factors():
    # Lunardini (1978) definition: surface freezing index = n_f x air freezing index
    from geothermmap.kernel import compute_block

    ground = compute_block(_block_inputs(), _config(1)).outputs
    air = compute_block(_block_inputs(air=True), _config(1, "air")).outputs
    fi_g, fi_a = ground["freezing_index"][0], air["freezing_index"][0]
    np.testing.assert_allclose(fi_a, 0.6 * fi_g, rtol=1e-5)  # float32 storage
    cold = fi_g > 0
    assert np.all(air["frost_depth_stefan"][0][cold] < ground["frost_depth_stefan"][0][cold])


def test_air_input_drives_the_periodic_outputs_too():
    # With kind: air every output refers to the ground surface: the periodic t_mean is
    # the mean of the n-factored daily cycle (frost.ground_surface_harmonics), not the
    # air mean; the freeze-thaw outputs keep using the daily n-factored series itself.
    from geothermmap.kernel import KernelConfig, compute_block
    from geothermmap.physics import frost as fr

    inputs = _block_inputs(air=True)
    cfg = KernelConfig(outputs=("t_mean", "t_min"), depths_m=(0.5,),
                       extras={"surface_kind": "air"})
    got = compute_block(inputs, cfg).outputs["t_mean"][0].ravel()
    air = harmonics.fit_harmonics(
        inputs["surface_temperature"].reshape(12, -1).astype(np.float64), 2)
    want = fr.ground_surface_harmonics(air, 0.6, 1.2).mean
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-5)  # float32 storage
    ground = compute_block(inputs, KernelConfig(outputs=("t_mean",), depths_m=(0.5,)))
    assert not np.allclose(got, ground.outputs["t_mean"][0].ravel())


def test_raster_n_factors_under_surface(tmp_path):
    # Contract: each n-factor under `surface:` is a constant or a raster path
    files = make_case(tmp_path, width=40, height=30)
    with rasterio.open(files["sand"]) as ds:
        shape, crs, transform = (ds.height, ds.width), ds.crs, ds.transform
    nf = write_tif(tmp_path / "nf.tif", np.full(shape, 0.5, np.float32), crs, transform)
    recipe = write_recipe(tmp_path, files, outputs=["t_mean"],
                          surface={"kind": "air", "n_factor_freezing": str(nf),
                                   "n_factor_thawing": {"path": str(nf), "units": "1"}})
    res = run_recipe(recipe, tmp_path / "out")
    half, _, _ = _read(res.outputs["t_mean"])
    ground = run_recipe(write_recipe(tmp_path, files, outputs=["t_mean"]), tmp_path / "g")
    full, _, _ = _read(ground.outputs["t_mean"])
    np.testing.assert_allclose(half, 0.5 * full, rtol=1e-5, atol=1e-5)  # n_f = n_t = 0.5
    with rasterio.open(res.outputs["t_mean"]) as ds:
        assert "n-factors" in ds.tags()["surface"]


def test_analytic_shortcut_matches_solver_for_warm_cells():
    # Never-freezing cells take the periodic analytic solution (Carslaw & Jaeger 1959
    # Sec. 2.6) plus the geothermal gradient q z / k; the numerical run of the same cells
    # must agree. 0.05 K: backward-Euler damping of daily steps (0.02 K seen at 2 m).
    from geothermmap.kernel_frost import _analytic_extremes

    n, k, c, q = 3, 1.3, 2.4e6, 0.06
    mean = np.array([8.0, 11.0, 14.0])
    ts = freezethaw.daily_forcing_from_harmonics(
        mean, np.full((2, n), [[-7.0], [0.5]]), np.full((2, n), [[-2.0], [0.3]]))
    dt = 365.25 / 365
    d1 = np.full(n, np.sqrt(2 * k / c / (2 * np.pi / (365.25 * 86400))))
    r = freezethaw.solve_freeze_thaw(ts, k, 1.8, c, 1.9e6, 0.25, DEPTHS,
                                     grid_m=solver_grid(DEPTHS), dt_days=dt,
                                     bottom_heat_flux_w_m2=q)
    lo, hi = _analytic_extremes(ts, d1, np.full(n, k), np.full(n, q), DEPTHS, dt)
    np.testing.assert_allclose(r.t_min_degC, lo, atol=0.05)
    np.testing.assert_allclose(r.t_max_degC, hi, atol=0.05)


def test_winters_follow_the_cold_season():
    # Convention of kernel_frost: northern-winter cells (coldest month Oct..Mar) count
    # freezing seasons July 1st .. June 30th, other cells calendar years (day index by hand:
    # Jan..Jun of a 365-day year are 181 days)
    from geothermmap.kernel_frost import _season_shift

    days = np.arange(3 * 365, dtype=np.float64)
    daily = np.stack([days, days], axis=1)
    monthly = np.zeros((12, 2))
    monthly[0, 0] = -5.0  # cell 0: coldest in January
    monthly[6, 1] = -5.0  # cell 1: coldest in July
    out = _season_shift(daily, monthly)
    np.testing.assert_array_equal(out[:, 1], days)
    season2 = out[365:730, 0]  # second season: July 1st of year 1 .. June 30th of year 2
    assert season2[0] == 181 and season2[183] == 364 and season2[184] == 365
    assert season2[-1] == 365 + 180
    assert out[0, 0] == 181 and out[184, 0] == 0  # first season: year 1's autumn stands in
