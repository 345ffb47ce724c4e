"""Output writing: compressed tiles per block, then one Cloud-Optimized GeoTIFF per output.

Why this shape: a COG has its overviews and all its directories before the image data,
so it cannot be streamed from parallel tasks into one file. Each dask task therefore
writes its block to its own file under the run's work folder (a *tile store*, see
:mod:`geothermmap.raster.cog`): for every output, the block's 512 x 512 tiles already
compressed exactly as they go into the COG, and the decimated pieces of every overview
level. No two tasks ever write to the same file, so threads and processes on a cluster
need no lock. A tile store is written under a temporary name and renamed when complete
(``os.replace``, atomic on one filesystem): a resumed run can trust any store it finds,
and a task that runs twice (a cluster retrying a lost worker) only replaces a store by the
same bytes. Work blocks are whole multiples of the tile size, so tiles never straddle
two tasks.

Overview tiles are tasks too: each composes one overview tile of every output from the
stored pieces of the tiles it covers and compresses it into a store of its own, as soon
as those blocks are done (so the overviews, a third of the pixels, are compressed in
parallel with the remaining blocks). When all tasks are done, the process that runs the
pipeline writes each COG by copying every tile byte for byte. On a cluster the workers
and the machine that runs ``geothermmap run`` must all see the output folder at the same
path (a shared filesystem); see ``benchmarks/README.md``.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from rasterio.windows import Window

from geothermmap.raster.cog import (
    TILE,
    CogLayout,
    TileCodec,
    TileStoreReader,
    overview_pieces,
    template_tags,
    write_cog_from_tiles,
    write_tile_store,
)
from geothermmap.raster.grid import TargetGrid

#: Creation options of each recipe ``compression`` for GDAL (the benchmark's floor and the
#: demo inputs); the COG tiles use the same codec and level through :func:`tile_codec`.
COMPRESSION_OPTIONS = {
    "deflate": {"COMPRESS": "DEFLATE", "PREDICTOR": "YES", "LEVEL": "1"},
    "zstd": {"COMPRESS": "ZSTD", "PREDICTOR": "YES", "LEVEL": "1"},
    "lzw": {"COMPRESS": "LZW", "PREDICTOR": "YES"},
}
COG_BLOCKSIZE = TILE  # tile side of outputs of runs with chunks of 512 px or more
PARTIAL_SUFFIX = ".partial"


def tile_size(chunk: int) -> int:
    """COG tile side for a chunk: 512, or the chunk itself when it is smaller."""
    return min(chunk, TILE)


def block_size(chunk: int) -> int:
    """Work-block side: the chunk, rounded up to whole tiles (no tile spans two tasks)."""
    tile = tile_size(chunk)
    return -(-chunk // tile) * tile


def tile_codec(dtype: str, compression: str, coded: bool, tile: int = TILE,
               mantissa_bits: int | None = None) -> TileCodec:
    """The tile codec of an output: nodata NaN (floats) or 0 (classes), nearest overviews
    for classes and coded maps (codes must not be averaged with values), float values
    rounded to ``mantissa_bits`` (None: all 23 kept)."""
    level = int(COMPRESSION_OPTIONS[compression].get("LEVEL", 1))
    nodata = 0.0 if dtype == "uint8" else float("nan")
    return TileCodec(dtype=dtype, nodata=nodata, compression=compression, level=level,
                     nearest=coded or dtype == "uint8", tile=tile,
                     mantissa_bits=23 if mantissa_bits is None else mantissa_bits)


def overview_count(width: int, height: int, smallest: int = 256) -> int:
    """Overview levels so the coarsest is under ``smallest`` pixels a side (at least one),
    and no more than halve the shorter side: a 1-pixel strip gets none (a level of the
    same width would have a decimation of 1, which COG readers reject)."""
    side = max(width, height)
    wanted = max(1, math.ceil(math.log2(max(side / smallest, 1.0))))
    return min(wanted, int(math.log2(max(min(width, height), 1))))


def block_path(work_dir: Path, bi: int, bj: int) -> Path:
    return work_dir / "blocks" / f"b{bi:05d}_{bj:05d}.tiles"


def _tile_windows(window: Window, tile: int) -> Iterator[tuple[int, int, slice, slice]]:
    """Grid tile (row, col) and block-local slices of every tile in a tile-aligned block."""
    r0, c0 = int(window.row_off), int(window.col_off)
    h, w = int(window.height), int(window.width)
    if r0 % tile or c0 % tile:
        raise ValueError(f"block at row {r0}, col {c0} is not aligned to {tile} px tiles")
    for y in range(0, h, tile):
        for x in range(0, w, tile):
            yield ((r0 + y) // tile, (c0 + x) // tile, slice(y, min(y + tile, h)),
                   slice(x, min(x + tile, w)))


def write_block(path: Path, outputs: dict[str, np.ndarray], codecs: dict[str, TileCodec],
                window: Window, levels: int) -> None:
    """Compress one block's outputs (name -> (bands, rows, cols)) into its tile store."""
    entries: dict[str, bytes | np.ndarray] = {}
    for name, data in outputs.items():
        codec = codecs[name]
        for r, c, rows, cols in _tile_windows(window, codec.tile):
            tile = data[:, rows, cols]
            entries[f"{name}/{r}/{c}"] = codec.encode(tile)
            for k, piece in enumerate(overview_pieces(tile, levels, codec.nearest), 1):
                entries[f"{name}/{r}/{c}/{k}"] = piece
    write_tile_store(path, entries)


