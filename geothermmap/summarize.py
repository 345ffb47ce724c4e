"""Zonal statistics of a run's maps: one row per zone and output band, for planners.

For every zone (district, catchment, parcel) and every band of every output map of a run:
the number of cells, the number of valid cells and their area, mean, standard deviation,
minimum, maximum and chosen percentiles; for the frost-class map (where a run wrote one)
the share of the zone's valid area in each class. Results go to a GeoPackage layer
``summary`` (one feature per zone, zone geometry, one column per statistic) and to a CSV
table in long form (one row per zone x output x band, with units), e.g. ``summary.gpkg``
and ``summary.csv`` in the output folder.

How it is computed (memory bounded by the block size, never by the grid):

- **Zones are rasterised once** onto the output grid, block by block
  (``rasterio.features.rasterize``, ``all_touched=False``: a cell belongs to a zone when
  its centre lies inside the polygon) into a temporary uint32 label grid on disk
  (memory-mapped), zone index 1..N, 0 = no zone. Zones smaller than a cell may cover no
  cell centre; they get empty statistics and are reported.
- **Overlapping polygons: later polygons win.** Zones are burnt in file order, so a cell
  covered by two zones counts for the one that comes later in the file; the number of
  such cells is counted and reported. Features that share a ``--by`` value form one zone
  (their geometries are dissolved), so they never compete.
- **Moments** are reduced per block with ``numpy.bincount`` (count, area, sum) and
  ``numpy.minimum.at`` / ``numpy.maximum.at``, and combined over blocks. The standard
  deviation is summed in the next pass around each zone's mean (the two-pass algorithm:
  no cancellation, a zone of equal values gives exactly 0); it is the population one
  (ddof = 0), as in the run record.
- **Percentiles** follow numpy's default definition (linear interpolation between order
  statistics, Hyndman & Fan 1996 type 7) and are exact in practice, in two more passes
  per output: (1) a histogram per zone and band spanning that zone's own [min, max] with
  up to 4096 bins (about one bin per 16 cells for small zones), plus the number of cells
  equal to the minimum and to the maximum (spikes such as frost depth 0 = no frost);
  (2) the values in the few bins that hold a requested order statistic are collected and
  sorted, which gives the order statistic exactly. Only if such a bin holds more than
  65,536 cells of different values (or all such bins together more than 8 million cells)
  is the value interpolated by rank between that bin's smallest and largest value: then
  the error is below the bin width, (zone max - zone min) / bins; the summary notes say
  when this happened.
- **Code values are not measurements**: ``frost_depth`` -1 (frozen at depth) and the
  ``warming_doy`` / ``cooling_doy`` codes -1 / -2 (never above / above all year) are left
  out of every statistic (``valid_cells`` counts measured values only) and counted per
  zone and band in their own columns (``frozen_at_depth_cells``, ``never_above_cells``,
  ``always_above_cells``).
- **Geographic grids** (degrees): mean, standard deviation and frost-class shares are
  weighted by cell area (ellipsoidal area of each row of cells, from pyproj); counts are
  cells; percentiles are by cell, unweighted (cell areas within a zone differ by the
  cosine of latitude only). On projected grids (the usual case) all cells have one area.

References
----------
Hyndman, R. J., & Fan, Y. (1996). Sample quantiles in statistical packages. The American
Statistician, 50(4), 361-365. doi:10.1080/00031305.1996.10473566
"""

from __future__ import annotations

import contextlib
import difflib
import json
import math
import os
import re
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import click
import numpy as np
import rasterio
from rasterio.features import MergeAlg, rasterize
from rasterio.windows import bounds as window_bounds

from geothermmap import record
from geothermmap.errors import UserError
from geothermmap.outputs import OUTPUTS
from geothermmap.raster.grid import TargetGrid

SUMMARY_GPKG = "summary.gpkg"
SUMMARY_CSV = "summary.csv"
SUMMARY_LAYER = "summary"
RECORD_NAME = "run_record.json"
DEFAULT_PERCENTILES = (10.0, 50.0, 90.0)

BLOCK = 1024  # read window side: two COG tiles of 512 (tile-aligned reads)
MAX_BINS = 4096  # histogram bins per zone and band at most
CELLS_PER_BIN = 16  # small zones: about one bin per 16 cells
HIST_BUDGET = 8_000_000  # histogram entries per output at most (int64: 64 MB)
COLLECT_CAP_PER_BIN = 65_536  # bins holding more values are bracketed, not collected
COLLECT_CAP_TOTAL = 8_000_000  # values collected per output at most
_ZONE_ID = "zone"
GDAL_CACHE_MB = 64  # each block is read once per pass: a small cache is enough


@dataclass
class ZoneSummary:
    """What :func:`summarize` computed and wrote."""

    table: Any  # pandas.DataFrame, long form: zone x output x band
    zones: Any  # geopandas.GeoDataFrame, wide form: one feature per zone
    gpkg_path: Path | None
    csv_path: Path | None
    label: str  # name of the zone label column
    notes: list[str] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)


