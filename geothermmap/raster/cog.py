"""Cloud-Optimized GeoTIFF assembled from tiles that are already compressed.

Why: a COG made by GDAL's COG driver from a mosaic decompresses or re-reads every pixel
at least once more after the model has run, in one process. Here the dask tasks compress
their own 512 x 512 tiles (TIFF floating-point predictor + DEFLATE/ZSTD/LZW, by
imagecodecs, which releases the GIL: threads and cluster workers compress in parallel)
and keep the decimated pieces of every overview level of each tile. Writing the COG is
then a byte copy of the full-resolution tiles plus compressing the overview tiles (a third
of the pixels), with no pixel of the full-resolution image touched again.

Layout (TIFF 6.0 and BigTIFF; COG as written by GDAL 3.1+):

- header, then GDAL's structural-metadata "ghost" block (``LAYOUT=IFDS_BEFORE_DATA``,
  ``BLOCK_ORDER=ROW_MAJOR``, ``BLOCK_LEADER=SIZE_AS_UINT4``,
  ``BLOCK_TRAILER=LAST_4_BYTES_REPEATED``) so that GDAL reports ``LAYOUT=COG``;
- all IFDs (full resolution first, then overviews from largest to smallest) with their
  tag data, before any image data;
- tile data from the smallest overview to the full resolution, each level in row-major
  order, each tile preceded by its size (uint32) and followed by a copy of its last
  4 bytes.

The georeferencing and metadata tags (GeoKeys, pixel scale, tie point, GDAL metadata
with band descriptions, units and tags, GDAL nodata) are not written by this module: they
are copied byte for byte from a small sparse GeoTIFF that GDAL writes for the same grid
(:func:`template_tags`), so they are exactly what GDAL would write.

References
----------
Adobe (1992). TIFF Revision 6.0. Section 8 (IFD structure), section 15 (tiles),
section 14 (differencing predictor); Adobe Photoshop TIFF Technical Note 3 (1993 or
2005, from memory) for the floating-point predictor (Predictor = 3).

Aware Systems / Niles Ritter et al. BigTIFF design (2007): 8-byte offsets, header 0x2B.

GDAL COG driver documentation, "File format details" (structural metadata, block
leader and trailer), https://gdal.org/drivers/raster/cog.html.
"""

from __future__ import annotations

import json
import math
import os
import struct
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import imagecodecs
import numpy as np
from numba import njit

TILE = 512  # default COG tile size [px]

_COMPRESSION_CODES = {"deflate": 8, "zstd": 50000, "lzw": 5}
_TYPE_SIZES = {1: 1, 2: 1, 3: 2, 4: 4, 5: 8, 6: 1, 7: 1, 8: 2, 9: 4, 10: 8, 11: 4, 12: 8,
               13: 4, 16: 8, 17: 8, 18: 8}
SHORT, LONG, LONG8 = 3, 4, 16
#: Tags this module writes itself; every other tag of the template's first IFD is copied.
_STRUCTURAL = {254, 256, 257, 258, 259, 262, 273, 277, 278, 279, 284, 317, 322, 323, 324,
               325, 338, 339}
_NODATA_TAG = 42113  # GDAL_NODATA: kept on overview IFDs too, as GDAL does
_GHOST = (
    "LAYOUT=IFDS_BEFORE_DATA\n"
    "BLOCK_ORDER=ROW_MAJOR\n"
    "BLOCK_LEADER=SIZE_AS_UINT4\n"
    "BLOCK_TRAILER=LAST_4_BYTES_REPEATED\n"
    "KNOWN_INCOMPATIBLE_EDITION=NO\n "
)
_GHOST_BYTES = (f"GDAL_STRUCTURAL_METADATA_SIZE={len(_GHOST):06d} bytes\n" + _GHOST).encode()
_CLASSIC_LIMIT = 2**32 - 2**24  # stay classic TIFF below this bound of the file size


# ------------------------------------------------------------------------------ tiles