@dataclass(frozen=True)
class TilePyramid:
    """Where the tiles of a run's outputs live (picklable, for cluster workers).

    Full-resolution tile (r, c) is in the tile store of its work block; overview tile
    (k, tr, tc) is in a store of its own, written by an overview task from the pieces of
    the 2**k x 2**k full-resolution tiles it covers, as soon as their blocks are done.
    """

    work_dir: str
    width: int
    height: int
    tile: int
    block: int  # work-block side, a multiple of ``tile``
    levels: int

    def layout(self, bands: int) -> CogLayout:
        return CogLayout(self.width, self.height, bands, self.levels, self.tile)

    def block_of(self, r: int, c: int) -> tuple[int, int]:
        per = self.block // self.tile
        return r // per, c // per

    def base_store(self, r: int, c: int) -> Path:
        return block_path(Path(self.work_dir), *self.block_of(r, c))

    def overview_store(self, k: int, tr: int, tc: int) -> Path:
        return Path(self.work_dir) / "blocks" / f"o{k}_{tr:05d}_{tc:05d}.tiles"

    def overview_tiles(self) -> list[tuple[int, int, int]]:
        layout = self.layout(1)
        return [(k, tr, tc) for k in range(1, self.levels + 1)
                for tr in range(layout.tiles(k)[0]) for tc in range(layout.tiles(k)[1])]

    def sources(self, k: int, tr: int, tc: int) -> list[tuple[int, int]]:
        """Full-resolution tiles under overview tile (k, tr, tc)."""
        rows, cols = self.layout(1).tiles(0)
        f = 2**k
        return [(r, c) for r in range(tr * f, min((tr + 1) * f, rows))
                for c in range(tc * f, min((tc + 1) * f, cols))]


def write_overview(pyramid: TilePyramid, k: int, tr: int, tc: int,
                   codecs: dict[str, TileCodec]) -> None:
    """Compose and compress overview tile (k, tr, tc) of every output into its store."""
    f = 2**k
    tile = pyramid.tile
    side = tile // f
    width_k, height_k = pyramid.layout(1).shapes[k]
    h = min(tile, height_k - tr * tile)
    w = min(tile, width_k - tc * tile)
    reader = TileStoreReader()
    entries: dict[str, bytes | np.ndarray] = {}
    try:
        for name, codec in codecs.items():
            out = None
            for r, c in pyramid.sources(k, tr, tc):
                piece = reader.read(pyramid.base_store(r, c), f"{name}/{r}/{c}/{k}")
                if out is None:
                    out = np.empty((piece.shape[0], h, w), np.float32)
                    out[...] = codec.nodata
                y, x = (r - tr * f) * side, (c - tc * f) * side
                out[:, y:y + piece.shape[1], x:x + piece.shape[2]] = piece
            entries[name] = codec.encode(out)
    finally:
        reader.close()
    write_tile_store(pyramid.overview_store(k, tr, tc), entries)


def write_cog(
    out_path: Path,
    name: str,
    grid: TargetGrid,
    pyramid: TilePyramid,
    descriptions: Sequence[str],
    band_tags: Sequence[dict[str, str]],
    codec: TileCodec,
    *,
    units: str = "",
    tags: dict[str, str] | None = None,
) -> Path:
    """Copy output ``name``'s tiles from the tile stores into one COG at ``out_path``.

    Every tile is already compressed: this is a byte copy plus the TIFF directories.
    Atomic: written under a temporary name, renamed into place when complete.
    """
    layout = pyramid.layout(len(descriptions))
    profile = {"width": grid.width, "height": grid.height, "count": layout.bands,
               "dtype": codec.dtype, "crs": grid.crs, "transform": grid.affine,
               "nodata": codec.nodata}
    copied = template_tags(profile, pyramid.tile, descriptions, band_tags, units, tags or {})
    reader = TileStoreReader()

    def where(k: int) -> Iterator[tuple[Path, str]]:
        rows, cols = layout.tiles(k)
        for r in range(rows):
            for c in range(cols):
                if k == 0:
                    yield pyramid.base_store(r, c), f"{name}/{r}/{c}"
                else:
                    yield pyramid.overview_store(k, r, c), name

    def level_tiles(k: int) -> Iterator[bytes]:
        for path, key in where(k):
            yield reader.read(path, key)

    size = sum(reader.length(path, key) for k in range(layout.levels + 1)
               for path, key in where(k))
    tmp = out_path.with_name(f".{out_path.stem}{PARTIAL_SUFFIX}.tif")
    try:
        write_cog_from_tiles(tmp, layout, codec, copied, level_tiles, size)
    finally:
        reader.close()
    tmp.replace(out_path)
    return out_path