@dataclass
class _Output:
    """One output map to summarise."""

    name: str
    path: Path
    units: str
    categorical: bool
    band_labels: list[str]  # column suffixes, "" for single-band outputs
    band_descriptions: list[str]
    legend: dict[int, str] = field(default_factory=dict)
    codes: tuple[tuple[float, str], ...] = ()  # code values, left out of the statistics


# --------------------------------------------------------------------------- inputs


def read_run_outputs(output_dir: str | Path, names: list[str] | None = None
                     ) -> tuple[TargetGrid, list[_Output], dict]:
    """The grid, output maps and run record of a geothermmap output folder."""
    out = Path(output_dir)
    if not out.is_dir():
        raise UserError(f"output folder not found: {out}")
    rec = record.read(out / RECORD_NAME)
    if rec is None:
        raise UserError(f"{out} has no readable {RECORD_NAME}: give the folder a "
                        "`geothermmap run` wrote")
    entries = {n: e for n, e in rec.get("outputs", {}).items() if (out / e["file"]).exists()}
    if names:
        unknown = [n for n in names if n not in entries]
        if unknown:
            raise UserError(f"output(s) {', '.join(unknown)} not in {out}; available: "
                            + ", ".join(entries))
        entries = {n: entries[n] for n in names}
    if not entries:
        raise UserError(f"{out} holds no complete output maps")
    grid = None
    outputs = []
    for name, entry in entries.items():
        path = out / entry["file"]
        with rasterio.open(path) as ds:
            g = TargetGrid.from_parts(ds.crs, ds.transform, ds.width, ds.height)
            if grid is None:
                grid = g
            elif (g.transform, g.shape) != (grid.transform, grid.shape) or ds.crs != grid.crs:
                raise UserError(f"{path.name} is not on the grid of the other maps in {out}")
            labels = [band_label(ds.tags(b)) for b in range(1, ds.count + 1)]
            descriptions = [d or f"band {i + 1}" for i, d in enumerate(ds.descriptions)]
            legend = class_legend(ds.tags()) if ds.dtypes[0] == "uint8" else {}
            if ds.nodata is not None and math.isfinite(ds.nodata):
                legend.pop(int(ds.nodata), None)  # e.g. class_0 = nodata
            categorical = ds.dtypes[0] == "uint8" or entry.get("units") == "class"
        units = entry.get("units") or (OUTPUTS[name].units if name in OUTPUTS else "")
        codes = OUTPUTS[name].codes if name in OUTPUTS else ()
        outputs.append(_Output(name, path, units, categorical, labels, descriptions, legend,
                               codes))
    assert grid is not None
    return grid, outputs, rec


def band_label(tags: dict[str, str]) -> str:
    """Short column suffix of a band from its tags: ``0.1m``, ``5C``, ``w2`` or ``""``."""
    if "depth_m" in tags:
        return f"{float(tags['depth_m']):g}m"
    if "threshold_degC" in tags:
        return f"{float(tags['threshold_degC']):g}C"
    if "winter" in tags:
        return f"w{tags['winter']}"
    return ""


def class_legend(tags: dict[str, str]) -> dict[int, str]:
    """Class code -> label from a class map's tags (empty when there is no legend).

    Accepted: one tag per class, ``class_1=label`` (as the frost-class map writes them;
    also ``class1``, ``class_1_label``); or a ``legend`` (or ``classes``) tag holding
    JSON ``{"1": "label", ...}`` or text ``1=label; 2=label`` / ``1: label, 2: label``.
    """
    for key in ("legend", "classes", "class_legend"):
        text = tags.get(key)
        if not text:
            continue
        try:
            data = json.loads(text)
            if isinstance(data, dict):
                return {int(k): str(v) for k, v in data.items()}
            if isinstance(data, list):
                return {int(d["code"] if isinstance(d, dict) else i + 1):
                        str(d["label"] if isinstance(d, dict) else d)
                        for i, d in enumerate(data)}
        except (ValueError, KeyError, TypeError):
            pass
        pairs = re.findall(r"(\d+)\s*[:=]\s*([^;,|\n]+)", text)
        if pairs:
            return {int(k): v.strip() for k, v in pairs}
    out = {}
    for key, value in tags.items():
        m = re.fullmatch(r"class_?(\d+)(_label)?", key, flags=re.IGNORECASE)
        if m:
            out[int(m.group(1))] = value
    return dict(sorted(out.items()))


