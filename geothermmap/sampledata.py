"""Deterministic invented demo region ("the demo valley") and large synthetic benchmark grids.

Everything here is invented: the valley, its lake and its peat bog are smooth analytic
functions, not a real place. The same scenario drives two products:

``generate_demo``
    The small bundled demo in ``sample_tiles/``. Surface temperature on a 250 m UTM grid
    (EPSG:32633, 200 x 160 cells, 50 km x 40 km), soil layers on a *different* grid, in
    geographic coordinates (EPSG:4326, 0.0018 degree pixels, covering the temperature grid
    with a margin), so a run has to align them. Files:

    ===========================  =======  ==========================================
    file                         units    content
    ===========================  =======  ==========================================
    ``surface_temperature.tif``  degC     12 bands, monthly mean ground-surface
                                          temperature, January .. December
    ``sand.tif``                 percent  sand content of the fine earth
    ``clay.tif``                 percent  clay content of the fine earth
    ``water_content.tif``        m3 m-3   annual mean volumetric water content
    ``bulk_density.tif``         g cm-3   dry bulk density
    ``organic_matter.tif``       percent  organic-matter mass fraction of the solids
    ===========================  =======  ==========================================

``generate_synthetic``
    The same scenario stretched over an arbitrary grid (EPSG:32633, 30 m pixels), every
    layer on that one grid (``surface_temperature``, ``sand``, ``clay``,
    ``water_content``), written window by window so an 8192 x 8192 x 12 grid needs far
    less than 500 MB of memory. For benchmarks. It has no peat bog (it ships no bulk
    density or organic-matter layer, and peat water contents would exceed the porosity
    of the constant bulk density a benchmark recipe supplies).

The scenario, in scenario coordinates X (km east of the west edge, 0..50) and Y (km
south of the north edge, 0..40):

* a valley floor at 290-410 m along a meandering axis, about 4 km wide, with walls rising
  over 11 km to rolling uplands at 1400-1700 m that carry a few summits up to about
  2300 m;
* annual mean ground-surface temperature 10.8 degC at 300 m, decreasing with a lapse
  rate of 6 K km-1 (:data:`LAPSE_RATE_K_PER_KM`), slightly warmer on the lake shore;
  the highest summits have an annual mean at or below 0 degC;
* an annual amplitude of 8 K beside the lake rising to about 12.5 K inland and to the
  east, a small semi-annual harmonic (0.6 K), and the annual peak in late July (day 200
  inland to 208 beside the lake, days since January 1st);
* so the map holds frost-free cells (the cycle's minimum stays above 0 degC: the lake
  shore), deep-frost cells (uplands) and a few cells with mean <= 0 degC (summits);
* a lake on the valley axis in the west: nodata in every layer;
* a peat bog on the southern valley side (demo only): organic matter ~60-80 %, bulk
  density ~0.26 g cm-3, water content ~0.7 m3 m-3 (below the ~0.84 porosity of peat);
* sandy valley floor (~72 % sand, 7 % clay), clay-rich uplands (~22 % sand, 37 % clay),
  about 2 % organic matter and 1.2-1.6 g cm-3 bulk density on mineral soil.

Monthly means are *exact* averages of the analytic cycle over the calendar months (a
365-day calendar scaled to the 365.25-day year, the convention of
``geothermmap.physics.harmonics``), computed here in closed form.

Nodata is ``-9999.0`` (:data:`NODATA`) in every file; no NaN is ever written. Files are
float32 GeoTIFFs, tiled (256 for the demo, 512 for synthetic grids), DEFLATE with the
floating-point predictor (PREDICTOR=3), band interleaved. Values are rounded to
multiples of a power of two well below the noise (1/128 degC, 1/128 %, 1/4096 m3 m-3,
1/1024 g cm-3) so that they compress well. No time stamp is written, so a
rerun gives byte-identical files with the same GDAL build.

The noise ("a little measurement noise" on every layer) comes from a counter-based hash
of (seed, layer, band, global row, global column) rather than from a stream of a
``numpy.random.Generator``: a cell's noise then does not depend on the window it is
computed in (chunk size, write order) and is exact integer arithmetic on every platform.

Regenerate with ``python -m geothermmap.sampledata`` (demo, into ``sample_tiles/``) or
``python -m geothermmap.sampledata --out DIR --synthetic WIDTH HEIGHT``.

References
----------
Steele, G. L., Lea, D., & Flood, C. H. (2014). Fast splittable pseudorandom number
generators. Proceedings of OOPSLA 2014, 453-472. doi:10.1145/2660193.2660195 (the
SplitMix64 finaliser; constants as in Vigna's public-domain ``splitmix64.c``, from memory).
"""

