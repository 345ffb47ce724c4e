"""Quicklook PNG maps of a run's outputs, for reports and a first look (matplotlib, Agg).

One PNG per output, ``<output folder>/quicklook/<output>.png``: north up, extent and axis
labels in map coordinates (easting/northing in the CRS's unit, or longitude/latitude),
a colour bar in the output's units, nodata transparent, a scale bar and a grid-north
arrow. Multi-band outputs (one band per depth, threshold or winter) are small multiples
sharing one colour scale, so the panels compare at a glance.

Colour scales:

- temperatures (degC): diverging blue-white-red, white at 0 degC and symmetric (one
  colour step per degree on both sides, so -2 degC looks as cold as +2 degC looks warm);
  the colour bar shows only the range of the values;
- frost depths, frozen days, freezing indices: blues (more frost, darker);
- days of year, lags, depths, soil properties: perceptually uniform sequential palettes;
- codes inside a continuous map (frost depth -1 = frozen at depth; warming/cooling day
  "never above" / "always above") get their own colours and legend entries;
- the frost-class map: its class colours with a legend of the class labels.

Limits are the 1st and 99th percentiles of the values shown (arrows on the colour bar
when values lie beyond). Large rasters are never read whole: the read is decimated to
at most ``max_side`` pixels a side per panel (from the COG overviews for continuous maps;
nearest-neighbour from full resolution for maps with codes or classes, whose averaged
overviews would mix codes with values).
"""

from __future__ import annotations

import io
import math
import textwrap
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from geothermmap.outputs import FROST_CAUTION, OUTPUTS

QUICKLOOK_DIR = "quicklook"
MAX_SIDE = 1500  # pixels read per panel side at most
DPI = 120

#: Palette per output (fallback by units in :func:`_palette`).
PALETTES = {
    "frost_depth": "Blues", "frost_depth_latent": "Blues", "frost_depth_stefan": "Blues",
    "frost_depth_berggren": "Blues", "design_frost_depth": "Blues",
    "frost_depth_winters": "Blues", "frozen_days": "Blues", "freezing_index": "Blues",
    "design_freezing_index": "Blues", "thaw_depth": "YlOrBr", "days_above": "YlOrRd",
    "degree_days": "YlOrRd", "amplitude": "magma", "surface_heat_flux_amplitude": "plasma",
    "zero_amplitude_depth": "cividis", "damping_depth": "cividis",
}
_UNIT_PALETTES = {"degC": "RdBu_r", "K": "magma", "day of year": "viridis", "days": "viridis"}


def _codes(name: str) -> dict[float, tuple[str, str]]:
    """Special values inside a continuous output: value -> (label, colour)."""
    out: dict[float, tuple[str, str]] = {}
    if name == "frost_depth":
        from geothermmap.physics.periodic import FROST_PERENNIAL

        out[FROST_PERENNIAL] = ("frozen at depth (annual mean <= 0 degC)", "#54278f")
    if name in ("warming_doy", "cooling_doy"):
        try:
            from geothermmap.physics.rootzone import ALWAYS_ABOVE, NEVER_ABOVE
        except ImportError:  # pragma: no cover - installation without the root zone
            return out
        out[NEVER_ABOVE] = ("never above the threshold", "#bdbdbd")
        out[ALWAYS_ABOVE] = ("above the threshold all year", "#e08214")
    return out


@dataclass
class Quicklook:
    """A rendered quicklook and what it shows (for tests and the report)."""

    name: str
    png: bytes
    extent: tuple[float, float, float, float]  # left, right, bottom, top [map units]
    crs: str
    units: str
    cmap: str
    norm: dict[str, float | str]  # kind, vmin, vcenter, vmax
    panels: int
    read_shape: tuple[int, int]  # rows, cols read per panel
    codes: list[str] = field(default_factory=list)  # legend entries of codes or classes
    colorbar_label: str = ""
    panel_titles: list[str] = field(default_factory=list)
    caution: bool = False  # the frost caution is printed in the figure
    axes_px: list[tuple[float, float, float, float]] = field(default_factory=list)
    # map panels in PNG pixels: left, top, right, bottom (origin top left)
    path: Path | None = None