@dataclass(frozen=True)
class TileCodec:
    """How the tiles of one output are stored: data type, nodata, compression, overviews.

    ``nearest``: overviews take the nearest cell (class or code maps) instead of the mean
    of the valid cells (GDAL's AVERAGE, which ignores nodata).
    """

    dtype: str = "float32"  # "float32" or "uint8"
    nodata: float = float("nan")
    compression: str = "deflate"
    level: int = 1  # DEFLATE/ZSTD level (ignored for LZW)
    nearest: bool = False
    tile: int = TILE  # tile side [px], a multiple of 16
    mantissa_bits: int = 23  # explicit mantissa bits kept in float32 tiles (23: all)

    @property
    def max_levels(self) -> int:
        """Overview levels whose cells never straddle two tiles: 2**k must divide the tile."""
        return (self.tile & -self.tile).bit_length() - 1

    @property
    def predictor(self) -> int:
        return 3 if self.dtype == "float32" else 1  # floating-point predictor for floats

    def to_disk(self, data: np.ndarray) -> np.ndarray:
        """Cast to the disk type; NaN becomes the nodata value of an integer map."""
        if self.dtype == "float32":
            data = data.astype(np.float32, copy=False)
            return data if self.mantissa_bits >= 23 else round_mantissa(data, self.mantissa_bits)
        return np.where(np.isnan(data), self.nodata, data).astype(self.dtype)

    def encode(self, tile: np.ndarray) -> bytes:
        """Compress one tile (bands, rows, cols), rows and cols <= tile, padded with nodata.

        Pixel-interleaved (PlanarConfiguration 1), as GDAL's COG driver writes by default.
        """
        bands, rows, cols = tile.shape
        if rows == cols == self.tile:  # no padding (one band: no copy at all)
            full = np.ascontiguousarray(np.moveaxis(self.to_disk(tile), 0, -1))
        else:
            full = np.empty((self.tile, self.tile, bands), dtype=self.dtype)
            full[...] = self.nodata
            full[:rows, :cols, :] = np.moveaxis(self.to_disk(tile), 0, -1)
        if self.predictor == 3:
            full = imagecodecs.floatpred_encode(full, axis=-2)  # per row, all samples
        if self.compression == "deflate":
            return imagecodecs.deflate_encode(full, level=self.level)  # zlib stream
        if self.compression == "zstd":
            return imagecodecs.zstd_encode(full, level=self.level)
        if self.compression == "lzw":
            return imagecodecs.lzw_encode(full)
        raise ValueError(f"unknown compression {self.compression!r}")


def round_mantissa(values: np.ndarray, keep_bits: int) -> np.ndarray:
    """float32 values rounded to ``keep_bits`` explicit mantissa bits (1..23), to nearest
    with ties to even; NaN and infinities unchanged.

    The dropped bits become zeros, which DEFLATE and ZSTD then store almost for free. The
    relative rounding error is at most 2**-(keep_bits + 1) (e.g. 1.2e-4 for 12 bits).
    This is bit rounding as in Kloewer et al. (2021), "Compressing atmospheric data into
    its real information content", Nature Computational Science 1, 713-724, and the
    netCDF library's BitRound quantization.
    """
    if not 1 <= keep_bits <= 23:
        raise ValueError(f"keep_bits must be 1..23, got {keep_bits}")
    x = np.ascontiguousarray(values, dtype=np.float32)
    if keep_bits == 23:
        return x.copy()
    drop = np.uint32(23 - keep_bits)
    bits = x.view(np.uint32)
    half_minus_one = np.uint32((1 << (23 - keep_bits - 1)) - 1)
    odd = (bits >> drop) & np.uint32(1)  # ties go to the even kept mantissa
    mask = np.uint32(~((1 << (23 - keep_bits)) - 1) & 0xFFFFFFFF)
    rounded = ((bits + half_minus_one + odd) & mask).view(np.float32)
    return np.where(np.isfinite(x), rounded, x)


