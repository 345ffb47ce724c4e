"""Input layers: open, validate and read rasters aligned to the target grid, block by block.

Alignment is lazy: a block of the target grid is read from a source on the same grid by a
plain windowed read, and from a source on another grid through a ``WarpedVRT`` that GDAL
evaluates for that window only (bilinear when the source is as fine as the target or
coarser, average when it is finer). Nothing loads a whole raster. Values are returned as
float32 in the canonical unit of the physics layer, with NaN for nodata and for cells the
source does not cover.
"""

from __future__ import annotations

import math
import os
import threading
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import rasterio
from rasterio.enums import Resampling
from rasterio.errors import NotGeoreferencedWarning, RasterioIOError
from rasterio.vrt import WarpedVRT
from rasterio.warp import transform_bounds
from rasterio.windows import Window

from geothermmap.errors import InputError
from geothermmap.raster.grid import TargetGrid

#: GDAL block cache per process, in MB: explicit so it stays inside our memory budget
#: (GDAL's default is 5 % of RAM per process, outside dask's accounting).
GDAL_CACHEMAX_MB = int(os.environ.get("GEOTHERMMAP_GDAL_CACHEMAX", "128"))


def configure_gdal(num_threads: int | str = 1) -> None:
    """Set process-wide GDAL options before any I/O (cache size, threads, no network)."""
    os.environ.setdefault("GDAL_CACHEMAX", str(GDAL_CACHEMAX_MB))
    os.environ["GDAL_NUM_THREADS"] = str(num_threads)
    os.environ.setdefault("GDAL_DISABLE_READDIR_ON_OPEN", "EMPTY_DIR")
    os.environ.setdefault("CPL_VSIL_CURL_ALLOWED_EXTENSIONS", ".none")  # no network reads
    os.environ.setdefault("GDAL_HTTP_TIMEOUT", "1")


@dataclass(frozen=True)
class SourceFile:
    """One raster file of a layer and how it maps onto the target grid."""

    path: str
    bands: tuple[int, ...]  # 1-based bands to read
    nodata: float | None
    same_grid: bool  # same CRS and pixel size, pixel-aligned with the target grid
    col_offset: int  # target col 0 is source col col_offset (same_grid only)
    row_offset: int
    resampling: str  # "bilinear" | "average" | "nearest"
    # per-band scale and offset of the file's metadata (value = raw * scale + offset),
    # as GDAL stores packed integers (e.g. int16 tenths of a degree: scale 0.1)
    scales: tuple[float, ...] = ()
    offsets: tuple[float, ...] = ()

    def unpack(self, data: np.ndarray) -> np.ndarray:
        """Apply the band scales and offsets in place (after nodata became NaN)."""
        if any(v != 1.0 for v in self.scales) or any(v != 0.0 for v in self.offsets):
            data *= np.asarray(self.scales, np.float32).reshape(-1, 1, 1)
            data += np.asarray(self.offsets, np.float32).reshape(-1, 1, 1)
        return data


@dataclass(frozen=True)
class InputLayer:
    """A named input, either rasters or a constant, converted to canonical units."""

    name: str
    n_bands: int
    scale: float
    offset: float
    value: float | None = None
    sources: tuple[SourceFile, ...] = field(default_factory=tuple)

    @property
    def is_constant(self) -> bool:
        return self.value is not None

    def read(self, grid: TargetGrid, window: Window) -> np.ndarray:
        """Read ``window`` of the target grid: float32 (bands, rows, cols), NaN = nodata."""
        h, w = int(window.height), int(window.width)
        if self.is_constant:
            v = np.float32(self.value * self.scale + self.offset)
            return np.full((self.n_bands, h, w), v, dtype=np.float32)
        parts = [_read_source(src, grid, window) for src in self.sources]
        data = parts[0] if len(parts) == 1 else np.concatenate(parts, axis=0)
        if self.scale != 1.0 or self.offset != 0.0:
            data = data * np.float32(self.scale) + np.float32(self.offset)
        return data.astype(np.float32, copy=False)


_local = threading.local()


def _handles() -> dict:
    """Per-thread cache of open datasets and warped views (GDAL handles are not shared)."""
    if not hasattr(_local, "handles"):
        _local.handles = {}
    return _local.handles