def read_zones(path: str | Path, by: str | None = None, *, layer: str | None = None):
    """Read a zone layer (any vector format geopandas reads) as polygons, one per zone.

    Returns ``(zones, label, notes)``: a GeoDataFrame in the file's CRS whose column
    ``label`` names the zones (the ``by`` field, or ``zone`` = feature number 1..N),
    features sharing a ``by`` value dissolved into one zone; invalid polygons are repaired
    with ``shapely.make_valid``; features without polygons are dropped (and noted).
    """
    import geopandas as gpd
    import shapely

    path = Path(path)
    if not path.exists():
        raise UserError(f"zones file not found: {path}")
    try:
        gdf = gpd.read_file(path, layer=layer)
    except Exception as err:  # noqa: BLE001 - pyogrio/fiona raise many kinds
        raise UserError(f"cannot read zones from {path}: {err}") from None
    notes: list[str] = []
    if len(gdf) == 0:
        raise UserError(f"zones file {path} holds no features")
    if gdf.crs is None:
        raise UserError(f"zones file {path} has no CRS; assign one (e.g. "
                        "`ogr2ogr -a_srs EPSG:XXXX out.gpkg in.gpkg`) so the zones can be "
                        "placed on the output grid")
    if by is not None and by not in gdf.columns:
        fields = [c for c in gdf.columns if c != gdf.geometry.name]
        close = difflib.get_close_matches(by, fields, n=1)
        hint = f" (did you mean '{close[0]}'?)" if close else ""
        raise UserError(f"zones file {path} has no field '{by}'{hint}; fields: "
                        + ", ".join(fields))
    geoms = gdf.geometry.values
    bad = ~shapely.is_valid(geoms) & ~shapely.is_missing(geoms)
    if bad.any():
        geoms = geoms.copy()
        geoms[bad] = shapely.make_valid(geoms[bad])
    geoms = np.array([_polygonal(g) for g in geoms], dtype=object)
    keep = np.array([g is not None for g in geoms])
    if not keep.any():
        raise UserError(f"zones file {path} holds no polygons (zones must be areas, not "
                        "points or lines)")
    if not keep.all():
        notes.append(f"{int((~keep).sum())} feature(s) without a polygon geometry skipped")
    gdf = gdf.loc[keep].copy()
    gdf = gdf.set_geometry(gpd.GeoSeries(list(geoms[keep]), index=gdf.index, crs=gdf.crs))
    if by is None:
        label = _ZONE_ID if _ZONE_ID not in gdf.columns else "zone_id"
        gdf.insert(0, label, np.arange(1, len(gdf) + 1))
        return gdf.reset_index(drop=True), label, notes
    missing = gdf[by].isna()
    if missing.any():
        notes.append(f"{int(missing.sum())} feature(s) without a value in '{by}' skipped")
        gdf = gdf.loc[~missing]
    if gdf[by].duplicated().any():
        gdf = gdf[[by, gdf.geometry.name]].dissolve(by=by, sort=False, as_index=False)
    return gdf.reset_index(drop=True), by, notes


def _polygonal(geom):
    """The polygonal part of a geometry (None when it has none)."""
    import shapely

    if geom is None or geom.is_empty:
        return None
    if geom.geom_type in ("Polygon", "MultiPolygon"):
        return geom
    parts = [p for p in shapely.get_parts(geom) if p.geom_type in ("Polygon", "MultiPolygon")]
    return shapely.union_all(parts) if parts else None


def class_colours(tags: dict[str, str]) -> dict[int, str]:
    """Class code -> colour from ``class_<code>_color`` tags (empty when there are none)."""
    out = {}
    for key, value in tags.items():
        m = re.fullmatch(r"class_?(\d+)_colou?r", key, flags=re.IGNORECASE)
        if m:
            out[int(m.group(1))] = value
    return out


def parse_percentiles(text: str | Any) -> tuple[float, ...]:
    """``"10,50,90"`` -> (10.0, 50.0, 90.0); each in [0, 100]."""
    items = text.split(",") if isinstance(text, str) else list(text)
    try:
        values = tuple(float(v) for v in items if str(v).strip() != "")
    except ValueError:
        raise UserError(f"--percentiles: {text!r} is not a comma-separated list of numbers "
                        "(e.g. 10,50,90)") from None
    if not values or any(not 0.0 <= v <= 100.0 for v in values):
        raise UserError(f"--percentiles: give numbers between 0 and 100, got {text!r}")
    return tuple(dict.fromkeys(values))


# --------------------------------------------------------------------------- zone grid


def cell_area_km2(grid: TargetGrid) -> np.ndarray:
    """Area of the cells of each row [km2], shape (height,).

    Projected grids: pixel width x height in metres. Geographic grids (degrees): the exact
    area of a cell on the CRS's ellipsoid between two parallels and two meridians,
    ``a**2 / 2 * dlon * (q(lat1) - q(lat2))`` with ``q`` of Snyder (1987), eq. 3-12.

    References
    ----------
    Snyder, J. P. (1987). Map Projections - A Working Manual. U.S. Geological Survey
    Professional Paper 1395. doi:10.3133/pp1395
    """
    a, b, c, d, e, f = grid.transform
    crs = grid.crs
    if not crs.is_geographic:
        try:
            factor = float(crs.linear_units_factor[1])
        except Exception:  # noqa: BLE001 - unknown units: assume metres
            factor = 1.0
        return np.full(grid.height, abs(a * e - b * d) * factor**2 / 1e6)
    import pyproj

    ellipsoid = pyproj.CRS.from_wkt(grid.crs_wkt).ellipsoid
    major = ellipsoid.semi_major_metre
    minor = ellipsoid.semi_minor_metre
    ecc = math.sqrt(max(1.0 - (minor / major) ** 2, 0.0))
    lat = np.radians(np.clip(f + e * np.arange(grid.height + 1), -90.0, 90.0))
    s = np.sin(lat)
    if ecc < 1e-12:  # a sphere
        q = 2.0 * s
    else:
        q = (1 - ecc**2) * (s / (1 - (ecc * s) ** 2)
                            - np.log((1 - ecc * s) / (1 + ecc * s)) / (2 * ecc))
    return 0.5 * major**2 * math.radians(abs(a)) * np.abs(np.diff(q)) / 1e6


