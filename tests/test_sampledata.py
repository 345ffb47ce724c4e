"""Tests of the invented demo region (sample_tiles/) and the synthetic benchmark grids.

The scenario is invented, so the checks are of determinism and of the properties the demo
promises (documented in geothermmap/sampledata.py), checked by independent numpy code.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.warp import transform_bounds

from geothermmap import sampledata as sd

ROOT = Path(__file__).resolve().parents[1]
TILES = ROOT / "sample_tiles"
#: GDAL build that wrote the committed sample_tiles/. Another DEFLATE implementation or
#: GDAL version may lay out the same values in different bytes, so byte identity with the
#: committed files is only required with this build; values and profiles always.
SAMPLE_TILES_GDAL = "3.10.3"
MONTH_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float)


def read(path: Path) -> tuple[np.ma.MaskedArray, dict, dict]:
    with rasterio.open(path) as src:
        info = {
            "profile": {k: v for k, v in src.profile.items()},
            "tags": src.tags(),
            "band_tags": [src.tags(i) for i in range(1, src.count + 1)],
            "descriptions": src.descriptions,
            "structure": src.tags(ns="IMAGE_STRUCTURE"),
            "bounds": src.bounds,
        }
        return src.read(masked=True), info, src.profile


@pytest.fixture(scope="module")
def demo() -> dict[str, tuple[np.ma.MaskedArray, dict]]:
    out = {}
    for name in sd.DEMO_LAYERS:
        data, info, _ = read(TILES / f"{name}.tif")
        out[name] = (data, info)
    return out


def test_regenerating_gives_the_committed_files(tmp_path: Path):
    paths = sd.generate_demo(tmp_path)
    assert set(paths) == set(sd.DEMO_LAYERS)
    same_bytes = []
    for name, path in paths.items():
        new, new_info, _ = read(path)
        old, old_info, _ = read(TILES / path.name)
        assert new_info == old_info, name
        np.testing.assert_array_equal(new.mask, old.mask)
        # exact equality expected; one quantum of tolerance only covers a last-ulp
        # difference of libm on another platform flipping a rounding (reason, not a source)
        np.testing.assert_allclose(new.filled(0), old.filled(0), rtol=0,
                                   atol=sd._QUANTUM[name])
        same_bytes.append(path.read_bytes() == (TILES / path.name).read_bytes())
    assert (tmp_path / "README.md").read_text() == (TILES / "README.md").read_text()
    if rasterio.__gdal_version__ == SAMPLE_TILES_GDAL:
        assert all(same_bytes)


def test_demo_generation_is_byte_deterministic(tmp_path: Path):
    a = sd.generate_demo(tmp_path / "a")
    b = sd.generate_demo(tmp_path / "b")
    sd.generate_demo(tmp_path / "b")  # overwrite in place gives the same bytes again
    for name in a:
        assert a[name].read_bytes() == b[name].read_bytes(), name


def test_overwrite_false_refuses(tmp_path: Path):
    sd.generate_demo(tmp_path)
    with pytest.raises(FileExistsError):
        sd.generate_demo(tmp_path, overwrite=False)


def test_file_format(demo):
    total = sum(p.stat().st_size for p in TILES.iterdir())
    assert total < 3e6  # the brief: a few MB at most
    for name, (data, info) in demo.items():
        prof = info["profile"]
        assert prof["dtype"] == "float32"
        assert prof["nodata"] == sd.NODATA
        assert prof["tiled"] and prof["blockxsize"] == sd.DEMO_BLOCK
        assert info["structure"]["COMPRESSION"] == "DEFLATE"
        assert info["structure"]["PREDICTOR"] == "3"
        assert info["tags"]["units"] == sd.LAYERS[name][0]
        assert not any("DATETIME" in k.upper() for k in info["tags"])
        assert np.all(np.isfinite(data.compressed()))  # nodata is -9999, never NaN
    t_info = demo["surface_temperature"][1]
    assert t_info["descriptions"] == sd.MONTH_NAMES
    assert t_info["profile"]["count"] == 12
    assert t_info["profile"]["crs"].to_epsg() == 32633
    assert t_info["profile"]["transform"].a == 250.0
    assert (t_info["profile"]["width"], t_info["profile"]["height"]) == (200, 160)


def test_soil_grid_differs_and_covers_the_temperature_grid(demo):
    t_prof = demo["surface_temperature"][1]["profile"]
    t_bounds = demo["surface_temperature"][1]["bounds"]
    geo = transform_bounds(t_prof["crs"], "EPSG:4326", *t_bounds, densify_pts=51)
    for name in ("sand", "clay", "water_content", "bulk_density", "organic_matter"):
        prof, b = demo[name][1]["profile"], demo[name][1]["bounds"]
        assert prof["crs"] != t_prof["crs"] and prof["crs"].to_epsg() == 4326
        assert 0.0015 <= prof["transform"].a <= 0.002
        # covers the temperature grid with a margin
        assert b.left < geo[0] - 0.005 and b.right > geo[2] + 0.005
        assert b.bottom < geo[1] - 0.005 and b.top > geo[3] + 0.005


def test_temperature_scenario(demo):
    t = demo["surface_temperature"][0]
    # annual mean = month-length-weighted mean of the monthly means (independent of the
    # package's harmonic fit)
    mean = np.ma.average(t, axis=0, weights=MONTH_DAYS)
    coldest = t.min(axis=0)
    valid = ~t.mask[0]
    n = valid.sum()
    # lake: nodata in all 12 bands on the same cells
    assert (~valid).sum() > 50
    assert np.all(t.mask == t.mask[0])
    # frost-free cells: the coldest month stays above 1 degC; 1 K covers the flattening of
    # the minimum by monthly averaging (1.1 % of a <= 12.6 K amplitude, see harmonics.py)
    assert np.count_nonzero(coldest > 1.0) > 0.02 * n
    # deep frost: coldest month below -8 degC
    assert np.count_nonzero(coldest < -8.0) > 0.05 * n
    # a few cells (high summits) with annual mean at or below 0 degC
    assert 0 < np.count_nonzero(mean <= 0.0) < 0.03 * n
    # northern-hemisphere cycle peaking in July everywhere
    assert np.all(t.argmax(axis=0)[valid] == 6)
    assert np.all(t.argmin(axis=0)[valid] == 0)
    # amplitude larger inland than next to the lake
    half_range = (t.max(axis=0) - t.min(axis=0)) / 2
    assert half_range.min() < 8.5 and half_range.max() > 11.5


def test_soil_scenario(demo):
    sand, clay, water = (demo[k][0][0] for k in ("sand", "clay", "water_content"))
    bd, om = demo["bulk_density"][0][0], demo["organic_matter"][0][0]
    mask = sand.mask
    assert mask.any()  # the lake
    for arr in (clay, water, bd, om):
        np.testing.assert_array_equal(arr.mask, mask)
    assert np.all(sand + clay <= 100.0)
    assert sand.min() >= 0 and clay.min() >= 0
    # sandy valley floor, clay-rich uplands
    assert sand.max() > 65 and clay.max() > 30
    assert np.all((water >= 0.05) & (water <= 0.9))
    # water below porosity: 1 - rho_b / rho_s with rho_s from mineral 2650 kg m-3 (common
    # practice) and organic 1300 kg m-3 (de Vries 1963) solids, harmonic mixing by mass
    f = om / 100.0
    rho_s = 1.0 / ((1 - f) / 2650.0 + f / 1300.0)
    porosity = 1.0 - 1000.0 * bd / rho_s
    assert np.all(water < porosity)
    mineral = om < 10
    assert np.all((bd[mineral] >= 1.1) & (bd[mineral] <= 1.65))
    assert 1.4 < np.ma.median(om[mineral]) < 3.0
    peat = om > 60
    assert peat.sum() > 20
    assert np.all(bd[peat] < 0.45) and water[peat].max() > 0.65


def test_synthetic_small_grid(tmp_path: Path):
    a = sd.generate_synthetic(tmp_path / "a", 700, 600, chunk=256, seed=3)
    b = sd.generate_synthetic(tmp_path / "b", 700, 600, chunk=256, seed=3)
    c = sd.generate_synthetic(tmp_path / "c", 700, 600, chunk=512, seed=3)
    assert set(a) == set(sd.SYNTHETIC_LAYERS)
    for name in a:
        assert a[name].read_bytes() == b[name].read_bytes(), name  # deterministic
        x, info, prof = read(a[name])
        y, _, _ = read(c[name])
        # the values of a cell do not depend on the window size (chunked == unchunked)
        np.testing.assert_array_equal(x.filled(np.nan), y.filled(np.nan))
        assert prof["crs"].to_epsg() == 32633 and prof["transform"].a == 30.0
        assert (prof["width"], prof["height"]) == (700, 600)
        assert prof["blockxsize"] == 512 and info["structure"]["PREDICTOR"] == "3"
        assert x.mask.any() and not x.mask.all()  # the lake
        assert prof["count"] == (12 if name == "surface_temperature" else 1)
    sand, _, _ = read(a["sand"])
    clay, _, _ = read(a["clay"])
    assert np.all(sand + clay <= 100.0)
    t, _, _ = read(a["surface_temperature"])
    assert np.all(t.argmax(axis=0)[~t.mask[0]] == 6)


def test_synthetic_seed_and_arguments(tmp_path: Path):
    a = sd.generate_synthetic(tmp_path / "a", 90, 70, chunk=32, seed=0)
    b = sd.generate_synthetic(tmp_path / "b", 90, 70, chunk=32, seed=1)
    x, _, _ = read(a["surface_temperature"])
    y, _, _ = read(b["surface_temperature"])
    np.testing.assert_array_equal(x.mask, y.mask)
    diff = np.abs(x - y)
    # only the noise differs: at most 2 x (0.15 + 0.08) K, plus two quanta of rounding
    assert 0 < diff.max() <= 0.46 + 2 * sd._QUANTUM["surface_temperature"]
    with pytest.raises(ValueError, match="chunk"):
        sd.generate_synthetic(tmp_path / "c", 90, 70, chunk=300)
    with pytest.raises(ValueError, match="grid size"):
        sd.generate_synthetic(tmp_path / "c", 0, 70)


def test_command_line(tmp_path: Path, capsys):
    assert sd.main(["--out", str(tmp_path), "--synthetic", "40", "30", "--chunk", "16"]) == 0
    assert (tmp_path / "surface_temperature.tif").exists()
    assert "surface_temperature" in capsys.readouterr().out
    with pytest.raises(SystemExit):
        sd.main(["--synthetic", "40", "30"])  # needs --out
    assert sd.main(["--out", str(tmp_path / "x"), "--synthetic", "40", "30",
                    "--chunk", "300"]) == 1