def _dataset(path: str):
    h = _handles()
    key = ("ds", path)
    if key not in h:
        h[key] = rasterio.open(path)
    return h[key]


def close_cached_handles() -> None:
    """Close this thread's cached datasets (called at the end of a run)."""
    h = _handles()
    for obj in reversed(list(h.values())):
        try:
            obj.close()
        except Exception:  # noqa: BLE001 - closing is best effort
            pass
    h.clear()


def _read_source(src: SourceFile, grid: TargetGrid, window: Window) -> np.ndarray:
    h, w = int(window.height), int(window.width)
    ds = _dataset(src.path)
    if src.same_grid:
        r0 = int(window.row_off) + src.row_offset
        c0 = int(window.col_off) + src.col_offset
        rr0, cc0 = max(r0, 0), max(c0, 0)
        rr1, cc1 = min(r0 + h, ds.height), min(c0 + w, ds.width)
        inside = (rr0, cc0, rr1, cc1) == (r0, c0, r0 + h, c0 + w)
        if inside:  # the usual case: one read straight into the result, no copy
            data = ds.read(list(src.bands), window=Window(c0, r0, w, h), out_dtype="float32")
            _mask_nodata(data, src.nodata)
            return src.unpack(data)
        out = np.full((len(src.bands), h, w), np.nan, dtype=np.float32)
        if rr1 > rr0 and cc1 > cc0:
            data = ds.read(list(src.bands), window=Window(cc0, rr0, cc1 - cc0, rr1 - rr0),
                           out_dtype="float32")
            _mask_nodata(data, src.nodata)
            out[:, rr0 - r0:rr1 - r0, cc0 - c0:cc1 - c0] = src.unpack(data)
        return out
    key = ("vrt", src.path, src.resampling, grid)
    handles = _handles()
    if key not in handles:
        handles[key] = WarpedVRT(
            ds,
            crs=grid.crs,
            transform=grid.affine,
            width=grid.width,
            height=grid.height,
            resampling=Resampling[src.resampling],
            src_nodata=src.nodata,
            nodata=np.nan,
            dtype="float32",
        )
    vrt = handles[key]  # resampling is linear, so unpacking after it is the same
    return src.unpack(vrt.read(list(src.bands), window=window, out_dtype="float32"))


def _mask_nodata(data: np.ndarray, nodata: float | None) -> None:
    """Replace the source's nodata value by NaN, in place."""
    if nodata is not None and not math.isnan(nodata):
        data[data == np.float32(nodata)] = np.nan


def _open_checked(path: Path, layer_name: str):
    if not path.exists():
        raise InputError(f"input '{layer_name}': file not found: {path} (check the path in the "
                         "recipe; paths are relative to the recipe file)")
    if path.is_dir():
        raise InputError(f"input '{layer_name}': {path} is a folder, not a raster file")
    try:
        with warnings.catch_warnings(record=True) as caught:  # said below, in our words
            warnings.simplefilter("always", NotGeoreferencedWarning)
            ds = rasterio.open(path)
    except RasterioIOError as err:
        raise InputError(f"input '{layer_name}': {path} is not a readable raster ({err}). "
                         "Give a GeoTIFF or another GDAL raster.") from None
    if ds.crs is None:
        ds.close()
        raise InputError(f"input '{layer_name}': {path} has no CRS; assign one (e.g. "
                         "`rio edit-info --crs EPSG:XXXX`) so it can be aligned")
    if any(issubclass(w.category, NotGeoreferencedWarning) for w in caught):
        ds.close()  # a CRS but no geotransform: the cells have no place on the ground
        raise InputError(f"input '{layer_name}': {path} has a CRS but no geotransform (pixel "
                         "size and origin); assign one (e.g. `rio edit-info --transform`)")
    return ds  # rotated rasters are handled by the warped path


def _same_grid(ds, grid: TargetGrid) -> tuple[bool, int, int]:
    if ds.crs != grid.crs:
        return False, 0, 0
    a, b, c, d, e, f = tuple(ds.transform)[:6]
    ga, gb, gc, gd, ge, gf = grid.transform
    tol = 1e-9 * max(abs(ga), abs(ge))
    if abs(a - ga) > tol or abs(e - ge) > tol or b != 0 or d != 0 or gb != 0 or gd != 0:
        return False, 0, 0
    col = (gc - c) / a
    row = (gf - f) / e
    if abs(col - round(col)) > 1e-6 or abs(row - round(row)) > 1e-6:
        return False, 0, 0
    return True, int(round(col)), int(round(row))


