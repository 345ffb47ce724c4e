"""Output writing: per-block intermediate files, then one Cloud-Optimized GeoTIFF per output.

Why this shape: the GDAL COG driver can only copy, not write windows, so a COG cannot be
streamed from dask directly. Each dask task therefore writes its block (all output bands)
to its own small GeoTIFF under the run's work folder: no two tasks ever write to the same
file, so threads and processes on a cluster need no lock. A block file is written under a
temporary name (host process id + buffer id) and renamed when complete (``os.replace``,
atomic on one filesystem), so a resumed run can trust any block file it finds and a task
that runs twice (a cluster retrying a lost worker) only replaces a block by the same bytes.
Block files are uncompressed: they are written once and read twice (overviews, COG), and
compressing them would add a compression pass to every output pixel.

When all blocks exist, each output is assembled by the process that runs the pipeline:
a VRT mosaic of the block files (which also carries units, band descriptions and tags),
its overviews built by GDAL in one pass into an uncompressed ``.vrt.ovr``, and one COG
copy that compresses every pixel once with GDAL's threads, under a temporary name that
is renamed into place only when complete. On a cluster this means the workers and the
machine that runs ``geothermmap run`` must all see the output folder at the same path
(a shared filesystem); see ``benchmarks/README.md`` for what to do without one.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from xml.sax.saxutils import escape

import numpy as np
import rasterio
import rasterio.shutil
from rasterio.enums import Resampling
from rasterio.windows import Window

from geothermmap.raster.grid import TargetGrid

COMPRESSION_OPTIONS = {
    "deflate": {"COMPRESS": "DEFLATE", "PREDICTOR": "YES", "LEVEL": "1"},
    "zstd": {"COMPRESS": "ZSTD", "PREDICTOR": "YES", "LEVEL": "1"},
    "lzw": {"COMPRESS": "LZW", "PREDICTOR": "YES"},
}
COG_BLOCKSIZE = 512
PARTIAL_SUFFIX = ".partial"


def block_path(work_dir: Path, bi: int, bj: int) -> Path:
    return work_dir / "blocks" / f"b{bi:05d}_{bj:05d}.tif"


def write_block(path: Path, data: np.ndarray, grid: TargetGrid, window: Window) -> None:
    """Write one block (bands, rows, cols) float32, atomically (temporary name, then rename)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + f".{os.getpid()}.{id(data)}{PARTIAL_SUFFIX}")
    profile = {
        "driver": "GTiff",
        "width": int(window.width),
        "height": int(window.height),
        "count": int(data.shape[0]),
        "dtype": "float32",
        "crs": grid.crs,
        "transform": grid.window_transform(window),
        "nodata": float("nan"),
        "interleave": "band",
        "BIGTIFF": "IF_SAFER",
    }
    with rasterio.open(tmp, "w", **profile) as dst:
        dst.write(data.astype(np.float32, copy=False))
    os.replace(tmp, path)


@dataclass(frozen=True)
class BandSpec:
    """One output band: its band number in the block files, description and tags."""

    block_band: int  # 1-based band in each block file
    description: str
    tags: dict[str, str]


def _vrt_xml(
    grid: TargetGrid,
    blocks: Sequence[tuple[Window, Path]],
    bands: Sequence[BandSpec],
    *,
    dtype: str,
    nodata: float,
    units: str,
    tags: dict[str, str],
    overviews: Sequence[str] = (),
) -> str:
    """VRT mosaic of the block files; ``overviews`` are GDAL dataset names, one per level,
    whose band i is the overview of band i (referenced explicitly, see :func:`write_cog`)."""
    a, b, c, d, e, f = grid.transform
    gdal_type = {"float32": "Float32", "uint8": "Byte"}[dtype]
    nodata_txt = "nan" if isinstance(nodata, float) and math.isnan(nodata) else repr(nodata)

    def mdi(items: dict[str, str]) -> str:
        inner = "".join(f'<MDI key="{escape(k)}">{escape(str(v))}</MDI>' for k, v in items.items())
        return f"<Metadata>{inner}</Metadata>"

    out = [
        f'<VRTDataset rasterXSize="{grid.width}" rasterYSize="{grid.height}">',
        f"<SRS>{escape(grid.crs_wkt)}</SRS>",
        f"<GeoTransform>{c!r}, {a!r}, {b!r}, {f!r}, {d!r}, {e!r}</GeoTransform>",
        mdi(tags),
    ]
    for i, band in enumerate(bands, start=1):
        out.append(f'<VRTRasterBand dataType="{gdal_type}" band="{i}">')
        out.append(f"<Description>{escape(band.description)}</Description>")
        out.append(f"<NoDataValue>{nodata_txt}</NoDataValue>")
        out.append(f"<UnitType>{escape(units)}</UnitType>")
        out.append(mdi(band.tags))
        for window, path in blocks:
            w, h = int(window.width), int(window.height)
            out.append(
                "<SimpleSource>"
                f'<SourceFilename relativeToVRT="0">{escape(str(path))}</SourceFilename>'
                f"<SourceBand>{band.block_band}</SourceBand>"
                f'<SourceProperties RasterXSize="{w}" RasterYSize="{h}" DataType="Float32" '
                f'BlockXSize="{w}" BlockYSize="1"/>'
                f'<SrcRect xOff="0" yOff="0" xSize="{w}" ySize="{h}"/>'
                f'<DstRect xOff="{int(window.col_off)}" yOff="{int(window.row_off)}" '
                f'xSize="{w}" ySize="{h}"/>'
                "</SimpleSource>"
            )
        for name in overviews:
            out.append(f'<Overview><SourceFilename relativeToVRT="0">{escape(name)}'
                       f"</SourceFilename><SourceBand>{i}</SourceBand></Overview>")
        out.append("</VRTRasterBand>")
    out.append("</VRTDataset>")
    return "\n".join(out)


