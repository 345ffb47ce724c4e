"""The CLI: user errors give one clear message and exit code 1, never a traceback."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml
from click.testing import CliRunner
from rasterio.transform import from_origin

from geothermmap.cli import main
from tests.conftest import UTM, make_case, write_recipe, write_tif


def invoke(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def assert_user_error(result, *fragments: str) -> None:
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output
    text = result.output.lower()
    for f in fragments:
        assert f.lower() in text, f"{f!r} not in: {result.output}"


def test_check_ok(same_grid_case):
    recipe, _ = same_grid_case
    result = invoke("check", str(recipe))
    assert result.exit_code == 0, result.output
    assert "ok" in result.output and "90 x 70" in result.output


def test_run_and_summary(same_grid_case, tmp_path):
    recipe, _ = same_grid_case
    result = invoke("run", str(recipe), "-o", str(tmp_path / "out"))
    assert result.exit_code == 0, result.output
    assert "frost_depth.tif" in result.output
    assert "screening" in result.output.lower()
    assert (tmp_path / "out" / "run_record.json").exists()


def test_missing_file(tmp_path):
    files = make_case(tmp_path)
    files["sand"] = tmp_path / "nope.tif"
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files))), "not found",
                      "nope.tif")


def test_missing_recipe(tmp_path):
    assert_user_error(invoke("check", str(tmp_path / "missing.yaml")), "recipe file not found")


def test_unknown_key_suggests(tmp_path):
    files = make_case(tmp_path)
    recipe = write_recipe(tmp_path, files, harmonic=2)
    assert_user_error(invoke("check", str(recipe)), "unknown key", "harmonics")


def test_kelvin_declared_as_degc(tmp_path):
    files = make_case(tmp_path)
    from tests.conftest import monthly_cycle

    t = monthly_cycle(np.full((20, 20), 283.0), np.full((20, 20), 10.0))
    files["surface_temperature"] = write_tif(tmp_path / "tk.tif", t, UTM,
                                             from_origin(500_000, 5_200_000, 100, 100))
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files))), "kelvin", "units: K")


def test_raster_without_crs(tmp_path):
    files = make_case(tmp_path)
    import rasterio

    path = tmp_path / "nocrs.tif"
    with rasterio.open(path, "w", driver="GTiff", width=5, height=5, count=1,
                       dtype="float32") as dst:
        dst.write(np.ones((1, 5, 5), np.float32))
    files["clay"] = path
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files))), "no crs", "clay")
    # a CRS but no geotransform: GDAL puts it at the identity, which would be a wrong map
    path = tmp_path / "notransform.tif"
    with rasterio.open(path, "w", driver="GTiff", width=5, height=5, count=1,
                       dtype="float32", crs=UTM) as dst:
        dst.write(np.ones((1, 5, 5), np.float32))
    files["clay"] = path
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files))), "no geotransform",
                      "clay")


def test_non_overlapping_extent(tmp_path):
    files = make_case(tmp_path)
    files["sand"] = write_tif(tmp_path / "far.tif", np.full((10, 10), 40.0), UTM,
                              from_origin(900_000, 6_000_000, 100, 100))
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files))), "does not overlap",
                      "sand")


def test_wrong_band_count(tmp_path):
    files = make_case(tmp_path)
    files["surface_temperature"] = write_tif(tmp_path / "t5.tif", np.ones((5, 10, 10)), UTM,
                                             from_origin(500_000, 5_200_000, 100, 100))
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files))), "multiple of 12",
                      "found 5")


def test_not_a_raster(tmp_path):
    files = make_case(tmp_path)
    bad = tmp_path / "bad.tif"
    bad.write_text("this is not a raster")
    files["water_content"] = bad
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files))), "not a readable raster")


@pytest.mark.parametrize(
    ("override", "fragment"),
    [
        ({"depths": [0.5, -1.0]}, "depths must be > 0"),
        ({"depths": [0.5, 0.5]}, "must not repeat"),
        ({"harmonics": 7}, "harmonics must be 1, 2 or 3"),
        ({"soil": {"conductivity_model": "magic"}}, "conductivity_model"),
        ({"outputs": ["t_meen"]}, "did you mean 't_mean'"),
    ],
)
def test_bad_recipe_values(tmp_path, override, fragment):
    files = make_case(tmp_path)
    assert_user_error(invoke("check", str(write_recipe(tmp_path, files, **override))), fragment)


def test_missing_required_input(tmp_path):
    files = make_case(tmp_path)
    recipe = write_recipe(tmp_path, files)
    data = yaml.safe_load(recipe.read_text())
    del data["inputs"]["clay"]
    recipe.write_text(yaml.safe_dump(data))
    assert_user_error(invoke("check", str(recipe)), "missing required input", "clay")


def test_refuses_foreign_output_folder(same_grid_case, tmp_path):
    recipe, _ = same_grid_case
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    assert_user_error(invoke("run", str(recipe), "-o", str(out)), "did not write", "--overwrite")
    result = invoke("run", str(recipe), "-o", str(out), "--overwrite", "--quiet")
    assert result.exit_code == 0, result.output
    assert (out / "notes.txt").exists()


def test_real_process_exit_code(tmp_path):
    """The installed entry point, as a user runs it: exit 1 and no traceback."""
    proc = subprocess.run([sys.executable, "-m", "geothermmap.cli", "check",
                           str(tmp_path / "none.yaml")], capture_output=True, text=True)
    assert proc.returncode == 1
    assert "Traceback" not in proc.stderr and "recipe file not found" in proc.stderr


def test_demo_recipe_validates():
    root = Path(__file__).resolve().parents[1]
    result = invoke("check", str(root / "recipes" / "demo.yaml"))
    assert result.exit_code == 0, result.output


def test_summary_counts_coded_cells_apart(capsys):
    # a frost map whose cells are all "frozen at depth" (code -1) has no depth values;
    # the summary says how many cells carry the code instead of "no valid cells"
    from types import SimpleNamespace

    from geothermmap.cli import _summarise

    band = {"count": 0, "min": None, "max": None, "frozen_at_depth_cells": 12}
    result = SimpleNamespace(
        record={"outputs": {"frost_depth": {"bands": [band]}}, "counts": {}},
        outputs={"frost_depth": Path("frost_depth.tif")}, output_dir=Path("."),
        record_path=Path("run_record.json"))
    _summarise(result, quiet=False)
    line = next(s for s in capsys.readouterr().out.splitlines() if "frost_depth.tif" in s)
    assert "cells coded 12 frozen at depth" in line and "no valid" not in line