from __future__ import annotations

import argparse
import math
import sys
from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np
import rasterio
from rasterio.transform import from_origin
from rasterio.warp import transform, transform_bounds
from rasterio.windows import Window

#: Version of the scenario; bump when the generated values change.
SAMPLE_VERSION = 1
#: Nodata value of every generated file.
NODATA = -9999.0

TEMPERATURE_CRS = "EPSG:32633"
SOIL_CRS = "EPSG:4326"
DEMO_WIDTH = 200  # cells (x)
DEMO_HEIGHT = 160  # cells (y)
DEMO_RES_M = 250.0
#: Upper-left corner of the demo temperature grid (EPSG:32633) [m]. Invented.
DEMO_ORIGIN_M = (480_000.0, 5_230_000.0)
DEMO_SEED = 0
DEMO_BLOCK = 256
SOIL_RES_DEG = 0.0018
SOIL_MARGIN_DEG = 0.01  # margin around the temperature grid's geographic bounds
SYNTHETIC_RES_M = 30.0
SYNTHETIC_BLOCK = 512

#: Extent of the scenario [km] (X east, Y south); every grid is mapped onto it.
SCENARIO_SIZE_KM = (50.0, 40.0)

#: Near-surface temperature lapse rate [K km-1]; common practice (the ICAO standard
#: atmosphere uses 6.5 K km-1 for air; ground-surface lapse rates are similar or lower).
LAPSE_RATE_K_PER_KM = 6.0
#: Annual mean ground-surface temperature at the reference elevation [degC]. Invented.
T_MEAN_REF_DEGC = 10.8
REF_ELEVATION_M = 300.0

#: Densities used only to keep the invented water content below porosity [kg m-3]:
#: mineral solids 2650 (common practice), organic solids 1300 (de Vries 1963).
_RHO_MINERAL = 2650.0
_RHO_ORGANIC = 1300.0

MONTH_NAMES = ("January", "February", "March", "April", "May", "June", "July", "August",
               "September", "October", "November", "December")
_YEAR_DAYS = 365.25
_MONTH_EDGES_DAYS = np.concatenate(
    ([0.0], np.cumsum([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]))
) * (_YEAR_DAYS / 365.0)

#: Layer -> (units, description). Units are those of the recipe in ``recipes/demo.yaml``.
LAYERS: dict[str, tuple[str, str]] = {
    "surface_temperature": ("degC", "monthly mean ground-surface temperature, Jan..Dec"),
    "sand": ("percent", "sand content of the fine earth"),
    "clay": ("percent", "clay content of the fine earth"),
    "water_content": ("m3 m-3", "annual mean volumetric water content"),
    "bulk_density": ("g cm-3", "dry bulk density"),
    "organic_matter": ("percent", "organic-matter mass fraction of the solids"),
}
DEMO_LAYERS = tuple(LAYERS)
SYNTHETIC_LAYERS = ("surface_temperature", "sand", "clay", "water_content")
# independent noise streams
_STREAM = {"mean": 1, "month": 2, "sand": 3, "clay": 4, "water_content": 5,
           "bulk_density": 6, "organic_matter": 7}


# --------------------------------------------------------------------------------------
# Deterministic noise
# --------------------------------------------------------------------------------------

_M64 = np.uint64(0xFFFFFFFFFFFFFFFF)


