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

When all blocks exist, the process that runs the pipeline assembles each output: it
composes and compresses the overview tiles from the stored pieces (a third of the pixels;
two threads, the codecs release the GIL) and copies the full-resolution tiles byte for
byte. On a cluster the workers and the machine that runs ``geothermmap run`` must all see
the output folder at the same path (a shared filesystem); see ``benchmarks/README.md``.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import ThreadPoolExecutor
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
_ASSEMBLY_THREADS = 2
_COMPRESSED_BOUND = {"deflate": 1.01, "zstd": 1.01, "lzw": 1.6}  # worst-case growth


def tile_size(chunk: int) -> int:
    """COG tile side for a chunk: 512, or the chunk itself when it is smaller."""
    return min(chunk, TILE)


def block_size(chunk: int) -> int:
    """Work-block side: the chunk, rounded up to whole tiles (no tile spans two tasks)."""
    tile = tile_size(chunk)
    return -(-chunk // tile) * tile


def tile_codec(dtype: str, compression: str, coded: bool, tile: int = TILE) -> TileCodec:
    """The tile codec of an output: nodata NaN (floats) or 0 (classes), nearest overviews
    for classes and coded maps (codes must not be averaged with values)."""
    level = int(COMPRESSION_OPTIONS[compression].get("LEVEL", 1))
    nodata = 0.0 if dtype == "uint8" else float("nan")
    return TileCodec(dtype=dtype, nodata=nodata, compression=compression, level=level,
                     nearest=coded or dtype == "uint8", tile=tile)


def overview_count(width: int, height: int, smallest: int = 256) -> int:
    """Overview levels so the coarsest is under ``smallest`` pixels a side (at least one)."""
    side = max(width, height)
    return max(1, math.ceil(math.log2(max(side / smallest, 1.0))))


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


def _pipelined(items: Iterable, fn: Callable, depth: int = 4) -> Iterator:
    """``map(fn, items)`` on a small thread pool, in order, at most ``depth`` ahead."""
    with ThreadPoolExecutor(_ASSEMBLY_THREADS, thread_name_prefix="geothermmap-cog") as ex:
        pending: deque = deque()
        for item in items:
            pending.append(ex.submit(fn, item))
            if len(pending) >= depth:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()


def write_cog(
    out_path: Path,
    name: str,
    grid: TargetGrid,
    blocks: Sequence[tuple[Window, Path]],
    descriptions: Sequence[str],
    band_tags: Sequence[dict[str, str]],
    codec: TileCodec,
    *,
    units: str = "",
    tags: dict[str, str] | None = None,
    levels: int | None = None,
) -> Path:
    """Assemble output ``name`` from the blocks' tile stores into one COG at ``out_path``.

    Atomic: written under a temporary name, renamed into place when complete.
    """
    n_bands = len(descriptions)
    tile = codec.tile
    if levels is None:
        levels = min(overview_count(grid.width, grid.height), codec.max_levels)
    layout = CogLayout(grid.width, grid.height, n_bands, levels, tile)
    profile = {"width": grid.width, "height": grid.height, "count": n_bands,
               "dtype": codec.dtype, "crs": grid.crs, "transform": grid.affine,
               "nodata": codec.nodata}
    copied = template_tags(profile, tile, descriptions, band_tags, units, tags or {})
    where: dict[tuple[int, int], Path] = {}
    for window, path in blocks:
        for r, c, _, _ in _tile_windows(window, tile):
            where[r, c] = path
    reader = TileStoreReader()
    itemsize = np.dtype(codec.dtype).itemsize
    tile_rows, tile_cols = layout.tiles(0)

    def base_tiles() -> Iterator[bytes]:
        for r in range(tile_rows):
            for c in range(tile_cols):
                yield reader.read(where[r, c], f"{name}/{r}/{c}")

    def composed(k: int) -> Iterator[np.ndarray]:
        """Level-k tiles, each composed from the pieces of the 2**k x 2**k tiles below."""
        f = 2**k
        side = tile // f
        width_k, height_k = layout.shapes[k]
        rows_k, cols_k = layout.tiles(k)
        for tr in range(rows_k):
            for tc in range(cols_k):
                h = min(tile, height_k - tr * tile)
                w = min(tile, width_k - tc * tile)
                out = np.empty((n_bands, h, w), np.float32)
                out[...] = codec.nodata
                for r in range(tr * f, min((tr + 1) * f, tile_rows)):
                    for c in range(tc * f, min((tc + 1) * f, tile_cols)):
                        piece = reader.read(where[r, c], f"{name}/{r}/{c}/{k}")
                        y, x = (r - tr * f) * side, (c - tc * f) * side
                        out[:, y:y + piece.shape[1], x:x + piece.shape[2]] = piece
                yield out

    def level_tiles(k: int) -> Iterable[bytes]:
        return base_tiles() if k == 0 else _pipelined(composed(k), codec.encode)

    base_bytes = sum(reader.length(where[r, c], f"{name}/{r}/{c}")
                     for r in range(tile_rows) for c in range(tile_cols))
    n_ovr = sum(layout.tiles(k)[0] * layout.tiles(k)[1] for k in range(1, levels + 1))
    bound = base_bytes + int(n_ovr * (tile * tile * n_bands * itemsize
                                      * _COMPRESSED_BOUND[codec.compression] + 1024))
    tmp = out_path.with_name(f".{out_path.stem}{PARTIAL_SUFFIX}.tif")
    try:
        write_cog_from_tiles(tmp, layout, codec, copied, level_tiles, bound)
    finally:
        reader.close()
    tmp.replace(out_path)
    return out_path