def _resampling_for(ds, grid: TargetGrid) -> str:
    """Average when the source is finer than the target (downsampling), else bilinear."""
    try:
        left, bottom, right, top = transform_bounds(ds.crs, grid.crs, *_north_up_bounds(ds),
                                                   densify_pts=21)
    except Exception:  # noqa: BLE001 - fall back to bilinear if bounds cannot be projected
        return "bilinear"
    src_res = min((right - left) / ds.width, (top - bottom) / ds.height)
    tgt_res = min(abs(grid.transform[0]), abs(grid.transform[4]))
    return "average" if src_res < 0.75 * tgt_res else "bilinear"


def open_layer(
    name: str,
    paths: list[Path] | None,
    value: float | None,
    scale: float,
    offset: float,
    grid: TargetGrid,
    *,
    band: int | None = None,
    nodata: float | None = None,
    expected_bands: tuple[int, ...] | None = None,
) -> InputLayer:
    """Open and validate a layer: files exist, are rasters with a CRS, have usable bands."""
    if value is not None:
        return InputLayer(name, 1, scale, offset, value=float(value))
    assert paths
    sources = []
    for p in paths:
        with _open_checked(Path(p), name) as ds:
            if band is not None:
                if band > ds.count:
                    raise InputError(f"input '{name}': band {band} requested but {p} has only "
                                     f"{ds.count} band(s)")
                bands = (band,)
            else:
                bands = tuple(range(1, ds.count + 1))
            same, col, row = _same_grid(ds, grid)
            sources.append(SourceFile(
                path=str(Path(p).resolve()),
                bands=bands,
                nodata=nodata if nodata is not None else ds.nodata,
                same_grid=same,
                col_offset=col,
                row_offset=row,
                resampling="bilinear" if same else _resampling_for(ds, grid),
                scales=tuple(float(ds.scales[b - 1]) for b in bands),
                offsets=tuple(float(ds.offsets[b - 1]) for b in bands),
            ))
    n_bands = sum(len(s.bands) for s in sources)
    if expected_bands is not None and not _band_count_ok(n_bands, expected_bands):
        what = " or ".join(_describe_counts(expected_bands))
        raise InputError(f"input '{name}': expected {what} band(s) in total, found {n_bands} "
                         f"in {', '.join(str(p) for p in paths)}"
                         + ("; choose one with 'band: N' in the input's spec"
                            if expected_bands == (1,) else ""))
    return InputLayer(name, n_bands, scale, offset, sources=tuple(sources))


def _band_count_ok(n: int, expected: tuple[int, ...]) -> bool:
    # a negative entry -k means "any positive multiple of k"
    return any((e > 0 and n == e) or (e < 0 and n > 0 and n % -e == 0) for e in expected)


def _describe_counts(expected: tuple[int, ...]) -> list[str]:
    return [str(e) if e > 0 else f"a multiple of {-e}" for e in expected]


def coverage_fraction(layer: InputLayer, grid: TargetGrid) -> float:
    """Fraction of the target grid's bounding box covered by the layer's footprint (0..1)."""
    if layer.is_constant:
        return 1.0
    gl, gb, gr, gt = grid.bounds
    fractions = []
    for src in layer.sources:
        with rasterio.open(src.path) as ds:
            try:
                l, b, r, t = transform_bounds(ds.crs, grid.crs, *_north_up_bounds(ds),
                                              densify_pts=21)
            except Exception:  # noqa: BLE001
                return 0.0
        iw = max(0.0, min(r, gr) - max(l, gl))
        ih = max(0.0, min(t, gt) - max(b, gb))
        fractions.append(iw * ih / ((gr - gl) * (gt - gb)))
    return min(fractions)


#: Cells per band that :func:`sample_values` may decompress: a bounded plausibility sample,
#: so that planning a run costs the same on a 1000 and a 20000 pixel wide grid.
SAMPLE_BUDGET_CELLS = 1_048_576  # four 512 px blocks: checks cost ~0.05 s a layer