def _splitmix64(x: np.ndarray) -> np.ndarray:
    """SplitMix64 finaliser of uint64 keys (wrap-around arithmetic; Steele et al. 2014)."""
    with np.errstate(over="ignore"):
        z = x + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def _uniform_noise(seed: int, stream: int, band: int, rows: np.ndarray,
                   cols: np.ndarray) -> np.ndarray:
    """Uniform noise in [-1, 1) for global cell indices: a pure function of its key."""
    key = _splitmix64(np.array([(seed & 0xFFFFFFFF) << 20 | stream << 8 | band],
                               dtype=np.uint64))
    r = _splitmix64(key ^ rows.astype(np.uint64))
    z = _splitmix64(r ^ cols.astype(np.uint64))
    unit = (z >> np.uint64(11)).astype(np.float64) * 2.0**-53
    return 2.0 * unit - 1.0


# --------------------------------------------------------------------------------------
# The scenario: analytic fields of the scenario coordinates X, Y [km]
# --------------------------------------------------------------------------------------

_SUMMITS = (  # X [km], Y [km], height above the upland level [m], width [km]
    (8.0, 3.5, 760.0, 1.5),
    (31.0, 36.5, 740.0, 1.4),
    (44.0, 5.0, 700.0, 1.6),
    (21.0, 37.0, 450.0, 2.5),
)
_LAKE = (11.0, 3.4, 0.95)  # centre X [km], half-length along the axis, half-width [km]
_BOG = (30.0, 2.3, 1.9, 0.7)  # centre X, offset south of the axis, half-length, half-width