def _palette(name: str, units: str) -> str:
    return PALETTES.get(name) or _UNIT_PALETTES.get(units, "viridis")


def _class_style(tags: dict[str, str], present: np.ndarray, nodata: float | None,
                 frost_classes: Any) -> dict[int, tuple[str, str]]:
    """Class code -> (label, colour) for a class map: tags first, then the frost legend."""
    import matplotlib

    from geothermmap.summarize import class_colours, class_legend

    labels = class_legend(tags)
    colours = class_colours(tags)
    if not labels:  # no legend in the file: the frost-class legend of the recipe
        try:
            from geothermmap.physics.frost import frost_class_legend

            default = frost_class_legend(frost_classes) if frost_classes else \
                frost_class_legend()
            labels = {k: v[0] for k, v in default.items()}
            colours = {**{k: v[1] for k, v in default.items()}, **colours}
        except ImportError:  # pragma: no cover - installation without the frost module
            pass
    codes = sorted(set(int(c) for c in present) | set(labels))
    if nodata is not None and math.isfinite(nodata):
        codes = [c for c in codes if c != int(nodata)]
    tab = matplotlib.colormaps["tab10"]
    return {c: (labels.get(c, f"class {c}"),
                colours.get(c, matplotlib.colors.to_hex(tab(i % 10))))
            for i, c in enumerate(codes)}


def _read(ds, max_side: int, nearest: bool) -> tuple[np.ndarray, int]:
    """Decimated read of every band (never the whole raster at once)."""
    from rasterio.enums import Resampling

    f = max(1, math.ceil(max(ds.width, ds.height) / max_side))
    shape = (ds.count, max(1, math.ceil(ds.height / f)), max(1, math.ceil(ds.width / f)))
    resampling = Resampling.nearest if nearest or f == 1 else Resampling.average
    data = ds.read(out_shape=shape, resampling=resampling, masked=True)
    return data, f


def _nice_length(span: float) -> float:
    """A 1-2-5 length near a quarter of ``span``."""
    target = span / 4.0
    exp = 10 ** math.floor(math.log10(target))
    return max(m * exp for m in (1, 2, 5) if m * exp <= target)


def _format_length(metres: float) -> str:
    return f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"


