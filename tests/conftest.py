"""Shared fixtures: small synthetic rasters written on the fly (invented test data)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import rasterio
import yaml
from rasterio.transform import from_origin
from rasterio.warp import transform_bounds

ROOT = Path(__file__).resolve().parents[1]
UTM = "EPSG:32633"
X0, Y0, RES = 500_000.0, 5_200_000.0, 100.0


def write_tif(path: Path, data: np.ndarray, crs: str, transform, nodata=None) -> Path:
    data = np.asarray(data, dtype=np.float32)
    if data.ndim == 2:
        data = data[None]
    with rasterio.open(path, "w", driver="GTiff", width=data.shape[2], height=data.shape[1],
                       count=data.shape[0], dtype="float32", crs=crs, transform=transform,
                       nodata=nodata, tiled=True, blockxsize=64, blockysize=64) as dst:
        dst.write(data)
    return path


def monthly_cycle(mean: np.ndarray, amp: np.ndarray, peak_day: float = 200.0) -> np.ndarray:
    """12 monthly means of a sinusoid, sampled at mid-month (invented test data)."""
    mid = (np.arange(12) + 0.5) * 365.25 / 12
    cyc = np.cos(2 * np.pi * (mid - peak_day) / 365.25)
    return mean[None] + amp[None] * cyc[:, None, None]


def make_case(tmp: Path, *, width=90, height=70, soil_crs: str | None = None,
              nodata_hole=True) -> dict[str, Path]:
    """Temperature on a UTM grid; soil either on the same grid or in another CRS."""
    rng = np.random.default_rng(42)
    yy, xx = np.mgrid[0:height, 0:width]
    mean = 2.0 + 10.0 * xx / width - 3.0 * yy / height
    amp = 8.0 + 4.0 * yy / height
    t = monthly_cycle(mean, amp).astype(np.float32)
    if nodata_hole:
        t[:, 10:14, 20:25] = -9999.0
    tr = from_origin(X0, Y0, RES, RES)
    files = {"surface_temperature": write_tif(tmp / "t.tif", t, UTM, tr, nodata=-9999.0)}
    sand = 15 + 50 * xx / width + rng.uniform(0, 2, xx.shape)  # sand + clay < 100 %
    clay = 5 + 25 * yy / height
    water = 0.1 + 0.25 * yy / height
    if soil_crs is None:
        for name, arr in (("sand", sand), ("clay", clay), ("water_content", water)):
            files[name] = write_tif(tmp / f"{name}.tif", arr, UTM, tr)
    else:
        left, bottom, right, top = transform_bounds(
            UTM, soil_crs, X0, Y0 - height * RES, X0 + width * RES, Y0, densify_pts=21)
        pad = 0.05 * (right - left)
        w, h = 160, 130
        res_x = (right - left + 2 * pad) / w
        res_y = (top - bottom + 2 * pad) / h
        str_ = from_origin(left - pad, top + pad, res_x, res_y)
        sy, sx = np.mgrid[0:h, 0:w]
        files["sand"] = write_tif(tmp / "sand.tif", 15 + 50 * sx / w, soil_crs, str_)
        files["clay"] = write_tif(tmp / "clay.tif", 5 + 25 * sy / h, soil_crs, str_)
        files["water_content"] = write_tif(tmp / "water_content.tif", 0.1 + 0.25 * sy / h,
                                           soil_crs, str_)
    return files


def write_recipe(tmp: Path, files: dict[str, Path], **overrides) -> Path:
    recipe = {
        "name": "test",
        "inputs": {
            "surface_temperature": {"path": str(files["surface_temperature"]), "units": "degC"},
            "sand": {"path": str(files["sand"]), "units": "percent"},
            "clay": {"path": str(files["clay"]), "units": "percent"},
            "water_content": {"path": str(files["water_content"]), "units": "m3 m-3"},
            "bulk_density": {"value": 1.45, "units": "g cm-3"},
            "organic_matter": {"value": 2, "units": "percent"},
        },
        "depths": [0.1, 0.5, 1.0, 2.0],
        "harmonics": 2,
        "outputs": ["all"],
        "chunk": 64,
    }
    recipe.update(overrides)
    path = tmp / "recipe.yaml"
    path.write_text(yaml.safe_dump(recipe))
    return path


@pytest.fixture
def same_grid_case(tmp_path: Path) -> tuple[Path, dict[str, Path]]:
    files = make_case(tmp_path)
    return write_recipe(tmp_path, files), files


@pytest.fixture
def multi_crs_case(tmp_path: Path) -> tuple[Path, dict[str, Path]]:
    files = make_case(tmp_path, soil_crs="EPSG:4326")
    return write_recipe(tmp_path, files), files