def rasterise_zones(geoms, grid: TargetGrid, labels: np.ndarray, block: int = BLOCK) -> int:
    """Burn zone numbers 1..N into ``labels`` (height, width) uint32, block by block.

    ``all_touched=False``; later geometries win where polygons overlap. Returns the number
    of cells covered by more than one zone.
    """
    import shapely

    geoms = np.asarray(geoms, dtype=object)
    tree = shapely.STRtree(geoms)
    overlap = 0
    for _, _, w in grid.blocks(block):
        r0, c0, h, wd = int(w.row_off), int(w.col_off), int(w.height), int(w.width)
        idx = np.sort(tree.query(shapely.box(*window_bounds(w, grid.affine)),
                                 predicate="intersects"))
        if idx.size == 0:
            labels[r0:r0 + h, c0:c0 + wd] = 0
            continue
        transform = grid.window_transform(w)
        labels[r0:r0 + h, c0:c0 + wd] = rasterize(
            ((geoms[i], int(i) + 1) for i in idx), out_shape=(h, wd), transform=transform,
            fill=0, all_touched=False, dtype="uint32")
        if idx.size > 1:
            hits = rasterize(((geoms[i], 1) for i in idx), out_shape=(h, wd),
                             transform=transform, fill=0, all_touched=False, dtype="uint32",
                             merge_alg=MergeAlg.add)
            overlap += int(np.count_nonzero(hits > 1))
    return overlap