def _smoothstep(x: np.ndarray) -> np.ndarray:
    x = np.clip(x, 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _axis_km(X: np.ndarray) -> np.ndarray:
    """Y of the meandering valley axis [km]."""
    return 20.0 + 5.0 * np.sin(2 * np.pi * X / 38.0 + 0.3) + 1.6 * np.sin(2 * np.pi * X / 13.0
                                                                           + 1.1)


def _scenario(X: np.ndarray, Y: np.ndarray, *, bog: bool = True) -> dict[str, np.ndarray]:
    """All smooth fields of the scenario at scenario coordinates [km] (no noise)."""
    axis = _axis_km(X)
    across = Y - axis  # km, positive south of the axis
    floor = 290.0 + 2.4 * X
    uplands = 1550.0 + 140.0 * np.sin(X / 3.1) * np.cos(Y / 2.7)
    for sx, sy, h, w in _SUMMITS:
        uplands = uplands + h * np.exp(-((X - sx) ** 2 + (Y - sy) ** 2) / (2 * w * w))
    wall = _smoothstep((np.abs(across) - 2.0) / 11.0)
    elevation = floor + (uplands - floor) * wall

    lx, la, lb = _LAKE
    lake_r = np.hypot((X - lx) / la, (Y - _axis_km(np.asarray(lx))) / lb)
    lake = lake_r < 1.0
    lake_km = np.maximum(lake_r - 1.0, 0.0) * 1.8  # rough distance to the shore [km]
    inland = 1.0 - np.exp(-lake_km / 7.0)

    t_mean = (T_MEAN_REF_DEGC - LAPSE_RATE_K_PER_KM * (elevation - REF_ELEVATION_M) / 1000.0
              + 0.4 * np.exp(-lake_km / 3.0))
    amp1 = 8.0 + 4.0 * inland + 0.6 * X / SCENARIO_SIZE_KM[0]
    peak_day = 208.0 - 8.0 * inland
    amp2 = np.full_like(amp1, 0.6)

    h = np.clip((elevation - REF_ELEVATION_M) / 2000.0, 0.0, 1.0)
    near_river = np.exp(-np.abs(across) / 1.5)
    fields = {
        "elevation": elevation, "lake": lake, "t_mean": t_mean, "amp1": amp1, "amp2": amp2,
        "peak_day": peak_day,
        "sand": 72.0 - 50.0 * h**0.8,
        "clay": 7.0 + 30.0 * h,
        "organic_matter": 1.6 + 1.6 * h,
        "bulk_density": 1.58 - 0.35 * h,
        "water_content": 0.13 + 0.20 * h + 0.04 * near_river,
    }
    if bog:
        bx, boff, ba, bb = _BOG
        bog_r = np.hypot((X - bx) / ba, (across - boff) / bb)
        p = 1.0 / (1.0 + np.exp(-(1.0 - bog_r) / 0.08))
        peat = {"sand": 15.0, "clay": 12.0, "organic_matter": 70.0, "bulk_density": 0.26,
                "water_content": 0.72}
        for k, v in peat.items():
            fields[k] = (1.0 - p) * fields[k] + p * v
        fields["bog"] = p
    return fields


def _monthly_means(t_mean, amp1, amp2, peak_day) -> np.ndarray:
    """Exact calendar-month averages of mean + A1 cos(w(t-tp)) + A2 cos(2w(t-tp)).

    ``cos(nw(t - tp)) = cos(nw tp) cos(nw t) + sin(nw tp) sin(nw t)``, and the month
    averages of ``cos(nw t)`` and ``sin(nw t)`` are 12 constants per harmonic, so only two
    trigonometric evaluations per cell and harmonic are needed.
    """
    t0, t1 = _MONTH_EDGES_DAYS[:-1], _MONTH_EDGES_DAYS[1:]
    expand = (12,) + (1,) * np.ndim(t_mean)
    out = np.broadcast_to(t_mean, expand[:1] + np.shape(t_mean)).copy()
    for n, amp in ((1, amp1), (2, amp2)):
        nw = n * 2.0 * np.pi / _YEAR_DAYS
        avg_cos = ((np.sin(nw * t1) - np.sin(nw * t0)) / (nw * (t1 - t0))).reshape(expand)
        avg_sin = ((np.cos(nw * t0) - np.cos(nw * t1)) / (nw * (t1 - t0))).reshape(expand)
        out += (amp * np.cos(nw * peak_day)) * avg_cos
        out += (amp * np.sin(nw * peak_day)) * avg_sin
    return out


#: Layer -> quantisation step: values are rounded to multiples of a power of two, far
#: below the noise level, so the low mantissa bits are zero and DEFLATE compresses well
#: (exact in float32 for the value ranges here).
_QUANTUM = {"surface_temperature": 2.0**-7, "sand": 2.0**-7, "clay": 2.0**-7,
            "organic_matter": 2.0**-7, "water_content": 2.0**-12, "bulk_density": 2.0**-10}


def _layers(X: np.ndarray, Y: np.ndarray, rows: np.ndarray, cols: np.ndarray, seed: int,
            names: Sequence[str], *, bog: bool) -> dict[str, np.ndarray]:
    """Noisy float32 layers (band-first), NODATA on the lake, for the cells given."""
    f = _scenario(X, Y, bog=bog)
    out: dict[str, np.ndarray] = {}

    def noise(stream: str, band: int = 0) -> np.ndarray:
        return _uniform_noise(seed, _STREAM[stream], band, rows, cols)

    if "surface_temperature" in names:
        t = _monthly_means(f["t_mean"] + 0.15 * noise("mean"), f["amp1"], f["amp2"],
                           f["peak_day"])
        t += 0.08 * np.stack([noise("month", k) for k in range(12)])
        out["surface_temperature"] = t
    sand = f["sand"] + 2.0 * noise("sand")
    clay = f["clay"] + 1.5 * noise("clay")
    om = np.maximum(f["organic_matter"] * (1.0 + 0.08 * noise("organic_matter")), 0.5)
    bd = f["bulk_density"] + 0.03 * noise("bulk_density")
    water = f["water_content"] * (1.0 + 0.05 * noise("water_content"))
    # keep the invented data physically consistent: water at most 92 % of porosity
    rho_s = 1.0 / ((1.0 - om / 100.0) / _RHO_MINERAL + (om / 100.0) / _RHO_ORGANIC)
    porosity = 1.0 - 1000.0 * bd / rho_s
    water = np.minimum(water, 0.92 * porosity)
    soil = {"sand": sand, "clay": clay, "water_content": water, "bulk_density": bd,
            "organic_matter": om}
    out.update({k: v[None] for k, v in soil.items() if k in names})
    for k in out:
        q = _QUANTUM[k]
        out[k] = np.where(f["lake"], NODATA, np.round(out[k] / q) * q).astype(np.float32)
    return out


# --------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------


def _profile(width: int, height: int, count: int, crs: str, transform_, block: int) -> dict:
    return dict(driver="GTiff", width=width, height=height, count=count, dtype="float32",
                crs=crs, transform=transform_, nodata=NODATA, tiled=True, blockxsize=block,
                blockysize=block, compress="deflate", predictor=3, interleave="band")


def _describe(dst, name: str, *, scenario: str) -> None:
    units, description = LAYERS[name]
    dst.update_tags(units=units, description=description, nodata=str(NODATA),
                    scenario=scenario, generator=f"geothermmap.sampledata v{SAMPLE_VERSION}")
    if name == "surface_temperature":
        for i, month in enumerate(MONTH_NAMES, start=1):
            dst.set_band_description(i, month)
            dst.update_tags(i, units=units)
    else:
        dst.set_band_description(1, name)
        dst.update_tags(1, units=units)


def _check_out(out_dir: Path, names: Sequence[str], overwrite: bool) -> dict[str, Path]:
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = {n: out_dir / f"{n}.tif" for n in names}
    existing = [p for p in paths.values() if p.exists()]
    if existing and not overwrite:
        raise FileExistsError(f"{existing[0]} exists; pass overwrite=True to replace it")
    for p in existing:
        p.unlink()  # a fresh file, so the bytes do not depend on what was there
    return paths


_DEMO_SCENARIO = "invented demo valley (synthetic data, not a real place)"


def demo_soil_grid() -> tuple[int, int, rasterio.Affine]:
    """(width, height, transform) of the demo soil grid in EPSG:4326.

    The geographic bounds of the temperature grid (``transform_bounds``, densified),
    grown by :data:`SOIL_MARGIN_DEG` and snapped outward to whole pixels.
    """
    x0, y0 = DEMO_ORIGIN_M
    left, bottom, right, top = transform_bounds(
        TEMPERATURE_CRS, SOIL_CRS, x0, y0 - DEMO_HEIGHT * DEMO_RES_M,
        x0 + DEMO_WIDTH * DEMO_RES_M, y0, densify_pts=51)
    res = SOIL_RES_DEG
    i0 = math.floor((left - SOIL_MARGIN_DEG) / res)
    i1 = math.ceil((right + SOIL_MARGIN_DEG) / res)
    j0 = math.floor((bottom - SOIL_MARGIN_DEG) / res)
    j1 = math.ceil((top + SOIL_MARGIN_DEG) / res)
    return i1 - i0, j1 - j0, from_origin(round(i0 * res, 10), round(j1 * res, 10), res, res)


def generate_demo(out_dir: Path, *, overwrite: bool = True) -> dict[str, Path]:
    """Write the invented demo region (six GeoTIFFs and a README) into ``out_dir``.

    Deterministic: the same GDAL build writes byte-identical files on every run.

    Parameters
    ----------
    out_dir : Path
        Output folder, created if missing.
    overwrite : bool, default True
        Replace existing files; if False an existing file raises ``FileExistsError``.

    Returns
    -------
    dict
        Layer name (``surface_temperature``, ``sand``, ``clay``, ``water_content``,
        ``bulk_density``, ``organic_matter``) -> path of its GeoTIFF.
    """
    paths = _check_out(Path(out_dir), DEMO_LAYERS, overwrite)
    x0, y0 = DEMO_ORIGIN_M

    # temperature grid (UTM): scenario coordinates of the cell centres
    rows, cols = np.mgrid[0:DEMO_HEIGHT, 0:DEMO_WIDTH]
    X = (cols + 0.5) * DEMO_RES_M / 1000.0
    Y = (rows + 0.5) * DEMO_RES_M / 1000.0
    t_layers = _layers(X, Y, rows, cols, DEMO_SEED, ["surface_temperature"], bog=True)
    t_tr = from_origin(x0, y0, DEMO_RES_M, DEMO_RES_M)
    with rasterio.open(paths["surface_temperature"], "w", **_profile(
            DEMO_WIDTH, DEMO_HEIGHT, 12, TEMPERATURE_CRS, t_tr, DEMO_BLOCK)) as dst:
        _describe(dst, "surface_temperature", scenario=_DEMO_SCENARIO)
        dst.write(t_layers["surface_temperature"])

    # soil grid (geographic): project the pixel centres to UTM, then to scenario km
    sw, sh, s_tr = demo_soil_grid()
    srows, scols = np.mgrid[0:sh, 0:sw]
    lon = s_tr.c + (scols + 0.5) * s_tr.a
    lat = s_tr.f + (srows + 0.5) * s_tr.e
    ux, uy = transform(SOIL_CRS, TEMPERATURE_CRS, lon.ravel(), lat.ravel())
    SX = ((np.asarray(ux) - x0) / 1000.0).reshape(sh, sw)
    SY = ((y0 - np.asarray(uy)) / 1000.0).reshape(sh, sw)
    soil_names = [n for n in DEMO_LAYERS if n != "surface_temperature"]
    s_layers = _layers(SX, SY, srows, scols, DEMO_SEED, soil_names, bog=True)
    for name in soil_names:
        with rasterio.open(paths[name], "w", **_profile(sw, sh, 1, SOIL_CRS, s_tr,
                                                        DEMO_BLOCK)) as dst:
            _describe(dst, name, scenario=_DEMO_SCENARIO)
            dst.write(s_layers[name])
    _write_readme(Path(out_dir) / "README.md", sw, sh, s_tr)
    return paths


def _write_readme(path: Path, sw: int, sh: int, s_tr) -> None:
    lines = [
        "# Demo region (invented)",
        "",
        "Synthetic data for the bundled demo: an invented valley with a lake and a peat bog.",
        "Not a real place. Written by `python -m geothermmap.sampledata` "
        f"(scenario version {SAMPLE_VERSION}); do not edit by hand.",
        "",
        f"- `surface_temperature.tif`: 12 bands (January..December), degC, {TEMPERATURE_CRS},"
        f" {DEMO_RES_M:g} m pixels, {DEMO_WIDTH} x {DEMO_HEIGHT} cells.",
        f"- `sand.tif`, `clay.tif` (percent), `water_content.tif` (m3 m-3), "
        f"`bulk_density.tif` (g cm-3), `organic_matter.tif` (percent): {SOIL_CRS}, "
        f"{SOIL_RES_DEG:g} degree pixels, {sw} x {sh} cells.",
        f"- Nodata is {NODATA} in every file (the lake).",
        "",
        "The scenario is described in the docstring of `geothermmap/sampledata.py`.",
        "",
    ]
    path.write_text("\n".join(lines), encoding="utf-8")


def _windows(width: int, height: int, chunk: int, block: int) -> Iterator[Window]:
    """Windows of ``chunk`` cells in tile order: every tile is finished before the next."""
    outer = max(chunk, block)
    for r0 in range(0, height, outer):
        for c0 in range(0, width, outer):
            for r in range(r0, min(r0 + outer, height), chunk):
                for c in range(c0, min(c0 + outer, width), chunk):
                    yield Window(c, r, min(chunk, width - c, c0 + outer - c),
                                 min(chunk, height - r, r0 + outer - r))


def generate_synthetic(out_dir: Path, width: int, height: int, *, chunk: int = 512,
                       seed: int = 0) -> dict[str, Path]:
    """Write the scenario stretched over a ``width`` x ``height`` grid, window by window.

    All layers share one grid: EPSG:32633, 30 m pixels, upper-left corner at
    :data:`DEMO_ORIGIN_M`. The scenario's 50 km x 40 km are mapped onto the grid, so the
    valley always fills it. Memory use is a few windows (about 12 x chunk^2 x 8 bytes
    each) plus a GDAL block cache capped at 64 MB, whatever the grid size. The values of a
    cell do not depend on ``chunk``.

    Parameters
    ----------
    out_dir : Path
        Output folder, created if missing; existing files are replaced.
    width, height : int
        Grid size. [cells]
    chunk : int, default 512
        Window size; must divide 512 or be a multiple of it (windows never straddle a
        tile partially, so every compressed tile is written exactly once). [cells]
    seed : int, default 0
        Noise seed.

    Returns
    -------
    dict
        ``surface_temperature`` (12 bands, degC), ``sand``, ``clay`` (percent),
        ``water_content`` (m3 m-3) -> path.
    """
    width, height, chunk = int(width), int(height), int(chunk)
    if width < 1 or height < 1:
        raise ValueError(f"grid size must be positive, got {width} x {height}")
    if chunk < 16 or not (SYNTHETIC_BLOCK % chunk == 0 or chunk % SYNTHETIC_BLOCK == 0):
        raise ValueError(f"chunk must divide {SYNTHETIC_BLOCK} or be a multiple of it "
                         f"(and >= 16), got {chunk}")
    paths = _check_out(Path(out_dir), SYNTHETIC_LAYERS, overwrite=True)
    x0, y0 = DEMO_ORIGIN_M
    tr = from_origin(x0, y0, SYNTHETIC_RES_M, SYNTHETIC_RES_M)
    sx_km, sy_km = SCENARIO_SIZE_KM
    scenario = f"invented demo valley stretched over {width} x {height} cells (synthetic)"
    with rasterio.Env(GDAL_CACHEMAX=64):  # MB; bounds the memory of dirty blocks
        dsts = {}
        try:
            for name in SYNTHETIC_LAYERS:
                count = 12 if name == "surface_temperature" else 1
                dsts[name] = rasterio.open(paths[name], "w", **_profile(
                    width, height, count, TEMPERATURE_CRS, tr, SYNTHETIC_BLOCK))
                _describe(dsts[name], name, scenario=scenario)
            for win in _windows(width, height, chunk, SYNTHETIC_BLOCK):
                rows, cols = np.mgrid[win.row_off:win.row_off + win.height,
                                      win.col_off:win.col_off + win.width]
                X = (cols + 0.5) * (sx_km / width)
                Y = (rows + 0.5) * (sy_km / height)
                layers = _layers(X, Y, rows, cols, seed, SYNTHETIC_LAYERS, bog=False)
                for name, dst in dsts.items():
                    dst.write(layers[name], window=win)
        finally:
            for dst in dsts.values():
                dst.close()
    return paths


def default_demo_dir() -> Path:
    """``sample_tiles/`` at the root of the source checkout."""
    return Path(__file__).resolve().parents[1] / "sample_tiles"


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m geothermmap.sampledata",
        description="Regenerate the invented demo region, or write a large synthetic grid.")
    parser.add_argument("--out", type=Path, default=None,
                        help="output folder (demo default: sample_tiles/ of the checkout)")
    parser.add_argument("--synthetic", nargs=2, type=int, metavar=("WIDTH", "HEIGHT"),
                        help="write a synthetic benchmark grid of this size instead")
    parser.add_argument("--chunk", type=int, default=512, help="window size (synthetic)")
    parser.add_argument("--seed", type=int, default=0, help="noise seed (synthetic)")
    args = parser.parse_args(argv)
    try:
        if args.synthetic:
            if args.out is None:
                parser.error("--synthetic needs --out DIR")
            paths = generate_synthetic(args.out, *args.synthetic, chunk=args.chunk,
                                       seed=args.seed)
        else:
            paths = generate_demo(args.out or default_demo_dir())
    except (ValueError, OSError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    for name, path in paths.items():
        print(f"{name}: {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
