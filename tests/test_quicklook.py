"""Quicklook PNGs: one per output, north up, map extent, nodata transparent, colour scales.

The checks read the PNG pixels back (matplotlib's PNG reader) at places whose values are
known from the invented rasters written here.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
import rasterio
from rasterio.transform import Affine, from_origin

from geothermmap import run_recipe
from geothermmap.quicklook import render_quicklook, write_quicklooks
from tests.conftest import RES, UTM, X0, Y0, make_case, write_recipe


def _pixels(png: bytes) -> np.ndarray:
    return mpimg.imread(io.BytesIO(png), format="png")  # (rows, cols, 4) floats 0..1


def _write(path: Path, data: np.ndarray, transform=None, crs=UTM, dtype="float32", tags=None,
           nodata=float("nan")) -> Path:
    data = data if data.ndim == 3 else data[None]
    with rasterio.open(path, "w", driver="GTiff", width=data.shape[2], height=data.shape[1],
                       count=data.shape[0], dtype=dtype, crs=crs,
                       transform=transform or from_origin(X0, Y0, RES, RES),
                       nodata=nodata) as dst:
        dst.write(data.astype(dtype))
        dst.update_tags(**(tags or {}))
    return path


def _at(q, png: np.ndarray, fx: float, fy: float, panel: int = 0) -> np.ndarray:
    """RGBA of the PNG at fractions (fx from the west, fy from the north) of a panel."""
    left, top, right, bottom = q.axes_px[panel]
    return png[int(top + fy * (bottom - top)), int(left + fx * (right - left))]


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("ql")
    outputs = ["t_mean", "t_min", "conductivity", "frost_depth"]
    return run_recipe(write_recipe(tmp, make_case(tmp), outputs=outputs), tmp / "out").output_dir


def test_every_output_gets_a_png(run_dir):
    paths = write_quicklooks(run_dir)
    rec = json.loads((run_dir / "run_record.json").read_text())
    assert set(paths) == set(rec["outputs"])
    for name, path in paths.items():
        assert path == run_dir / "quicklook" / f"{name}.png"
        img = mpimg.imread(path)
        assert img.ndim == 3 and img.shape[2] == 4 and min(img.shape[:2]) > 300
    again = write_quicklooks(run_dir, reuse=True)  # up to date: kept, not redrawn
    assert {p.stat().st_mtime for p in again.values()} == {p.stat().st_mtime
                                                           for p in paths.values()}


def test_extent_units_and_nodata_transparent(run_dir):
    q = render_quicklook(run_dir / "conductivity.tif")
    # the map extent is the grid's, in map coordinates (make_case: 90 x 70 cells of 100 m)
    assert q.extent == (X0, X0 + 90 * RES, Y0 - 70 * RES, Y0)
    assert q.colorbar_label == "conductivity [W m-1 K-1]"
    assert q.crs == "EPSG:32633" and not q.caution
    png = _pixels(q.png)
    # make_case puts nodata at rows 10..13, cols 20..24: transparent there
    assert _at(q, png, 22.5 / 90, 12 / 70)[3] == 0.0
    assert _at(q, png, 50 / 90, 40 / 70)[3] == 1.0  # a valid cell: opaque


def test_temperature_diverging_at_zero_and_north_up(tmp_path):
    """North half +5 degC, south half -5 degC, stored south-up (rows run northward)."""
    data = np.full((40, 60), -5.0)
    data[20:] = 5.0  # rows 20.. are the north half because the transform runs north
    south_up = Affine(RES, 0, X0, 0, RES, Y0 - 40 * RES)
    q = render_quicklook(_write(tmp_path / "t_mean.tif", data, south_up), name="t_mean")
    assert q.cmap == "RdBu_r" and q.norm["kind"] == "diverging"
    assert q.norm["vcenter"] == 0.0 and q.norm["vmin"] == -q.norm["vmax"]
    png = _pixels(q.png)
    north, south = _at(q, png, 0.5, 0.2), _at(q, png, 0.5, 0.8)
    assert north[0] > north[2] + 0.2  # red: warm at the top (north)
    assert south[2] > south[0] + 0.2  # blue: cold at the bottom
    # symmetric scale: +5 and -5 are equally far from white
    np.testing.assert_allclose(3 - north[:3].sum(), 3 - south[:3].sum(), atol=0.15)


def test_positive_temperatures_keep_white_at_zero(tmp_path):
    data = np.linspace(8.0, 12.0, 50 * 50).reshape(50, 50)
    q = render_quicklook(_write(tmp_path / "t_max.tif", data), name="t_max")
    assert q.norm["vmin"] == -q.norm["vmax"] < 0 < q.norm["shown_min"]
    px = _at(q, _pixels(q.png), 0.5, 0.5)
    assert px[0] > px[2] + 0.3  # all warm colours, not blue


def test_large_raster_is_decimated(tmp_path):
    data = np.random.default_rng(0).normal(size=(900, 1200)).astype(np.float32)
    q = render_quicklook(_write(tmp_path / "amplitude.tif", data), max_side=300)
    assert max(q.read_shape) <= 300  # never the whole raster


def test_small_multiples_share_one_scale(run_dir):
    q = render_quicklook(run_dir / "t_min.tif")
    assert q.panels == 4 and len(q.axes_px) == 4


def test_frost_codes_classes_and_caution(tmp_path):
    depth = np.full((30, 40), 0.6)
    depth[:, :10] = -1.0  # code: frozen at depth
    q = render_quicklook(_write(tmp_path / "frost_depth.tif", depth), name="frost_depth")
    assert q.caution and any("frozen at depth" in c for c in q.codes)
    px = _at(q, _pixels(q.png), 0.1, 0.5)  # the code's own colour (#54278f), not the blues
    np.testing.assert_allclose(px[:3], [0x54 / 255, 0x27 / 255, 0x8F / 255], atol=0.02)

    cls = np.zeros((30, 40), np.uint8)
    cls[:, :20] = 1
    cls[:, 20:] = 3
    tags = {"class_0": "nodata", "class_1": "no frost", "class_1_color": "#f2f0e6",
            "class_2": "shallow", "class_2_color": "#c6dbef", "class_3": "deep",
            "class_3_color": "#08519c"}
    q = render_quicklook(_write(tmp_path / "frost_class.tif", cls, dtype="uint8", tags=tags,
                                nodata=0), name="frost_class")
    assert q.codes == ["no frost", "shallow", "deep"] and q.caution
    px = _at(q, _pixels(q.png), 0.75, 0.5)
    np.testing.assert_allclose(px[:3], [0x08 / 255, 0x51 / 255, 0x9C / 255], atol=0.02)


def test_geographic_axes(tmp_path):
    data = np.arange(20 * 30, dtype=float).reshape(20, 30)
    q = render_quicklook(_write(tmp_path / "damping_depth.tif", data,
                                from_origin(10.0, 50.0, 0.1, 0.1), crs="EPSG:4326"))
    np.testing.assert_allclose(q.extent, (10.0, 13.0, 48.0, 50.0))
    left, top, right, bottom = q.axes_px[0]
    # 3 x 2 degrees at 49 degN: the panel is 3 cos(49) / 2 = 0.98 as wide as high
    np.testing.assert_allclose((right - left) / (bottom - top), 1.5 * np.cos(np.radians(49)),
                               rtol=0.02)  # a pixel of rounding in each dimension


def test_codes_in_day_of_year_maps_and_band_names(tmp_path):
    """warming_doy: -1 = never above, -2 = always above (physics.rootzone codes)."""
    from geothermmap.physics.rootzone import ALWAYS_ABOVE, NEVER_ABOVE

    doy = np.full((2, 30, 40), 120.0)
    doy[0, :, :10] = NEVER_ABOVE
    doy[1, :, 30:] = ALWAYS_ABOVE
    path = _write(tmp_path / "warming_doy.tif", doy)
    with rasterio.open(path, "r+") as ds:
        ds.descriptions = ("threshold 5 degC", "threshold 10 degC")
    q = render_quicklook(path, name="warming_doy")
    assert q.panel_titles == ["threshold 5 degC", "threshold 10 degC"]
    assert sorted(q.codes) == ["above the threshold all year", "never above the threshold"]
    assert q.norm["vmin"] < 120.0 < q.norm["vmax"]  # the codes do not stretch the scale