class _Blocks:
    """Blocks of the grid that hold zone cells; the zone labels come from the label grid.

    Nothing per cell is kept between passes: each pass reads the labels of a block again
    from the (memory-mapped) label grid, so memory stays bounded by the block size.
    """

    def __init__(self, grid: TargetGrid, labels: np.ndarray, row_area: np.ndarray,
                 block: int):
        self.labels = labels
        self.row_area = row_area
        self.windows = [w for _, _, w in grid.blocks(block)
                        if np.any(labels[int(w.row_off):int(w.row_off + w.height),
                                         int(w.col_off):int(w.col_off + w.width)])]

    def zones(self):
        """Yield (window, flat index of zone cells, zone 0..N-1, cell area [km2])."""
        for w in self.windows:
            r0, c0, h, wd = int(w.row_off), int(w.col_off), int(w.height), int(w.width)
            lab = np.asarray(self.labels[r0:r0 + h, c0:c0 + wd]).reshape(-1)
            sel = np.flatnonzero(lab)
            yield w, sel, lab[sel].astype(np.int64) - 1, self.row_area[r0 + sel // wd]

    def read(self, ds, codes: tuple[tuple[float, str], ...] = ()):
        """Yield (zone, area, values (bands, n) of the zone cells) per block; code values
        (``codes``) become NaN, so that no statistic mixes them with measurements."""
        for w, sel, zone, area in self.zones():
            data = ds.read(window=w)
            values = data.reshape(data.shape[0], -1)[:, sel]
            for code, _ in codes:
                values[values == code] = np.nan
            yield zone, area, values

    def count_codes(self, ds, codes: tuple[tuple[float, str], ...], n_zones: int
                    ) -> dict[str, np.ndarray]:
        """Cells per code value, band and zone: {code name: (bands, zones)}."""
        out = {name: np.zeros((ds.count, n_zones), np.int64) for _, name in codes}
        for zone, _, values in self.read(ds):
            for code, name in codes:
                for b in range(values.shape[0]):
                    out[name][b] += np.bincount(zone[values[b] == code], minlength=n_zones)
        return out


# --------------------------------------------------------------------------- reductions


class _Moments:
    """Count, valid area, area-weighted sum, min and max per band and zone."""

    def __init__(self, n_bands: int, n_zones: int):
        shape = (n_bands, n_zones)
        self.n = np.zeros(shape, np.int64)
        self.area = np.zeros(shape)  # valid area [km2]
        self.s = np.zeros(shape)
        self.mn = np.full(shape, np.inf)
        self.mx = np.full(shape, -np.inf)

    def add(self, zone: np.ndarray, area: np.ndarray, values: np.ndarray) -> None:
        nz = self.n.shape[1]
        for b in range(values.shape[0]):
            v = values[b]
            ok = np.isfinite(v)
            z, v, w = zone[ok], v[ok].astype(np.float64), area[ok]
            self.n[b] += np.bincount(z, minlength=nz)
            self.area[b] += np.bincount(z, w, minlength=nz)
            self.s[b] += np.bincount(z, w * v, minlength=nz)
            np.minimum.at(self.mn[b], z, v)
            np.maximum.at(self.mx[b], z, v)

    def finish(self) -> dict[str, np.ndarray]:
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = self.s / self.area
        nan = np.where(self.n == 0, np.nan, 1.0)
        # a mean of equal values can round a hair outside them
        mean = np.clip(mean, self.mn, self.mx)
        return {"count": self.n, "area_km2": self.area, "mean": mean * nan,
                "min": self.mn * nan, "max": self.mx * nan}


def _spread(ds, blocks: _Blocks, mom: dict[str, np.ndarray], percentiles: tuple[float, ...],
            codes: tuple[tuple[float, str], ...] = ()
            ) -> tuple[np.ndarray, np.ndarray, int, float]:
    """Standard deviation (bands, zones) and exact (in practice) percentiles (P, bands, zones).

    Pass 1 sums squared deviations from each zone's mean and builds per-zone histograms;
    pass 2 (only if needed) reads the values of the bins that hold a requested order
    statistic (see the module docstring). Also returns how many order statistics were
    interpolated within a bin, and the largest such bin's spread.
    """
    n = mom["count"]
    n_bands, n_zones = n.shape
    mn = np.where(n > 0, mom["min"], 0.0)
    mx = np.where(n > 0, mom["max"], 0.0)
    width = mx - mn
    bins = np.clip(np.ceil(n / CELLS_PER_BIN), 1, MAX_BINS).astype(np.int64)
    bins[(n == 0) | (width <= 0)] = 1
    if bins.sum() > HIST_BUDGET:  # many large zones: coarser bins, same algorithm
        bins = np.maximum(1, (bins * (HIST_BUDGET / bins.sum())).astype(np.int64))
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.where(width > 0, bins / width, 0.0)
    start = np.concatenate(([0], np.cumsum(bins.ravel())[:-1])).reshape(bins.shape)
    n_hist = int(bins.sum())

    def bin_key(b: int, z: np.ndarray, v: np.ndarray) -> np.ndarray:
        i = np.floor((v - mn[b, z]) * scale[b, z]).astype(np.int64)
        return start[b, z] + np.clip(i, 0, bins[b, z] - 1)

    # pass 1: squared deviations, histograms, number of cells at the minimum and maximum
    mean = np.where(n > 0, mom["mean"], 0.0)
    sq = np.zeros((n_bands, n_zones))
    hist = np.zeros(n_hist, np.int64)
    at_min = np.zeros((n_bands, n_zones), np.int64)
    at_max = np.zeros((n_bands, n_zones), np.int64)
    for zone, area, values in blocks.read(ds, codes):
        for b in range(n_bands):
            v = values[b]
            ok = np.isfinite(v)
            z, v = zone[ok], v[ok].astype(np.float64)
            sq[b] += np.bincount(z, area[ok] * (v - mean[b, z]) ** 2, minlength=n_zones)
            np.add.at(hist, bin_key(b, z, v), 1)
            at_min[b] += np.bincount(z, v == mn[b, z], minlength=n_zones).astype(np.int64)
            at_max[b] += np.bincount(z, v == mx[b, z], minlength=n_zones).astype(np.int64)

    # the order statistics needed: ranks k0 = floor(pos), k1 = ceil(pos), pos = p (n - 1)
    p = np.asarray(percentiles, dtype=np.float64).reshape(-1, 1, 1) / 100.0
    pos = p * np.maximum(n - 1, 0)
    k0 = np.floor(pos).astype(np.int64)
    k1 = np.minimum(k0 + 1, np.maximum(n - 1, 0))
    frac = pos - k0
    ranks = np.stack([k0, k1])  # (2, P, bands, zones)
    shape = ranks.shape
    bb = np.broadcast_to(np.arange(n_bands).reshape(1, 1, -1, 1), shape)
    zz = np.broadcast_to(np.arange(n_zones).reshape(1, 1, 1, -1), shape)
    value = np.full(shape, np.nan)
    has = np.broadcast_to(n > 0, shape)
    lo = has & (ranks < at_min[bb, zz])
    hi = has & ~lo & (ranks >= (n - at_max)[bb, zz])
    value[lo] = mn[bb[lo], zz[lo]]
    value[hi] = mx[bb[hi], zz[hi]]
    need = has & ~lo & ~hi
    n_approx, max_err = 0, 0.0
    if need.any():
        cum = np.cumsum(hist, out=hist)  # in place: the counts follow from differences
        seg0 = np.where(start > 0, cum[np.maximum(start - 1, 0)], 0)  # cells before segment
        target = seg0[bb[need], zz[need]] + ranks[need]
        key = np.searchsorted(cum, target, side="right")  # bin holding that rank
        rank_in_bin = target - np.where(key > 0, cum[np.maximum(key - 1, 0)], 0)
        wanted, inverse = np.unique(key, return_inverse=True)
        counts = cum[wanted] - np.where(wanted > 0, cum[np.maximum(wanted - 1, 0)], 0)
        order = np.argsort(counts, kind="stable")
        small = np.zeros(wanted.size, bool)
        fits = counts[order] <= COLLECT_CAP_PER_BIN
        small[order[fits & (np.cumsum(counts[order]) <= COLLECT_CAP_TOTAL)]] = True
        slot = np.zeros(n_hist, np.int32)  # 0 = not wanted, 1 = collect, k + 2 = bracket k
        slot[wanted[small]] = 1
        big = wanted[~small]
        slot[big] = np.arange(big.size) + 2
        bmin = np.full(big.size, np.inf)
        bmax = np.full(big.size, -np.inf)
        keys_c: list[np.ndarray] = []
        vals_c: list[np.ndarray] = []
        # pass 2: the values of the wanted bins
        for zone, _, values in blocks.read(ds, codes):
            for b in range(n_bands):
                v = values[b]
                ok = np.isfinite(v)
                z, v = zone[ok], v[ok].astype(np.float64)
                k = bin_key(b, z, v)
                s = slot[k]
                c = s == 1
                keys_c.append(k[c])
                vals_c.append(v[c])
                g = s >= 2
                if g.any():
                    np.minimum.at(bmin, s[g] - 2, v[g])
                    np.maximum.at(bmax, s[g] - 2, v[g])
        keys = np.concatenate(keys_c)
        vals = np.concatenate(vals_c)
        srt = np.lexsort((vals, keys))
        keys, vals = keys[srt], vals[srt]
        out = np.full(key.shape, np.nan)
        is_small = small[inverse]
        first = np.searchsorted(keys, key[is_small], side="left")
        out[is_small] = vals[first + rank_in_bin[is_small]]
        if big.size:
            j = slot[key[~is_small]] - 2
            c = counts[inverse[~is_small]]
            f = np.where(c > 1, rank_in_bin[~is_small] / np.maximum(c - 1, 1), 0.0)
            out[~is_small] = bmin[j] + f * (bmax[j] - bmin[j])
            spread = bmax[j] - bmin[j]
            n_approx = int(np.count_nonzero(spread > 0))
            max_err = float(spread.max(initial=0.0))
        value[need] = out
    with np.errstate(invalid="ignore", divide="ignore"):
        std = np.where(n > 0, np.sqrt(sq / mom["area_km2"]), np.nan)
    return std, value[0] + frac * (value[1] - value[0]), n_approx, max_err


# --------------------------------------------------------------------------- the summary


def summarize(
    output_dir: str | Path,
    zones: str | Path,
    by: str | None = None,
    *,
    out: str | Path | None = None,
    percentiles: tuple[float, ...] | str = DEFAULT_PERCENTILES,
    outputs: list[str] | None = None,
    layer: str | None = None,
    write: bool = True,
) -> ZoneSummary:
    """Statistics of a run's maps per zone, written as a GeoPackage layer and a CSV table.

    Parameters
    ----------
    output_dir
        Folder written by ``geothermmap run`` (holds ``run_record.json`` and the maps).
    zones
        Polygon layer in any vector format geopandas reads, in any CRS (reprojected to
        the output grid).
    by
        Field naming the zones; features sharing a value form one zone. Default: feature
        number 1..N (column ``zone``), all attributes kept.
    out
        GeoPackage to write (default ``<output_dir>/summary.gpkg``); the CSV goes beside
        it with the suffix ``.csv``.
    percentiles
        Percentiles in [0, 100] (numpy's linear definition), e.g. ``(10, 50, 90)``.
    outputs
        Output names to summarise (default: every map of the run).
    layer
        Layer of a multi-layer zone file.
    write
        Write the files (False: only return the tables).
    """
    import geopandas as gpd
    import pandas as pd

    t0 = time.perf_counter()
    percentiles = parse_percentiles(percentiles)
    gpkg = Path(out) if out is not None else Path(output_dir) / SUMMARY_GPKG
    if gpkg.suffix.lower() != ".gpkg":
        raise UserError(f"--out {gpkg}: give a GeoPackage path ending in .gpkg (the CSV is "
                        "written beside it)")
    grid, maps, _ = read_run_outputs(output_dir, outputs)
    zdf, label, notes = read_zones(zones, by, layer=layer)
    n_zones = len(zdf)
    try:
        geoms = zdf.geometry.to_crs(grid.crs_wkt).values
    except Exception as err:  # noqa: BLE001 - pyproj errors
        raise UserError(f"cannot reproject the zones to the grid CRS: {err}") from None
    gl, gb, gr, gt = grid.bounds
    zb = geoms.total_bounds
    if zb[0] > gr or zb[2] < gl or zb[1] > gt or zb[3] < gb:
        raise UserError(f"the zones (bounds {tuple(round(float(v), 3) for v in zb)} in the "
                        f"grid CRS {grid.crs.to_string()}) do not overlap the output grid "
                        f"{tuple(round(v, 3) for v in grid.bounds)}; check the zones' CRS")
    timings = {"read_s": time.perf_counter() - t0}

    row_area = cell_area_km2(grid)
    with tempfile.TemporaryDirectory(prefix="geothermmap-zones-") as tmp:
        labels = np.lib.format.open_memmap(os.path.join(tmp, "zones.npy"), mode="w+",
                                           dtype=np.uint32, shape=grid.shape)
        t1 = time.perf_counter()
        overlap = rasterise_zones(geoms, grid, labels)
        blocks = _Blocks(grid, labels, row_area, BLOCK)
        timings["rasterise_s"] = time.perf_counter() - t1
        zone_cells = np.zeros(n_zones, np.int64)
        zone_area = np.zeros(n_zones)
        for _, _, zone, area in blocks.zones():
            zone_cells += np.bincount(zone, minlength=n_zones)
            zone_area += np.bincount(zone, area, minlength=n_zones)

        t2 = time.perf_counter()
        stats: dict[str, dict[str, np.ndarray]] = {}
        shares: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        n_approx, max_err = 0, 0.0
        with rasterio.Env(GDAL_NUM_THREADS="ALL_CPUS", GDAL_CACHEMAX=GDAL_CACHE_MB):
            for m in maps:
                with rasterio.open(m.path) as ds:
                    if m.categorical:
                        shares[m.name] = _class_areas(ds, blocks, n_zones)
                        continue
                    acc = _Moments(len(m.band_labels), n_zones)
                    for zone, area, values in blocks.read(ds, m.codes):
                        acc.add(zone, area, values)
                    st = acc.finish()
                    st["std"], pct, na, err = _spread(ds, blocks, st, percentiles, m.codes)
                    st.update({f"{name}_cells": v for name, v in
                               blocks.count_codes(ds, m.codes, n_zones).items()})
                    n_approx += na
                    max_err = max(max_err, err)
                    for i, q in enumerate(percentiles):
                        st[_pname(q)] = pct[i]
                    stats[m.name] = st
        timings["statistics_s"] = time.perf_counter() - t2
        del blocks, labels  # close the memory map before its folder goes

    empty = int(np.count_nonzero(zone_cells == 0))
    if empty:
        notes.append(f"{empty} zone(s) cover no cell centre (smaller than a cell or outside "
                     "the grid): their statistics are empty")
    if overlap:
        notes.append(f"{overlap} cells lie in more than one zone; each counts for the zone "
                     "that comes later in the file")
    if n_approx:
        notes.append(f"{n_approx} percentile order statistics interpolated within a crowded "
                     f"histogram bin (error below {max_err:.3g} in the output's units); all "
                     "others are exact")

    table, wide_cols = _tables(zdf[label].to_numpy(), label, maps, stats, shares,
                                   zone_cells, zone_area, percentiles)
    wide = pd.DataFrame(wide_cols)
    attrs = zdf.drop(columns=[zdf.geometry.name]).reset_index(drop=True)
    wide = wide.drop(columns=[label])
    attrs = attrs.drop(columns=[c for c in attrs.columns if c in wide.columns])
    zones_out = gpd.GeoDataFrame(pd.concat([attrs, wide], axis=1),
                                 geometry=zdf.geometry.reset_index(drop=True), crs=zdf.crs)
    result = ZoneSummary(table, zones_out, None, None, label, notes, timings)
    if write:
        t3 = time.perf_counter()
        result.gpkg_path, result.csv_path = _write(zones_out, table, gpkg)
        timings["write_s"] = time.perf_counter() - t3
    timings["total_s"] = time.perf_counter() - t0
    return result


def _pname(q: float) -> str:
    return f"p{q:g}"


def _class_areas(ds, blocks: _Blocks, n_zones: int) -> tuple[np.ndarray, np.ndarray]:
    """Cells and area per zone and class code (0 = nodata excluded), shape (256, zones)."""
    cells = np.zeros((256, n_zones), np.int64)
    area = np.zeros((256, n_zones))
    nodata = ds.nodata
    for zone, a, values in blocks.read(ds):
        code = values[0].astype(np.int64)
        ok = code != (int(nodata) if nodata is not None and math.isfinite(nodata) else -1)
        key = code[ok] * n_zones + zone[ok]
        cells += np.bincount(key, minlength=256 * n_zones).reshape(256, n_zones)
        area += np.bincount(key, a[ok], minlength=256 * n_zones).reshape(256, n_zones)
    return cells, area


def _tables(zone_names, label, maps, stats, shares, zone_cells, zone_area, percentiles):
    """Long table (zone x output x band) and wide columns (one row per zone)."""
    import pandas as pd

    pnames = [_pname(q) for q in percentiles]
    order = ["mean", "std", "min", *pnames, "max"]
    wide: dict[str, Any] = {label: zone_names, "zone_cells": zone_cells,
                            "zone_area_km2": zone_area}
    parts = []

    def part(output: str, band: int, desc: str, units: str, cols: dict) -> None:
        parts.append(pd.DataFrame({label: zone_names, "output": output, "band": band,
                                   "description": desc, "units": units,
                                   "zone_cells": zone_cells, **cols}))

    for m in maps:
        if m.name in shares:
            cells, area = shares[m.name]
            total = area.sum(axis=0)
            codes = sorted(set(np.flatnonzero(cells.sum(axis=1)).tolist()) | set(m.legend))
            with np.errstate(invalid="ignore", divide="ignore"):
                share = area / total
            for code in codes:
                wide[f"{m.name}_{code}_share"] = share[code]
                part(m.name, 1, m.legend.get(code, f"class {code}"), "share of valid area",
                     {"valid_cells": cells[code], "valid_area_km2": area[code],
                      "class": code, "share": share[code]})
            continue
        st = stats[m.name]
        for b, (suffix, desc) in enumerate(zip(m.band_labels, m.band_descriptions,
                                               strict=True)):
            prefix = f"{m.name}_{suffix}" if suffix else m.name
            wide[f"{prefix}_count"] = st["count"][b]
            coded = {f"{name}_cells": st[f"{name}_cells"][b] for _, name in m.codes}
            for key in order:
                wide[f"{prefix}_{key}"] = st[key][b]
            for key, v in coded.items():
                wide[f"{prefix}_{key}"] = v
            part(m.name, b + 1, desc, m.units,
                 {"valid_cells": st["count"][b], "valid_area_km2": st["area_km2"][b],
                  **{key: st[key][b] for key in order}, **coded})
    return pd.concat(parts, ignore_index=True), wide


def _write(zones_out, table, gpkg: Path) -> tuple[Path, Path]:
    """Write the GeoPackage and the CSV atomically (temporary names, then rename)."""
    csv = gpkg.with_suffix(".csv")
    tmp_gpkg = gpkg.with_name(f".{gpkg.stem}.{os.getpid()}.partial.gpkg")
    tmp_csv = csv.with_name(f".{csv.stem}.{os.getpid()}.partial.csv")
    try:
        gpkg.parent.mkdir(parents=True, exist_ok=True)
        zones_out.to_file(tmp_gpkg, layer=SUMMARY_LAYER, driver="GPKG")
        table.to_csv(tmp_csv, index=False, float_format="%.7g")
        os.replace(tmp_gpkg, gpkg)
        os.replace(tmp_csv, csv)
    except Exception as err:
        # an OSError, or the vector driver's error opening the file; anything else is a bug
        if not (isinstance(err, OSError) or type(err).__module__.startswith(("pyogrio",
                                                                             "fiona"))):
            raise
        reason = getattr(err, "strerror", None) or (str(err).splitlines() or [repr(err)])[0]
        raise UserError(f"cannot write the summary to {gpkg}: {reason}") from None
    finally:
        for tmp in (tmp_gpkg, tmp_csv):
            with contextlib.suppress(OSError):  # also when the folder never existed
                tmp.unlink(missing_ok=True)
    return gpkg, csv


# --------------------------------------------------------------------------- command line


@click.command("summarize")
@click.argument("output_dir", type=click.Path(path_type=Path))
@click.option("--zones", "zones", type=click.Path(path_type=Path), required=True,
              help="Polygon layer (GeoPackage, shapefile, GeoJSON, ... in any CRS).")
@click.option("--by", "by", metavar="FIELD",
              help="Field naming the zones (default: feature number 1..N).")
@click.option("--layer", help="Layer of a multi-layer zones file.")
@click.option("--out", "out", type=click.Path(path_type=Path),
              help="GeoPackage to write [default: OUTPUT_DIR/summary.gpkg]; the CSV is "
                   "written beside it.")
@click.option("--percentiles", default="10,50,90", show_default=True,
              help="Comma-separated percentiles, 0..100.")
@click.option("--outputs", "names", metavar="NAMES",
              help="Comma-separated outputs to summarise (default: all maps of the run).")
def summarize_command(output_dir: Path, zones: Path, by: str | None, layer: str | None,
                      out: Path | None, percentiles: str, names: str | None) -> None:
    """Statistics of the maps in OUTPUT_DIR per zone: count, mean, std, min, max,
    percentiles and frost-class shares, as a GeoPackage layer and a CSV table."""
    from geothermmap.cli import handle_errors

    def go() -> None:
        wanted = [n.strip() for n in names.split(",") if n.strip()] if names else None
        res = summarize(output_dir, zones, by, out=out, percentiles=percentiles,
                        outputs=wanted, layer=layer)
        n_out = res.table["output"].nunique()
        click.echo(f"summarised {len(res.zones)} zones x {n_out} outputs in "
                   f"{res.timings['total_s']:.1f} s")
        click.echo(f"  map layer '{SUMMARY_LAYER}': {res.gpkg_path}")
        click.echo(f"  table: {res.csv_path}")
        for note in res.notes:
            click.echo(f"note: {note}")

    handle_errors(go)()


CLI_COMMANDS = [summarize_command]