@njit(cache=True, nogil=True)
def _halve(total, count, tile, first):
    """2 x 2 sums of valid values and their counts; odd edges keep their remainder.

    ``first``: sum the (bands, rows, cols) values of ``tile`` themselves, NaN left out;
    else sum the level below's ``total`` and ``count``.
    """
    bands, rows, cols = tile.shape if first else total.shape
    out_t = np.zeros((bands, (rows + 1) // 2, (cols + 1) // 2))
    out_n = np.zeros((bands, (rows + 1) // 2, (cols + 1) // 2))
    for b in range(bands):
        for i in range(rows):
            for j in range(cols):
                if first:
                    v = np.float64(tile[b, i, j])
                    if not math.isnan(v):
                        out_t[b, i // 2, j // 2] += v
                        out_n[b, i // 2, j // 2] += 1.0
                else:
                    out_t[b, i // 2, j // 2] += total[b, i, j]
                    out_n[b, i // 2, j // 2] += count[b, i, j]
    return out_t, out_n


def overview_pieces(tile: np.ndarray, levels: int, nearest: bool) -> list[np.ndarray]:
    """The pieces of overview levels 1..levels that one full-resolution tile covers.

    Level k has cells of 2**k x 2**k full-resolution cells; tiles start at multiples of
    the tile size, a multiple of 2**k (see :attr:`TileCodec.max_levels`), so a level-k
    cell never straddles two tiles and each tile's piece is exact.
    Mean: of the valid (non-NaN) cells, NaN where none (GDAL's AVERAGE ignores nodata),
    accumulated in float64 from sums and counts, so level k equals the direct mean over
    its 2**k x 2**k window. Nearest: the cell at offset 2**(k-1) in the window (GDAL's
    NEAREST picks the cell under the window centre), clipped at the grid edge.
    """
    pieces = []
    if nearest:
        _, rows, cols = tile.shape
        for k in range(1, levels + 1):
            f = 2**k
            ri = np.minimum(np.arange(0, rows, f) + f // 2, rows - 1)
            ci = np.minimum(np.arange(0, cols, f) + f // 2, cols - 1)
            pieces.append(np.ascontiguousarray(tile[:, ri][:, :, ci], dtype=np.float32))
        return pieces
    tile = np.ascontiguousarray(tile, dtype=np.float32)
    total = count = np.zeros((1, 1, 1))
    for k in range(levels):
        total, count = _halve(total, count, tile, k == 0)
        with np.errstate(invalid="ignore", divide="ignore"):
            pieces.append(np.where(count > 0, total / count, np.nan).astype(np.float32))
    return pieces


def overview_shapes(width: int, height: int, levels: int) -> list[tuple[int, int]]:
    """(width, height) of the full image (level 0) and of each overview level (ceil)."""
    return [(-(-width // 2**k), -(-height // 2**k)) for k in range(levels + 1)]


# ----------------------------------------------------------------------- tile storage


_MAGIC = b"GTMTILES2\n"


def write_tile_store(path: Path, entries: dict[str, bytes | np.ndarray]) -> None:
    """Write compressed tiles and raw pieces of one block to one file, atomically.

    Layout: magic, uint64 index length, JSON index {key: [offset, length, dtype, shape]},
    payload. Temporary name (process id + object id), then ``os.replace``: a reader never
    sees a partial file, and a task run twice replaces the file by the same bytes.
    """
    index: dict[str, list] = {}
    payload: list[bytes] = []
    pos = 0
    for key, value in entries.items():
        if isinstance(value, np.ndarray):
            raw = np.ascontiguousarray(value).tobytes()
            index[key] = [pos, len(raw), value.dtype.str, list(value.shape)]
        else:
            raw = bytes(value)
            index[key] = [pos, len(raw), "", []]
        payload.append(raw)
        pos += len(raw)
    head = json.dumps(index, separators=(",", ":")).encode()
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f"{path.name}.{os.getpid()}.{id(entries)}.partial")
    with open(tmp, "wb") as f:
        f.write(_MAGIC + struct.pack("<Q", len(head)) + head)
        for raw in payload:
            f.write(raw)
    os.replace(tmp, path)


class TileStoreReader:
    """Random access to the entries of tile-store files, keeping a few files open."""

    def __init__(self, max_open: int = 64):
        self._open: dict[Path, tuple] = {}
        self._max_open = max_open

    def _entry(self, path: Path):
        item = self._open.get(path)
        if item is None:
            if len(self._open) >= self._max_open:
                old = next(iter(self._open))
                self._open.pop(old)[0].close()
            f = open(path, "rb")
            magic = f.read(len(_MAGIC))
            if magic != _MAGIC:
                f.close()
                raise ValueError(f"{path} is not a tile store of this version")
            (n,) = struct.unpack("<Q", f.read(8))
            index = json.loads(f.read(n))
            item = (f, index, len(_MAGIC) + 8 + n)
            self._open[path] = item
        return item

    def length(self, path: Path, key: str) -> int:
        """Size in bytes of an entry."""
        return self._entry(path)[1][key][1]

    def read(self, path: Path, key: str) -> bytes | np.ndarray:
        f, index, base = self._entry(path)
        offset, length, dtype, shape = index[key]
        f.seek(base + offset)
        raw = f.read(length)
        if not dtype:
            return raw
        return np.frombuffer(raw, dtype=dtype).reshape(shape)

    def close(self) -> None:
        for f, _, _ in self._open.values():
            f.close()
        self._open.clear()


def is_tile_store(path: Path) -> bool:
    try:
        with open(path, "rb") as f:
            return f.read(len(_MAGIC)) == _MAGIC
    except OSError:
        return False


# ------------------------------------------------------------------------ TIFF tags


def read_first_ifd(data: bytes) -> dict[int, tuple[int, int, bytes]]:
    """Tags of the first IFD of a little-endian TIFF or BigTIFF: {tag: (type, count, raw)}."""
    if data[:2] != b"II":
        raise ValueError("only little-endian TIFF is supported")
    big = data[2:4] == b"+\x00"
    if big:
        (offset,) = struct.unpack_from("<Q", data, 8)
        (n,) = struct.unpack_from("<Q", data, offset)
        pos, entry, inline = offset + 8, 20, 8
    else:
        (offset,) = struct.unpack_from("<I", data, 4)
        (n,) = struct.unpack_from("<H", data, offset)
        pos, entry, inline = offset + 2, 12, 4
    tags = {}
    for i in range(n):
        p = pos + i * entry
        if big:
            tag, typ, count = struct.unpack_from("<HHQ", data, p)
        else:
            tag, typ, count = struct.unpack_from("<HHI", data, p)
        size = _TYPE_SIZES[typ] * count
        value_at = p + entry - inline
        if size > inline:
            (value_at,) = struct.unpack_from("<Q" if big else "<I", data, value_at)
        tags[tag] = (typ, count, bytes(data[value_at:value_at + size]))
    return tags


def template_tags(profile: dict, tile: int, descriptions: Sequence[str], band_tags: Sequence[dict],
                  units: str, tags: dict[str, str]) -> dict[int, tuple[int, int, bytes]]:
    """Georeferencing and metadata tags as GDAL writes them for this grid and these bands.

    GDAL writes a sparse (no tile data) tiled GeoTIFF in memory with the same CRS,
    transform, size, band count, data type, nodata, descriptions, units and tags; its
    non-structural tags are returned for copying.
    """
    from rasterio.io import MemoryFile

    with MemoryFile() as mem:
        with mem.open(driver="GTiff", tiled=True, blockxsize=tile, blockysize=tile,
                      SPARSE_OK="TRUE", BIGTIFF="NO", **profile) as dst:
            dst.update_tags(**tags)
            for i, (desc, btags) in enumerate(zip(descriptions, band_tags, strict=True), 1):
                dst.set_band_description(i, desc)
                dst.set_band_unit(i, units)
                if btags:
                    dst.update_tags(i, **btags)
        raw = mem.read()
    return {k: v for k, v in read_first_ifd(raw).items() if k not in _STRUCTURAL}


# ------------------------------------------------------------------------- the file


def _pack_ifd(entries: list[tuple[int, int, int, bytes]], at: int, big: bool,
              next_ifd: int) -> bytes:
    """One IFD at file offset ``at``, its out-of-line values right after it (word aligned)."""
    entries = sorted(entries)
    inline = 8 if big else 4
    head = 8 if big else 2
    size = head + len(entries) * (20 if big else 12) + (8 if big else 4)
    extra = bytearray()
    table = bytearray(struct.pack("<Q" if big else "<H", len(entries)))
    for tag, typ, count, raw in entries:
        if len(raw) <= inline:
            value = raw.ljust(inline, b"\0")
        else:
            if (size + len(extra)) % 2:
                extra += b"\0"
            value = struct.pack("<Q" if big else "<I", at + size + len(extra))
            extra += raw
        table += struct.pack("<HHQ" if big else "<HHI", tag, typ, count) + value
    table += struct.pack("<Q" if big else "<I", next_ifd)
    out = bytes(table + extra)
    return out + (b"\0" if len(out) % 2 else b"")


def _short_or_long(tag: int, value: int) -> tuple[int, int, int, bytes]:
    if value < 2**16:
        return (tag, SHORT, 1, struct.pack("<H", value))
    return (tag, LONG, 1, struct.pack("<I", value))


@dataclass(frozen=True)
class CogLayout:
    """Sizes of the full image and its overviews, and the tiles of each."""

    width: int
    height: int
    bands: int
    levels: int  # overview levels
    tile: int = TILE  # tile side [px]

    @property
    def shapes(self) -> list[tuple[int, int]]:
        return overview_shapes(self.width, self.height, self.levels)

    def tiles(self, level: int) -> tuple[int, int]:
        """(tile rows, tile cols) of a level."""
        w, h = self.shapes[level]
        return -(-h // self.tile), -(-w // self.tile)


def _ifd_entries(layout: CogLayout, level: int, codec: TileCodec, copied: dict,
                 offsets: Sequence[int], counts: Sequence[int], big: bool) -> list:
    w, h = layout.shapes[level]
    n = layout.bands
    bits = 32 if codec.dtype == "float32" else 8
    fmt = 3 if codec.dtype == "float32" else 1
    off_type, off_fmt = (LONG8, "Q") if big else (LONG, "I")
    entries = [
        _short_or_long(256, w),
        _short_or_long(257, h),
        (258, SHORT, n, struct.pack(f"<{n}H", *([bits] * n))),
        (259, SHORT, 1, struct.pack("<H", _COMPRESSION_CODES[codec.compression])),
        (262, SHORT, 1, struct.pack("<H", 1)),  # min-is-black
        (277, SHORT, 1, struct.pack("<H", n)),
        (284, SHORT, 1, struct.pack("<H", 1)),  # pixel interleaved
        (322, SHORT, 1, struct.pack("<H", layout.tile)),
        (323, SHORT, 1, struct.pack("<H", layout.tile)),
        (324, off_type, len(offsets), struct.pack(f"<{len(offsets)}{off_fmt}", *offsets)),
        (325, off_type, len(counts), struct.pack(f"<{len(counts)}{off_fmt}", *counts)),
        (339, SHORT, n, struct.pack(f"<{n}H", *([fmt] * n))),
    ]
    if codec.predictor != 1:
        entries.append((317, SHORT, 1, struct.pack("<H", codec.predictor)))
    if n > 1:
        entries.append((338, SHORT, n - 1, struct.pack(f"<{n - 1}H", *([0] * (n - 1)))))
    if level > 0:
        entries.append((254, LONG, 1, struct.pack("<I", 1)))  # reduced-resolution image
        copied = {k: v for k, v in copied.items() if k == _NODATA_TAG}
    entries += [(tag, typ, count, raw) for tag, (typ, count, raw) in copied.items()]
    return entries


def write_cog_from_tiles(
    path: Path,
    layout: CogLayout,
    codec: TileCodec,
    copied_tags: dict,
    level_tiles: Callable[[int], Iterable[bytes]],
    data_bound: int,
) -> None:
    """Write a COG whose tiles of level k are the bytes yielded by ``level_tiles(k)``.

    ``level_tiles(k)`` yields the compressed tiles of level k (0 = full resolution) in
    row-major order; it is called from the smallest overview to level 0. ``data_bound``:
    an upper bound of the total tile bytes, which decides classic TIFF or BigTIFF first.
    """
    n_levels = layout.levels + 1
    n_tiles = [layout.tiles(k)[0] * layout.tiles(k)[1] for k in range(n_levels)]
    header_size = 8 + len(_GHOST_BYTES)
    ifd_size_bound = sum(16 * t + 4096 for t in n_tiles) + sum(len(v[2]) for v in
                                                               copied_tags.values())
    big = header_size + 8 + ifd_size_bound + data_bound + 8 * sum(n_tiles) >= _CLASSIC_LIMIT
    header_size = (16 if big else 8) + len(_GHOST_BYTES)
    first_ifd = header_size + (header_size % 2)

    def ifds(offsets, counts) -> bytes:
        at = first_ifd
        blobs = []
        for k in range(n_levels):
            ents = _ifd_entries(layout, k, codec, copied_tags, offsets[k], counts[k], big)
            probe = _pack_ifd(ents, at, big, 0)
            nxt = at + len(probe) if k + 1 < n_levels else 0
            blob = _pack_ifd(ents, at, big, nxt)
            blobs.append(blob)
            at += len(blob)
        return b"".join(blobs)

    zeros = [[0] * t for t in n_tiles]
    ifd_area = len(ifds(zeros, zeros))
    offsets = [[0] * t for t in n_tiles]
    counts = [[0] * t for t in n_tiles]
    with open(path, "wb") as f:
        if big:
            f.write(b"II+\x00" + struct.pack("<HHQ", 8, 0, first_ifd))
        else:
            f.write(b"II*\x00" + struct.pack("<I", first_ifd))
        f.write(_GHOST_BYTES)
        f.write(b"\0" * (first_ifd - header_size + ifd_area))
        pos = first_ifd + ifd_area
        for k in range(n_levels - 1, -1, -1):
            n = 0
            for raw in level_tiles(k):
                f.write(struct.pack("<I", len(raw)))
                f.write(raw)
                f.write(raw[-4:])
                offsets[k][n] = pos + 4
                counts[k][n] = len(raw)
                pos += len(raw) + 8
                n += 1
            if n != n_tiles[k]:
                raise RuntimeError(f"level {k}: {n} tiles given, {n_tiles[k]} expected")
        if not big and pos >= 2**32:
            raise RuntimeError("COG data exceeded its size bound for a classic TIFF")
        blob = ifds(offsets, counts)
        if len(blob) != ifd_area:
            raise RuntimeError("IFD size changed between layout and write")
        f.seek(first_ifd)
        f.write(blob)