def _sample_windows(ds, max_side: int, budget_cells: int = SAMPLE_BUDGET_CELLS
                    ) -> tuple[list[Window], int]:
    """Whole source blocks spread evenly over the raster, and a stride within them.

    Reading a window of a compressed tiled file decompresses every tile it touches, so
    the sample is made of whole blocks (at most ``budget_cells`` cells), each decimated
    to about ``max_side**2`` values in total. The blocks sit at the centres of an even
    grid of the raster, not at its corners (a region's nodata margin is often there).
    """
    bh, bw = (min(int(v), lim) for v, lim in zip(ds.block_shapes[0], (ds.height, ds.width),
                                                 strict=True))
    nby, nbx = math.ceil(ds.height / bh), math.ceil(ds.width / bw)
    max_blocks = max(1, budget_cells // (bh * bw))
    if nby * nbx <= max_blocks:
        rows, cols = range(nby), range(nbx)
    else:
        ky = min(nby, max_blocks, max(1, round(math.sqrt(max_blocks * nby / nbx))))
        kx = min(nbx, max(1, max_blocks // ky))
        rows = sorted({int((i + 0.5) * nby / ky) for i in range(ky)})
        cols = sorted({int((j + 0.5) * nbx / kx) for j in range(kx)})
    windows = [Window(c * bw, r * bh, min(bw, ds.width - c * bw), min(bh, ds.height - r * bh))
               for r in rows for c in cols]
    cells = sum(int(w.width) * int(w.height) for w in windows)
    stride = max(1, math.ceil(math.sqrt(cells / (max_side * max_side))))
    return windows, stride


def sample_values(layer: InputLayer, max_side: int = 256,
                  budget_cells: int = SAMPLE_BUDGET_CELLS) -> np.ndarray:
    """A bounded sample of every band in native resolution, canonical units (for checks),
    as one flat array.

    Uses the file's overviews when it has them (a decimated read of about ``max_side``
    pixels a side); otherwise whole blocks spread evenly over the raster, decimated (see
    :func:`_sample_windows`). Either way the cost does not grow with the grid size.
    """
    if layer.is_constant:
        return np.array([layer.value * layer.scale + layer.offset], dtype=np.float64)
    chunks = []
    for src in layer.sources:
        with rasterio.open(src.path) as ds:
            bands = list(src.bands)
            if ds.overviews(bands[0]):
                f = max(1, math.ceil(max(ds.width, ds.height) / max_side))
                shape = (len(bands), max(1, ds.height // f), max(1, ds.width // f))
                parts = [ds.read(bands, out_shape=shape, out_dtype="float32",
                                 resampling=Resampling.nearest)]
            else:
                windows, stride = _sample_windows(ds, max_side, budget_cells)
                # copy the decimated values: a strided view would keep each block alive
                parts = [ds.read(bands, window=w, out_dtype="float32")[:, ::stride, ::stride]
                         .copy() for w in windows]
            data = np.concatenate([p.reshape(len(bands), -1) for p in parts], axis=1)
            _mask_nodata(data, src.nodata)  # float32, as in block reads
            data = src.unpack(data[:, :, None])[:, :, 0]
            chunks.append(data.astype(np.float64).ravel())
    data = np.concatenate(chunks)  # files of a list may differ in size and tiling
    return data * layer.scale + layer.offset


def _north_up_bounds(ds) -> tuple[float, float, float, float]:
    """(left, bottom, right, top) with bottom < top, also for bottom-up rasters."""
    left, bottom, right, top = ds.bounds
    return min(left, right), min(bottom, top), max(left, right), max(bottom, top)


def grid_of(path: Path, name: str) -> TargetGrid:
    """The grid of a raster file (used as the default target grid), north-up: a bottom-up
    raster (positive row step) gives the same cells in north-up order (read by warping)."""
    with _open_checked(path, name) as ds:
        t = ds.transform
        if t.b != 0.0 or t.d != 0.0:
            raise InputError(f"input '{name}': {path} has a rotated grid; give an explicit "
                             "'grid' {crs, resolution, bounds} for the output")
        if t.e > 0:  # bottom-up
            return TargetGrid.from_bounds(ds.crs, _north_up_bounds(ds), (t.a, t.e))
        return TargetGrid.from_parts(ds.crs, ds.transform, ds.width, ds.height)