def render_quicklook(tif: str | Path, *, name: str | None = None, max_side: int = MAX_SIDE,
                     frost_classes: Any = None, out_png: str | Path | None = None
                     ) -> Quicklook:
    """Render one output GeoTIFF as a PNG map (bytes; also written to ``out_png``)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import rasterio
    from matplotlib import colors
    from matplotlib.patches import Patch
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    tif = Path(tif)
    name = name or tif.stem
    info = OUTPUTS.get(name)
    with rasterio.open(tif) as ds:  # metadata from the file itself
        categorical = ds.dtypes[0] == "uint8"
        n_bands = ds.count
        tags = ds.tags()
        nodata = ds.nodata
        descriptions = [d or f"band {i + 1}" for i, d in enumerate(ds.descriptions)]
        crs = ds.crs
        left, bottom, right, top = ds.bounds
        units = tags.get("units") or (info.units if info else "")
        north_up = ds.transform.e < 0
    codes = {} if categorical else _codes(name)
    ncols = {1: 1, 2: 2, 3: 3, 4: 2}.get(n_bands, 4)
    nrows = math.ceil(n_bands / ncols)
    # codes and classes must not be averaged: full resolution, nearest neighbour
    open_opts = {"OVERVIEW_LEVEL": "NONE"} if (categorical or codes) else {}
    with rasterio.open(tif, **open_opts) as ds:
        data, factor = _read(ds, max(200, max_side // ncols), nearest=bool(categorical or codes))
    if not north_up:  # rows run south to north: flip to north up
        data = data[:, ::-1, :]
    values = np.ma.filled(data.astype(np.float64), np.nan)

    code_mask = np.zeros(values.shape, bool)
    for v in codes:
        code_mask |= values == v
    finite = values[np.isfinite(values) & ~code_mask]

    fig_w = min(13.0, max(8.0, 4.6 * ncols + 2.2))
    aspect = (top - bottom) / max(right - left, 1e-12)
    if crs is not None and crs.is_geographic:
        aspect /= max(math.cos(math.radians(0.5 * (top + bottom))), 0.05)
    panel_w = (fig_w - (4.2 if categorical else 2.2)) / ncols  # legend or colour bar beside
    frost = bool(info is not None and info.frost)
    n_codes = sum(bool(np.any(values == v)) for v in codes)
    foot_h = (0.3 * math.ceil(n_codes / 2) + 0.15 if n_codes else 0.0) + (0.5 if frost else 0.0)
    maps_h = min(14.0, max(3.0, nrows * panel_w * aspect + 1.6))
    fig = plt.figure(figsize=(fig_w, maps_h + foot_h), layout="constrained", dpi=DPI)
    if foot_h:
        top_fig, foot = fig.subfigures(2, 1, height_ratios=(maps_h, foot_h))
    else:
        top_fig, foot = fig, None
    axes = top_fig.subplots(nrows, ncols, squeeze=False, sharex=True, sharey=True)
    extent = (left, right, bottom, top)
    legend_items: list[Any] = []
    code_labels: list[str] = []
    norm_info: dict[str, float | str]
    if categorical:
        present = np.unique(finite).astype(int) if finite.size else np.array([], int)
        style = _class_style(tags, present, nodata, frost_classes)
        keys = sorted(style)
        cmap = colors.ListedColormap([style[k][1] for k in keys])
        cmap = cmap.with_extremes(bad=(0, 0, 0, 0))
        bounds = np.array([keys[0] - 0.5] + [k + 0.5 for k in keys]) if keys else [0, 1]
        norm = colors.BoundaryNorm(bounds, cmap.N)
        cmap_name = "classes"
        norm_info = {"kind": "classes"}
        legend_items = [Patch(facecolor=style[k][1], edgecolor="#777777", label=style[k][0])
                        for k in keys]
        code_labels = [style[k][0] for k in keys]
    else:
        cmap_name = _palette(name, units)
        if finite.size:
            lo, hi = (float(v) for v in np.percentile(finite, [1, 99]))
            if hi <= lo:
                lo, hi = lo - 0.5 * max(abs(lo), 1.0), hi + 0.5 * max(abs(hi), 1.0)
        else:
            lo, hi = 0.0, 1.0
        base = matplotlib.colormaps[cmap_name]
        if units == "degC":
            # one intensity per degree on both sides of 0 degC (white): the norm is
            # symmetric, the colour bar shows only the range of the values
            limit = max(abs(lo), abs(hi))
            cmap = base
            norm = colors.Normalize(-limit, limit)
            norm_info = {"kind": "diverging", "vmin": -limit, "vcenter": 0.0, "vmax": limit,
                         "shown_min": lo, "shown_max": hi}
        else:
            cmap = base.copy()
            norm = colors.Normalize(lo, hi)
            norm_info = {"kind": "linear", "vmin": lo, "vmax": hi}
        cmap = cmap.with_extremes(bad=(0, 0, 0, 0))  # nodata transparent
        vmin, vmax = (lo, hi) if units == "degC" else (float(norm.vmin), float(norm.vmax))
        below = finite.size and float(finite.min()) < vmin
        above = finite.size and float(finite.max()) > vmax
        extend = {(True, True): "both", (True, False): "min", (False, True): "max"}.get(
            (bool(below), bool(above)), "neither")
        for v, (label, colour) in codes.items():
            if np.any(values == v):
                legend_items.append(Patch(facecolor=colour, edgecolor="#777777",
                                          label=f"{label} (code {v:g})"))
                code_labels.append(label)

    image = None
    for i in range(nrows * ncols):
        ax = axes[i // ncols][i % ncols]
        if i >= n_bands:
            ax.set_visible(False)
            continue
        band = values[i]
        shown = np.where(code_mask[i], np.nan, band)
        if not categorical and units == "degC":  # beyond the colour bar: its end colours
            shown = np.clip(shown, norm_info["shown_min"], norm_info["shown_max"])
        image = ax.imshow(np.ma.masked_invalid(shown), cmap=cmap, norm=norm, extent=extent,
                          interpolation="nearest", origin="upper")
        for v, (_, colour) in codes.items():
            hit = band == v
            if hit.any():
                rgba = np.zeros((*band.shape, 4))
                rgba[hit] = colors.to_rgba(colour)
                ax.imshow(rgba, extent=extent, interpolation="nearest", origin="upper")
        ax.set_facecolor("none")
        if n_bands > 1:
            ax.set_title(descriptions[i], fontsize=9)
        ax.xaxis.set_major_locator(MaxNLocator(4))
        ax.yaxis.set_major_locator(MaxNLocator(5))
        fmt = FuncFormatter(lambda v, _: f"{v:,.0f}" if abs(v) >= 1000 else f"{v:g}")
        ax.xaxis.set_major_formatter(fmt)
        ax.yaxis.set_major_formatter(fmt)
        ax.tick_params(labelsize=7.5)
        if crs is not None and crs.is_geographic:
            ax.set_aspect(1.0 / max(math.cos(math.radians(0.5 * (top + bottom))), 0.05))
        else:
            ax.set_aspect("equal")
        if i % ncols == 0:
            ax.set_ylabel(_axis_label(crs, "y"), fontsize=8.5)
        if i // ncols == nrows - 1 or i + ncols >= n_bands:
            ax.set_xlabel(_axis_label(crs, "x"), fontsize=8.5)
        if i == 0:
            _decorate(ax, crs, extent)

    visible = [ax for row in axes for ax in row if ax.get_visible()]
    if categorical:
        # beside the panels (an axes legend: the layout makes room for it)
        visible[min(ncols, len(visible)) - 1].legend(
            handles=legend_items, loc="upper left", bbox_to_anchor=(1.03, 1.0), fontsize=8,
            title=units or "class", title_fontsize=8.5, frameon=False)
    else:
        bounds = (np.linspace(norm_info["shown_min"], norm_info["shown_max"], 257)
                  if units == "degC" else None)
        cb = top_fig.colorbar(image, ax=visible, extend=extend, boundaries=bounds,
                              shrink=0.9 if nrows > 1 else 0.95, pad=0.02)
        if bounds is not None:
            ticks = MaxNLocator(7).tick_values(bounds[0], bounds[-1])
            cb.set_ticks(ticks[(ticks >= bounds[0]) & (ticks <= bounds[-1])])
        cb_label = f"{name} [{units}]" if units else name
        cb.set_label(cb_label, fontsize=9)
        cb.ax.tick_params(labelsize=8)
    if foot is not None and legend_items and not categorical:
        foot.legend(handles=legend_items, loc="upper center", fontsize=7.5, frameon=False,
                    ncols=min(len(legend_items), 2))
    width_chars = int(fig_w * 11)
    title = name if info is None else f"{name}: {info.description.split(' (')[0].split('. ')[0]}"
    note = f"CRS: {_crs_text(crs)}" + (f", read at 1/{factor} resolution" if factor > 1 else "")
    top_fig.suptitle("\n".join(textwrap.wrap(title, width_chars) + [note]), fontsize=10)
    if foot is not None and frost:
        foot.text(0.5, 0.08, "\n".join(textwrap.wrap("CAUTION: " + FROST_CAUTION,
                                                      width_chars + 25)),
                  ha="center", va="bottom", fontsize=7.5, color="#7f2704",
                  bbox={"facecolor": "#fff5eb", "edgecolor": "#fdae6b", "boxstyle": "round"})

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, transparent=True)
    height_px = fig.bbox.height  # the layout as saved: where the panels are in the PNG
    axes_px = [(b.x0, height_px - b.y1, b.x1, height_px - b.y0)
               for b in (ax.get_window_extent() for ax in visible)]
    plt.close(fig)
    png = buf.getvalue()
    path = None
    if out_png is not None:
        path = Path(out_png)
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(f".{path.stem}.partial.png")
        try:
            tmp.write_bytes(png)
            tmp.replace(path)
        except BaseException:  # an interrupt too: no partial picture stays behind
            tmp.unlink(missing_ok=True)
            raise
    return Quicklook(name, png, extent, crs.to_string() if crs else "", units, cmap_name,
                     norm_info, n_bands, tuple(values.shape[1:]), code_labels,
                     "" if categorical else cb_label, descriptions if n_bands > 1 else [],
                     frost, axes_px, path)


def _axis_label(crs, axis: str) -> str:
    if crs is None:
        return "column" if axis == "x" else "row"
    if crs.is_geographic:
        return "longitude [deg]" if axis == "x" else "latitude [deg]"
    try:
        unit = crs.linear_units or "m"
    except Exception:  # noqa: BLE001
        unit = "m"
    unit = {"metre": "m", "meter": "m", "foot": "ft", "US survey foot": "US ft"}.get(unit, unit)
    return f"easting [{unit}]" if axis == "x" else f"northing [{unit}]"


def _crs_text(crs) -> str:
    if crs is None:
        return "none"
    epsg = crs.to_epsg()
    try:
        import pyproj

        name = pyproj.CRS.from_wkt(crs.to_wkt()).name
    except Exception:  # noqa: BLE001 - the name is decoration
        name = ""
    code = f"EPSG:{epsg}" if epsg else "custom"
    return f"{name} ({code})" if name else code


def _decorate(ax, crs, extent) -> None:
    """Scale bar (projected CRS in metres) and a grid-north arrow on the first panel."""
    left, right, bottom, top = extent
    ax.annotate("N", xy=(0.95, 0.95), xytext=(0.95, 0.80), xycoords="axes fraction",
                ha="center", va="center", fontsize=9, fontweight="bold",
                arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.2},
                bbox={"facecolor": "white", "alpha": 0.7, "edgecolor": "none", "pad": 1})
    if crs is None or crs.is_geographic:
        return
    try:
        factor = float(crs.linear_units_factor[1])
    except Exception:  # noqa: BLE001
        factor = 1.0
    length = _nice_length((right - left) * factor)
    from matplotlib.font_manager import FontProperties
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    bar = AnchoredSizeBar(ax.transData, length / factor, _format_length(length),
                          "lower left", pad=0.4, borderpad=0.6, sep=3, frameon=True,
                          size_vertical=(top - bottom) * 0.008,
                          fontproperties=FontProperties(size=7.5))
    bar.patch.set_alpha(0.7)
    bar.patch.set_edgecolor("none")
    ax.add_artist(bar)


# --------------------------------------------------------------------------- a whole run


def write_quicklooks(output_dir: str | Path, names: list[str] | None = None, *,
                     max_side: int = MAX_SIDE, reuse: bool = False) -> dict[str, Path]:
    """Write ``quicklook/<output>.png`` for every map of a run (or ``names``).

    With ``reuse``, a PNG newer than its map is kept as it is.
    """
    from geothermmap import record
    from geothermmap.errors import UserError

    out = Path(output_dir)
    rec = record.read(out / "run_record.json")
    if rec is None:
        raise UserError(f"{out} has no readable run_record.json: give a folder written by "
                        "`geothermmap run`")
    frost_classes = (rec.get("recipe") or {}).get("frost_classes")
    paths: dict[str, Path] = {}
    for name, entry in rec.get("outputs", {}).items():
        if names is not None and name not in names:
            continue
        tif = out / entry["file"]
        if not tif.exists():
            continue
        png = out / QUICKLOOK_DIR / f"{name}.png"
        if reuse and png.exists() and png.stat().st_mtime >= tif.stat().st_mtime:
            paths[name] = png
            continue
        render_quicklook(tif, name=name, max_side=max_side, frost_classes=frost_classes,
                         out_png=png)
        paths[name] = png
    return paths


def render_run(result: Any) -> dict[str, Path]:
    """Quicklooks of a :class:`~geothermmap.pipeline.RunResult` (used by ``--quicklook``)."""
    return write_quicklooks(result.output_dir, list(result.outputs))