def overview_count(width: int, height: int, smallest: int = 256) -> int:
    """Overview levels so the coarsest is under ``smallest`` pixels a side (at least one)."""
    side = max(width, height)
    return max(1, math.ceil(math.log2(max(side / smallest, 1.0))))


def write_cog(
    out_path: Path,
    work_dir: Path,
    grid: TargetGrid,
    blocks: Sequence[tuple[Window, Path]],
    bands: Sequence[BandSpec],
    *,
    dtype: str = "float32",
    nodata: float = float("nan"),
    units: str = "",
    tags: dict[str, str] | None = None,
    compression: str = "deflate",
    num_threads: int | str = "ALL_CPUS",
    coded: bool = False,
) -> Path:
    """Assemble block files into one COG at ``out_path`` (atomic: temp name, then rename).

    ``coded``: the map holds code values (e.g. -1 = frozen at depth) among its numbers, so
    its overviews take the nearest value instead of averaging codes with depths.

    Two passes over the block files, both by GDAL: (1) the overviews of the VRT mosaic,
    written uncompressed next to it (``.vrt.ovr``), all levels in one pass; (2) one COG
    copy that compresses the full-resolution image from the VRT and the overviews from the
    ``.ovr`` (``OVERVIEWS=FORCE_USE_EXISTING``). Every pixel is compressed exactly once.
    ``num_threads`` is passed to GDAL (``GDAL_NUM_THREADS`` and the COG ``NUM_THREADS``):
    the calls hold the Python GIL, so parallelism comes from GDAL's own threads.
    """
    vrt_path = work_dir / f"{out_path.stem}.vrt"
    ovr_path = Path(f"{vrt_path}.ovr")
    ovr_path.unlink(missing_ok=True)  # never reuse overviews of an earlier attempt
    xml = dict(dtype=dtype, nodata=nodata, units=units, tags=tags or {})
    vrt_path.write_text(_vrt_xml(grid, blocks, bands, **xml), encoding="utf-8")
    tmp = out_path.with_name(f".{out_path.stem}{PARTIAL_SUFFIX}.tif")
    options = dict(COMPRESSION_OPTIONS[compression])
    if dtype == "uint8":
        options["PREDICTOR"] = "NO"
    resampling = Resampling.nearest if dtype == "uint8" or coded else Resampling.average
    factors = [2**k for k in range(1, overview_count(grid.width, grid.height) + 1)]
    # Pass 1: GDAL builds all levels in one pass over the mosaic (the COG driver's own
    # overview generation re-reads the VRT sources for every level: 4x slower). One GDAL
    # thread: with ALL_CPUS this pass took 1.5x the wall time and 2.8x the CPU (8192^2).
    with rasterio.Env(GDAL_NUM_THREADS="1", COMPRESS_OVERVIEW="NONE",
                      INTERLEAVE_OVERVIEW="BAND", BIGTIFF_OVERVIEW="IF_SAFER",
                      GDAL_TIFF_OVR_BLOCKSIZE=str(COG_BLOCKSIZE)):
        with rasterio.open(vrt_path, "r+") as vrt:
            vrt.build_overviews(factors, resampling)
    # Reference the levels explicitly: GDAL finds an external .ovr by listing the folder,
    # which GDAL_DISABLE_READDIR_ON_OPEN (set because of the many block files) skips.
    levels = [f"GTIFF_DIR:{k}:{ovr_path}" for k in range(1, len(factors) + 1)]
    vrt_path.write_text(_vrt_xml(grid, blocks, bands, overviews=levels, **xml),
                        encoding="utf-8")
    with rasterio.open(vrt_path) as vrt:  # the .ovr holds the levels in factor order
        if vrt.overviews(1) != factors:
            raise RuntimeError(f"unexpected overview layout in {ovr_path}: "
                               f"{vrt.overviews(1)} instead of {factors}")
    # Pass 2: one compressing copy of the full-resolution image and of those overviews.
    with rasterio.Env(GDAL_NUM_THREADS=str(num_threads)):
        rasterio.shutil.copy(
            str(vrt_path),
            str(tmp),
            driver="COG",
            BLOCKSIZE=str(COG_BLOCKSIZE),
            OVERVIEWS="FORCE_USE_EXISTING",
            NUM_THREADS=str(num_threads),
            BIGTIFF="IF_SAFER",
            **options,
        )
    os.replace(tmp, out_path)
    vrt_path.unlink(missing_ok=True)
    ovr_path.unlink(missing_ok=True)
    return out_path
