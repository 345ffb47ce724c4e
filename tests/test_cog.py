"""The COG byte layout written from precompressed tiles (geothermmap.raster.cog).

Independent checks: GDAL (through rasterio) decodes every pixel and reads the georeferencing
and metadata back; rio-cogeo's validator (which follows the COG layout rules: IFDs before
data, overview data before full-resolution data, tiling, overviews) accepts the file;
overview values against a numpy NaN-aware mean (GDAL's AVERAGE ignores nodata) or the
nearest-cell rule (the cell under the window centre).
"""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin
from rasterio.windows import Window
from rio_cogeo.cogeo import cog_validate

from geothermmap.raster import cog
from geothermmap.raster.grid import TargetGrid
from geothermmap.raster.writer import (
    TilePyramid,
    block_path,
    overview_count,
    tile_codec,
    write_block,
    write_cog,
    write_overview,
)

CRS = "EPSG:32633"


def _field(bands: int, height: int, width: int, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    a = (np.cumsum(rng.normal(size=(bands, height, width)), axis=2) * 0.01 + 4.0)
    a = a.astype(np.float32)
    a[:, 100:140, :] = np.nan  # a nodata band across the grid
    a[:, :, 7] = np.nan
    return a


def _write(tmp_path, data: np.ndarray, codec: cog.TileCodec, chunk: int):
    """Run the writer the way the pipeline does: block tile stores, overview tasks, COG."""
    bands, height, width = data.shape
    grid = TargetGrid.from_parts(rasterio.crs.CRS.from_string(CRS),
                                 from_origin(400000, 5000000, 30, 30), width, height)
    levels = min(overview_count(width, height), codec.max_levels)
    pyramid = TilePyramid(str(tmp_path / "work"), width, height, codec.tile, chunk, levels)
    for bi, bj, window in grid.blocks(chunk):
        r, c = int(window.row_off), int(window.col_off)
        h, w = int(window.height), int(window.width)
        write_block(block_path(tmp_path / "work", bi, bj), {"x": data[:, r:r + h, c:c + w]},
                    {"x": codec}, window, levels)
    for k, tr, tc in pyramid.overview_tiles():
        write_overview(pyramid, k, tr, tc, {"x": codec})
    out = tmp_path / "x.tif"
    write_cog(out, "x", grid, pyramid, [f"depth {i}" for i in range(bands)],
              [{"depth_m": str(i)} for i in range(bands)], codec, units="degC",
              tags={"caution": "screening estimate"})
    return out, levels


@pytest.mark.parametrize("tile", [512, 80], ids=["tile512", "tile80"])
def test_round_trip_metadata_and_cog_layout(tmp_path, tile):
    data = _field(3, 1100, 1300)
    codec = tile_codec("float32", "deflate", False, tile)
    out, levels = _write(tmp_path, data, codec, chunk=tile if tile < 512 else 1024)
    valid, errors, warnings = cog_validate(str(out))
    assert valid and not errors, errors
    with rasterio.open(out) as src:
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG"
        assert src.block_shapes[0] == (tile, tile)
        assert src.overviews(1) == [2**k for k in range(1, levels + 1)]
        assert src.crs.to_epsg() == 32633
        assert tuple(src.transform)[:6] == (30.0, 0.0, 400000.0, 0.0, -30.0, 5000000.0)
        assert src.descriptions == ("depth 0", "depth 1", "depth 2")
        assert src.units == ("degC",) * 3
        assert src.tags()["caution"] == "screening estimate"
        assert src.tags(2)["depth_m"] == "1"
        assert np.isnan(src.nodata)
        back = src.read()
        ovr = src.read(out_shape=(3, 550, 650))
    assert np.array_equal(back.view(np.uint32), data.view(np.uint32))  # lossless, NaN too
    with np.errstate(invalid="ignore"), pytest.warns(RuntimeWarning):
        expected = np.nanmean(data.reshape(3, 550, 2, 650, 2), axis=(2, 4))
    assert np.array_equal(np.isnan(ovr), np.isnan(expected))
    np.testing.assert_allclose(ovr, expected, rtol=1e-6, equal_nan=True)


def test_deeper_levels_are_means_over_their_whole_window(tmp_path):
    """Level 2 (4 x 4 windows) is the mean of all valid cells of the window, not a mean of
    level-1 means (which would weight partly empty 2 x 2 windows wrongly)."""
    data = _field(1, 1024, 1024, seed=3)
    data[0, 0:3, 0:3] = np.nan  # a 4 x 4 window with 7 of 16 cells valid
    codec = tile_codec("float32", "deflate", False)
    out, _ = _write(tmp_path, data, codec, chunk=512)
    with rasterio.open(out) as src:
        level2 = src.read(1, out_shape=(256, 256))
    expected = np.nanmean(data[0].astype(np.float64).reshape(256, 4, 256, 4), axis=(1, 3))
    np.testing.assert_allclose(level2[0, 0], expected[0, 0], rtol=1e-6)
    np.testing.assert_allclose(level2[1:, 1:], expected[1:, 1:], rtol=1e-6)


def test_bigtiff_layout_reads_the_same(tmp_path, monkeypatch):
    monkeypatch.setattr(cog, "_CLASSIC_LIMIT", 0)  # force the BigTIFF branch
    data = _field(2, 600, 700)
    out, _ = _write(tmp_path, data, tile_codec("float32", "deflate", False), chunk=512)
    assert out.read_bytes()[:4] == b"II+\x00"
    assert cog_validate(str(out))[0]
    with rasterio.open(out) as src:
        assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG"
        assert np.array_equal(src.read().view(np.uint32), data.view(np.uint32))


@pytest.mark.parametrize("compression", ["zstd", "lzw"])
def test_other_codecs_are_lossless(tmp_path, compression):
    data = _field(2, 530, 520)
    out, _ = _write(tmp_path, data, tile_codec("float32", compression, False), chunk=512)
    with rasterio.open(out) as src:
        assert src.compression.name.lower() == compression
        assert np.array_equal(src.read().view(np.uint32), data.view(np.uint32))


def test_class_map_nearest_overviews_and_nodata(tmp_path):
    """uint8 classes: NaN cells become nodata 0; overviews pick the window-centre cell."""
    rng = np.random.default_rng(5)
    classes = rng.integers(1, 5, size=(1, 700, 900)).astype(np.float32)
    classes[0, :5, :5] = np.nan
    codec = tile_codec("uint8", "deflate", False)
    assert codec.nearest
    out, _ = _write(tmp_path, classes, codec, chunk=512)
    with rasterio.open(out) as src:
        assert src.dtypes[0] == "uint8" and src.nodata == 0
        full = src.read(1)
        ovr = src.read(1, out_shape=(350, 450))
    expected = np.where(np.isnan(classes[0]), 0, classes[0]).astype(np.uint8)
    assert np.array_equal(full, expected)
    assert np.array_equal(ovr, expected[1::2, 1::2])  # cell at offset 1 of each 2 x 2


def test_coded_float_maps_do_not_average_codes():
    tile = np.array([[[-1.0, 3.0], [-1.0, -1.0]]], dtype=np.float32)
    (mean,) = cog.overview_pieces(tile, 1, nearest=False)
    (near,) = cog.overview_pieces(tile, 1, nearest=True)
    assert mean[0, 0, 0] == pytest.approx(0.0)  # (-1 + 3 - 1 - 1) / 4
    assert near[0, 0, 0] == -1.0


def test_tile_store_round_trip_and_version_check(tmp_path):
    path = tmp_path / "b.tiles"
    piece = np.arange(12, dtype=np.float32).reshape(1, 3, 4)
    cog.write_tile_store(path, {"x/0/0": b"abc", "x/0/0/1": piece})
    assert cog.is_tile_store(path)
    assert not list(tmp_path.glob("*.partial"))  # written under a temporary name
    reader = cog.TileStoreReader()
    assert reader.read(path, "x/0/0") == b"abc"
    assert np.array_equal(reader.read(path, "x/0/0/1"), piece)
    assert reader.length(path, "x/0/0") == 3
    reader.close()
    junk = tmp_path / "old.tiles"
    junk.write_bytes(b"II*\x00 an older block file")
    assert not cog.is_tile_store(junk)


def test_misaligned_block_is_refused(tmp_path):
    codec = tile_codec("float32", "deflate", False)
    with pytest.raises(ValueError, match="not aligned"):
        write_block(tmp_path / "b.tiles", {"x": np.zeros((1, 10, 10), np.float32)},
                    {"x": codec}, Window(5, 0, 10, 10), 1)


def _round_reference(x: float, keep: int) -> float:
    """Independent bit rounding: frexp, scale the mantissa to keep + 1 significant bits,
    Python's round() (ties to even), scale back (exact in float64 for float32 inputs)."""
    import math

    if not math.isfinite(x) or x == 0.0:
        return x
    m, e = math.frexp(x)  # x = m 2**e, 0.5 <= |m| < 1: keep + 1 significant bits
    return math.ldexp(round(math.ldexp(m, keep + 1)), e - keep - 1)


@pytest.mark.parametrize("keep", [1, 7, 12, 16, 22])
def test_round_mantissa_matches_an_independent_rounding(keep):
    # Bit rounding (Kloewer et al. 2021, Nature Computational Science 1, 713-724):
    # round to nearest, ties to even, on the kept mantissa bits.
    rng = np.random.default_rng(keep)
    x = np.concatenate([
        rng.normal(0.0, 30.0, 3000), rng.uniform(1e-7, 1e-5, 200), [0.0, -0.0, 1.0, -2.5],
        # exact ties: halfway between two kept values, both parities of the kept bit
        [1.0 + 2.0 ** -(keep + 1), 1.0 + 3 * 2.0 ** -(keep + 1), -(1.0 + 2.0 ** -(keep + 1))],
    ]).astype(np.float32)
    got = cog.round_mantissa(x, keep)
    ref = np.array([_round_reference(float(v), keep) for v in x], dtype=np.float64)
    np.testing.assert_array_equal(got.astype(np.float64), ref)
    finite = x != 0
    rel = np.abs(got[finite].astype(np.float64) / x[finite].astype(np.float64) - 1.0)
    assert rel.max() <= 2.0 ** -(keep + 1)
    # the dropped bits are zero, and rounding twice changes nothing
    assert not np.any(got.view(np.uint32) & np.uint32((1 << (23 - keep)) - 1))
    np.testing.assert_array_equal(cog.round_mantissa(got, keep), got)


def test_round_mantissa_keeps_nan_inf_and_refuses_bad_bit_counts():
    x = np.array([np.nan, np.inf, -np.inf, 3.0], dtype=np.float32)
    got = cog.round_mantissa(x, 5)
    assert np.isnan(got[0]) and got[1] == np.inf and got[2] == -np.inf and got[3] == 3.0
    np.testing.assert_array_equal(cog.round_mantissa(x[3:], 23), x[3:])
    for bad in (0, 24):
        with pytest.raises(ValueError):
            cog.round_mantissa(x, bad)
