"""End-to-end checks of the pipeline on small synthetic rasters.

The reference for "point equals map cell" is an independent computation: the physics
functions called on the inputs of that one cell, read directly from the files (same-grid
case) or reprojected whole with ``rasterio.warp.reproject`` (multi-CRS case).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.enums import Resampling
from rasterio.warp import reproject
from rio_cogeo.cogeo import cog_validate

from geothermmap import run_recipe
from geothermmap.outputs import OUTPUTS
from geothermmap.physics import harmonics, periodic, properties
from tests.conftest import make_case, write_recipe

CORE = [n for n, o in OUTPUTS.items() if o.group == "core"]


def _read(path: Path) -> np.ndarray:
    with rasterio.open(path) as src:
        return src.read().astype(np.float64)


def _point(t12, sand, clay, water, bd=1450.0, om=0.02, depths=(0.1, 0.5, 1.0, 2.0), h=2):
    props = properties.soil_thermal_properties(
        np.array([sand]), np.array([clay]), np.array([water]), np.array([bd]), np.array([om]))
    fit = harmonics.fit_harmonics(np.asarray(t12, dtype=np.float64).reshape(12, 1), h)
    d = periodic.damping_depth(props["diffusivity_m2_s"])
    stats = periodic.depth_statistics(fit, d, np.asarray(depths))
    return props, d, stats


def test_outputs_are_cogs_on_the_target_grid(same_grid_case, tmp_path):
    recipe, files = same_grid_case
    result = run_recipe(recipe, tmp_path / "out")
    with rasterio.open(files["surface_temperature"]) as t:
        crs, transform, shape = t.crs, t.transform, t.shape
    assert set(result.outputs) == set(CORE)
    for name, path in result.outputs.items():
        assert path.name == f"{name}.tif"
        with rasterio.open(path) as src:
            assert src.crs == crs and src.transform == transform and src.shape == shape
            assert src.dtypes[0] == "float32"
            assert src.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"
            assert src.compression is not None
            assert src.overviews(1), "COG must carry overviews"
            assert src.nodata is not None and np.isnan(src.nodata)
        valid, errors, _ = cog_validate(str(path))  # rio-cogeo's COG layout rules
        assert valid and not errors, (name, errors)
        with rasterio.open(path) as src:
            tags = src.tags()
            assert tags["units"] == OUTPUTS[name].units and tags["description"]
            if OUTPUTS[name].per_depth:
                assert src.count == 4
                assert [d for d in src.descriptions] == [
                    "depth 0.1 m", "depth 0.5 m", "depth 1 m", "depth 2 m"]
            else:
                assert src.count == 1
            if OUTPUTS[name].frost:
                assert "licensed" in tags["caution"]
    leftovers = [p for p in (tmp_path / "out").rglob("*") if "partial" in p.name]
    assert not leftovers
    assert not (tmp_path / "out" / ".geothermmap-work").exists()


def test_point_equals_map_cell_same_grid(same_grid_case, tmp_path):
    recipe, files = same_grid_case
    result = run_recipe(recipe, tmp_path / "out")
    t = _read(files["surface_temperature"])
    sand = _read(files["sand"])[0] / 100
    clay = _read(files["clay"])[0] / 100
    water = _read(files["water_content"])[0]
    maps = {n: _read(p) for n, p in result.outputs.items()}
    for r, c in [(0, 0), (5, 60), (33, 17), (69, 89), (40, 45)]:
        props, d, stats = _point(t[:, r, c], sand[r, c], clay[r, c], water[r, c])
        # float32 storage: relative 1e-6
        np.testing.assert_allclose(maps["conductivity"][0, r, c], props["conductivity_w_mk"][0],
                                   rtol=1e-6)
        np.testing.assert_allclose(maps["damping_depth"][0, r, c], d[0], rtol=1e-6)
        for key in ("t_min", "t_max", "amplitude", "phase_lag", "t_mean"):
            np.testing.assert_allclose(maps[key][:, r, c], stats[key][:, 0], rtol=1e-5,
                                       atol=1e-5)


def test_nodata_propagates_to_every_output(same_grid_case, tmp_path):
    recipe, _ = same_grid_case
    result = run_recipe(recipe, tmp_path / "out")
    for path in result.outputs.values():
        data = _read(path)
        assert np.isnan(data[:, 10:14, 20:25]).all()
        assert np.isfinite(data[:, 30:40, 30:40]).all()
    assert result.counts["nodata_cells"] == 4 * 5


def test_chunked_equals_unchunked(tmp_path):
    files = make_case(tmp_path)
    a = run_recipe(write_recipe(tmp_path, files, chunk=64), tmp_path / "a")
    b = run_recipe(write_recipe(tmp_path, files, chunk=512), tmp_path / "b")
    for name in a.outputs:
        np.testing.assert_array_equal(_read(a.outputs[name]), _read(b.outputs[name]))


def test_multi_crs_inputs_are_aligned_to_the_temperature_grid(multi_crs_case, tmp_path):
    recipe, files = multi_crs_case
    result = run_recipe(recipe, tmp_path / "out")
    with rasterio.open(files["surface_temperature"]) as t:
        grid = (t.crs, t.transform, t.shape)
        t_data = t.read().astype(np.float64)
    aligned = {}
    for name in ("sand", "clay", "water_content"):
        with rasterio.open(files[name]) as src:
            dst = np.full(grid[2], np.nan, dtype=np.float32)
            # independent whole-raster reprojection with the same resampling
            reproject(rasterio.band(src, 1), dst, dst_transform=grid[1], dst_crs=grid[0],
                      resampling=Resampling.bilinear, dst_nodata=np.nan)
            aligned[name] = dst.astype(np.float64)
    cond = _read(result.outputs["conductivity"])[0]
    for path in result.outputs.values():
        with rasterio.open(path) as src:
            assert (src.crs, src.transform, src.shape) == grid
    for r, c in [(3, 3), (35, 50), (60, 80)]:
        props, _, _ = _point(t_data[:, r, c], aligned["sand"][r, c] / 100,
                             aligned["clay"][r, c] / 100, aligned["water_content"][r, c])
        # GDAL's warper and reproject() share the kernel but not the approximate transformer
        # grid (0.125 px error budget): on these linear ramps that is < 0.5 % in conductivity
        np.testing.assert_allclose(cond[r, c], props["conductivity_w_mk"][0], rtol=5e-3)


def test_explicit_grid_is_honoured(tmp_path):
    files = make_case(tmp_path)
    grid = {"crs": "EPSG:32633", "resolution": 200, "bounds": [501000, 5194000, 508000, 5199000]}
    result = run_recipe(write_recipe(tmp_path, files, grid=grid), tmp_path / "out")
    with rasterio.open(result.outputs["t_mean"]) as src:
        assert src.shape == (25, 35)
        assert src.transform.a == 200 and src.transform.e == -200
        assert (src.transform.c, src.transform.f) == (501000, 5199000)


def test_run_record(same_grid_case, tmp_path):
    recipe, files = same_grid_case
    result = run_recipe(recipe, tmp_path / "out")
    rec = json.loads((tmp_path / "out" / "run_record.json").read_text())
    assert rec["status"] == "complete"
    assert rec["recipe"]["harmonics"] == 2 and rec["recipe"]["depths"] == [0.1, 0.5, 1.0, 2.0]
    assert rec["versions"]["rasterio"] and rec["versions"]["gdal"]
    sha = rec["inputs"]["surface_temperature"]["files"][0]["sha256"]
    assert len(sha) == 64
    stats = rec["outputs"]["t_mean"]["bands"][0]
    data = _read(result.outputs["t_mean"])[0]
    assert stats["count"] == np.isfinite(data).sum()
    np.testing.assert_allclose(stats["mean"], np.nanmean(data), rtol=1e-6)
    assert "compute_s" in rec["timings"]
    assert set(rec["files"]) == {f"{n}.tif" for n in CORE}


def test_run_record_names_the_units_assumed(tmp_path):
    import yaml

    files = make_case(tmp_path, width=40, height=30)
    recipe = write_recipe(tmp_path, files)
    data = yaml.safe_load(recipe.read_text())
    for spec in data["inputs"].values():
        spec.pop("units", None)  # every input on its default unit
    data["inputs"]["bulk_density"]["value"] = 1.45
    recipe.write_text(yaml.safe_dump(data))
    rec = run_recipe(recipe, tmp_path / "out").record
    units = {k: v["units"] for k, v in rec["recipe"]["inputs"].items()}
    assert units == {"surface_temperature": "degC", "sand": "percent", "clay": "percent",
                     "water_content": "m3 m-3", "bulk_density": "g cm-3",
                     "organic_matter": "percent"}


@pytest.mark.slow
def test_threaded_equals_local_cluster(same_grid_case, tmp_path):
    recipe, _ = same_grid_case
    a = run_recipe(recipe, tmp_path / "threads")
    b = run_recipe(recipe, tmp_path / "cluster", workers=2)
    for name in a.outputs:
        np.testing.assert_array_equal(_read(a.outputs[name]), _read(b.outputs[name]))


def test_twelve_single_band_files_equal_one_twelve_band_file(tmp_path):
    files = make_case(tmp_path, width=40, height=30)
    with rasterio.open(files["surface_temperature"]) as src:
        profile = src.profile
        data = src.read()
    monthly = []
    for m in range(12):
        path = tmp_path / f"t_{m + 1:02d}.tif"
        with rasterio.open(path, "w", **{**profile, "count": 1}) as dst:
            dst.write(data[m:m + 1])
        monthly.append(str(path))
    a = run_recipe(write_recipe(tmp_path, files), tmp_path / "a")
    recipe = write_recipe(tmp_path, files)
    import yaml

    spec = yaml.safe_load(recipe.read_text())
    spec["inputs"]["surface_temperature"] = {"path": monthly, "units": "degC"}
    recipe.write_text(yaml.safe_dump(spec))
    b = run_recipe(recipe, tmp_path / "b")
    for name in a.outputs:
        np.testing.assert_array_equal(_read(a.outputs[name]), _read(b.outputs[name]))


def test_kelvin_input_equals_celsius_input(tmp_path):
    files = make_case(tmp_path, width=40, height=30, nodata_hole=False)
    with rasterio.open(files["surface_temperature"]) as src:
        profile = src.profile
        data = src.read().astype(np.float64) + 273.15
    path = tmp_path / "tk.tif"
    with rasterio.open(path, "w", **{**profile, "nodata": None}) as dst:
        dst.write(data.astype(np.float32))
    a = run_recipe(write_recipe(tmp_path, files), tmp_path / "a")
    import yaml

    recipe = write_recipe(tmp_path, files)
    spec = yaml.safe_load(recipe.read_text())
    spec["inputs"]["surface_temperature"] = {"path": str(path), "units": "K"}
    recipe.write_text(yaml.safe_dump(spec))
    b = run_recipe(recipe, tmp_path / "b")
    # float32 storage of Kelvin values keeps ~1e-5 K: compare at that precision
    np.testing.assert_allclose(_read(a.outputs["t_mean"]), _read(b.outputs["t_mean"]), atol=5e-5)


def test_mantissa_bits_rounds_float_maps_within_the_stated_bound(tmp_path):
    # opt-in precision limit: every float value within a relative 2**-(bits + 1) of the
    # full-precision run (bit rounding, Kloewer et al. 2021), NaN where it was NaN, smaller
    # files, the limit recorded in the tags; the default keeps every bit
    files = make_case(tmp_path)
    full = run_recipe(write_recipe(tmp_path, files), tmp_path / "full")
    rounded = run_recipe(write_recipe(tmp_path, files, mantissa_bits=10), tmp_path / "r10")
    smaller = 0
    for name, path in full.outputs.items():
        a, b = _read(path), _read(rounded.outputs[name])
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
        ok = np.isfinite(a) & (a != 0)
        assert np.all(np.abs(b[ok] / a[ok] - 1.0) <= 2.0 ** -11), name
        with rasterio.open(rounded.outputs[name]) as src:
            if src.dtypes[0] == "float32":
                assert src.tags()["mantissa_bits"].startswith("10 of 23"), name
        smaller += rounded.outputs[name].stat().st_size < path.stat().st_size
        with rasterio.open(path) as src:
            assert "mantissa_bits" not in src.tags()
    assert smaller >= len(full.outputs) // 2


def test_mantissa_bits_out_of_range_is_a_recipe_error(tmp_path):
    from geothermmap.errors import RecipeError
    from geothermmap.recipe import load_recipe

    files = make_case(tmp_path)
    with pytest.raises(RecipeError, match="mantissa_bits"):
        load_recipe(write_recipe(tmp_path, files, mantissa_bits=24))


def test_record_statistics_count_code_values_apart():
    # frost_depth -1 (frozen at depth) is a code, not a depth: the run record's band
    # statistics leave it out and count it (numpy on the masked values as reference)
    from geothermmap.pipeline import _combine, _partial_stats

    rng = np.random.default_rng(3)
    a = rng.uniform(0.0, 2.0, (2, 50, 40)).astype(np.float32)
    a[0, :10] = -1.0
    a[1, :, :5] = np.nan
    codes = OUTPUTS["frost_depth"].codes
    parts = [{"valid_cells": 0, "nodata_cells": 0, "counts": {},
              "outputs": {"frost_depth": [_partial_stats(blk, codes)]}} for blk in a]
    row = _combine(parts, ("frost_depth",))[0]["frost_depth"][0]
    measured = a[np.isfinite(a) & (a != -1.0)].astype(np.float64)
    assert row["frozen_at_depth_cells"] == 400 and row["count"] == measured.size
    assert row["min"] == measured.min()
    np.testing.assert_allclose(row["mean"], measured.mean(), rtol=1e-12)
    np.testing.assert_allclose(row["std"], measured.std(), rtol=1e-9)
