"""Probe one point of a recipe: inputs, soil properties and the temperature profile there.

``geothermmap probe RECIPE --at X Y`` runs the *same code path as the maps* on a 1 x 1
window: :func:`geothermmap.pipeline.plan_run` fixes the grid and the aligned input layers,
each layer is read with ``layer.read(plan.grid, window)`` and the cell goes through
:func:`geothermmap.kernel.compute_block` with the recipe's kernel configuration. So a
probed number equals the map value of that cell (up to the float32 rounding of the map).
The point is the grid cell whose area contains (X, Y) after transforming it to the grid
CRS. The depth table and the plot ask the kernel for a few more outputs than the recipe
lists (mean, amplitude, extremes, lag at every depth); the plot's envelope is the kernel's
``t_min`` / ``t_max`` on a fine depth grid, the dated profiles evaluate the periodic
solution with the cell's harmonic fit.
"""

from __future__ import annotations

import csv
import dataclasses
import math
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import click
import numpy as np
from rasterio.warp import transform as warp_transform
from rasterio.windows import Window

from geothermmap.cli_support import handle_errors
from geothermmap.errors import UserError
from geothermmap.kernel import compute_block, output_band_count
from geothermmap.outputs import FROST_CAUTION, OUTPUTS
from geothermmap.physics import harmonics, periodic
from geothermmap.physics.harmonics import MONTH_EDGES_DAYS, HarmonicFit
from geothermmap.raster.grid import crs_from_user_input

#: Outputs the depth table needs in addition to the recipe's.
TABLE_OUTPUTS = ("t_mean", "amplitude", "t_min", "t_max", "phase_lag")
#: Per-cell outputs always shown (soil properties and damping depth).
CELL_OUTPUTS = ("conductivity", "heat_capacity", "diffusivity", "damping_depth")
#: Dated profiles of the plot: (label, days since January 1st 00:00).
PROFILE_DATES = (("1 Feb", float(MONTH_EDGES_DAYS[1])), ("1 May", float(MONTH_EDGES_DAYS[4])),
                 ("1 Aug", float(MONTH_EDGES_DAYS[7])), ("1 Nov", float(MONTH_EDGES_DAYS[10])))
_INPUT_UNITS = {"surface_temperature": "degC", "sand": "1", "clay": "1",
                "water_content": "m3 m-3", "bulk_density": "kg m-3", "organic_matter": "1",
                "quartz": "1", "n_factor_freezing": "1", "n_factor_thawing": "1"}


@dataclass
class ProbeResult:
    """What :func:`probe_point` found at one cell."""

    x: float  # the point in the grid CRS [map units]
    y: float
    row: int
    col: int
    inputs: dict[str, np.ndarray]  # name -> (bands,) canonical units
    outputs: dict[str, np.ndarray]  # name -> (bands,) as in the maps
    depths_m: tuple[float, ...]
    plan: Any

    @property
    def fit(self) -> HarmonicFit:
        """Harmonic fit of the cell's ground-surface cycle (with ``surface.kind: air``
        the n-factored air cycle, as in the maps)."""
        t = self.inputs["surface_temperature"]
        monthly = t.reshape(-1, 12).mean(axis=0).reshape(12, 1)
        fit = harmonics.fit_harmonics(monthly, self.plan.config.harmonics)
        if self.plan.config.extras.get("surface_kind") == "air":
            from geothermmap.physics.frost import ground_surface_harmonics

            fit = ground_surface_harmonics(fit, self.inputs["n_factor_freezing"],
                                           self.inputs["n_factor_thawing"])
        return fit

    @property
    def damping_depth_m(self) -> float:
        return float(self.outputs["damping_depth"][0])


def _cell_of(plan: Any, x: float, y: float, crs: str) -> tuple[float, float, int, int]:
    try:
        src = crs_from_user_input(crs)
    except ValueError as err:
        raise UserError(f"--crs {crs!r} is not a CRS ({err})") from None
    grid = plan.grid
    if not (math.isfinite(x) and math.isfinite(y)):
        raise UserError("--at X Y must be finite numbers")
    hint = ""
    if src.is_geographic and not (-180.0 <= x <= 360.0 and -90.0 <= y <= 90.0):
        hint = (f"; ({x}, {y}) is no longitude/latitude: for map coordinates give --crs "
                f"(the grid's is {grid.crs.to_string()})")
    try:
        xs, ys = warp_transform(src, grid.crs, [x], [y])
    except Exception as err:  # noqa: BLE001 - GDAL/PROJ errors, e.g. invalid latitude
        raise UserError(f"point ({x}, {y}) in {crs} cannot be transformed to the grid CRS "
                        f"{grid.crs.to_string()} ({err}){hint}") from None
    gx, gy = float(xs[0]), float(ys[0])
    col_f, row_f = ~grid.affine @ (gx, gy)
    if not (math.isfinite(col_f) and math.isfinite(row_f)):
        raise UserError(f"point ({x}, {y}) in {crs} cannot be transformed to the grid CRS "
                        f"{grid.crs.to_string()}")
    row, col = math.floor(row_f), math.floor(col_f)
    if not (0 <= row < grid.height and 0 <= col < grid.width):
        b = grid.bounds
        raise UserError(
            f"point ({x}, {y}) in {crs} is outside the output grid: it is at "
            f"({gx:.3f}, {gy:.3f}) in {grid.crs.to_string()}, the grid covers x "
            f"{b[0]:.3f}..{b[2]:.3f}, y {b[1]:.3f}..{b[3]:.3f}; check the order (X = "
            "easting/longitude first) and --crs" + hint)
    return gx, gy, row, col


def probe_point(recipe: Any, x: float, y: float, crs: str = "EPSG:4326",
                extra_depths_m: tuple[float, ...] = ()) -> ProbeResult:
    """Compute every output of a recipe at one point, through the map code path.

    Parameters
    ----------
    recipe
        A :class:`~geothermmap.recipe.Recipe` or the path of a YAML recipe.
    x, y
        The point (easting/longitude first). [units of ``crs``]
    crs
        CRS of ``x, y`` (anything ``rasterio.crs.CRS.from_user_input`` reads).
    extra_depths_m
        Depths to add to the recipe's for the per-depth outputs (the plot uses a fine
        grid). [m]

    Raises
    ------
    UserError
        The point is outside the grid or has nodata in an input.
    """
    from geothermmap.pipeline import plan_run

    plan = plan_run(recipe)
    gx, gy, row, col = _cell_of(plan, x, y, crs)
    window = Window(col, row, 1, 1)
    inputs = {name: layer.read(plan.grid, window) for name, layer in plan.layers.items()}
    depths = tuple(plan.config.depths_m) + tuple(
        d for d in extra_depths_m if d not in plan.config.depths_m)
    wanted = tuple(dict.fromkeys((*plan.outputs, *TABLE_OUTPUTS, *CELL_OUTPUTS)))
    config = dataclasses.replace(plan.config, outputs=wanted, depths_m=depths)
    result = compute_block(inputs, config)
    if result.valid_cells == 0:
        missing = [n for n, a in inputs.items() if not np.all(np.isfinite(a))]
        why = (f"nodata in input(s) {', '.join(missing)}" if missing else
               "the cell was masked by the physical-bounds checks (bulk density at or above "
               "particle density)")
        raise UserError(f"no valid data at point ({x}, {y}) in {crs} (grid row {row}, col "
                        f"{col}): {why}")
    outputs = {n: a[:, 0, 0].astype(np.float64) for n, a in result.outputs.items()}
    for name in outputs:  # keep band counts of the recipe's layout for non-depth outputs
        if not OUTPUTS[name].per_depth:
            assert outputs[name].shape[0] == output_band_count(name, config)
    return ProbeResult(gx, gy, row, col, {n: a[:, 0, 0].astype(np.float64)
                                          for n, a in inputs.items()},
                       outputs, depths, plan)


def depth_table(res: ProbeResult, depths_m: tuple[float, ...] | None = None) -> list[dict]:
    """Rows ``depth_m, t_mean, amplitude, t_min, t_max, phase_lag`` (recipe depths)."""
    depths = res.plan.config.depths_m if depths_m is None else depths_m
    rows = []
    for d in depths:
        j = res.depths_m.index(d)
        rows.append({"depth_m": d, **{k: float(res.outputs[k][j]) for k in TABLE_OUTPUTS}})
    return rows


def probe_record(res: ProbeResult, x: float, y: float, crs: str) -> dict:
    """Everything the probe found, for JSON: the point, the inputs in canonical units and
    every output of the recipe band by band (null for nodata), as in the maps."""
    from geothermmap.pipeline import band_descriptions

    def num(v: float) -> float | None:
        return float(v) if math.isfinite(v) else None

    outputs = {}
    for name in res.plan.outputs:
        labels = [desc for desc, _ in band_descriptions(res.plan, name)]
        values = res.outputs[name]
        if OUTPUTS[name].per_depth:  # the recipe's depths (the probe may hold more)
            values = [values[res.depths_m.index(d)] for d in res.plan.config.depths_m]
        outputs[name] = {"units": OUTPUTS[name].units,
                         "bands": [{"band": desc, "value": num(v)}
                                   for desc, v in zip(labels, values, strict=True)]}
    record = {
        "point": {"x": x, "y": y, "crs": crs, "grid_x": res.x, "grid_y": res.y,
                  "grid_crs": res.plan.grid.crs.to_string(), "row": res.row, "col": res.col},
        "inputs": {name: {"units": _INPUT_UNITS.get(name, ""), "values": [num(v) for v in vals]}
                   for name, vals in res.inputs.items()},
        "outputs": outputs,
    }
    if any(OUTPUTS[n].frost for n in res.plan.outputs):
        record["caution"] = FROST_CAUTION
    return record


def _fmt(v: float) -> str:
    return "nodata" if not math.isfinite(v) else f"{v:.4g}"


def _print_report(res: ProbeResult, x: float, y: float, crs: str) -> None:
    plan = res.plan
    click.echo(f"point ({x}, {y}) {crs} -> ({res.x:.3f}, {res.y:.3f}) "
               f"{plan.grid.crs.to_string()}, grid row {res.row}, col {res.col}")
    click.echo("inputs (canonical units):")
    for name, vals in res.inputs.items():
        shown = ", ".join(_fmt(v) for v in vals[:12]) + (" ..." if vals.size > 12 else "")
        click.echo(f"  {name:20s} {_INPUT_UNITS.get(name, ''):8s} {shown}")
    click.echo("soil properties:")
    for name in CELL_OUTPUTS:
        click.echo(f"  {name:20s} {OUTPUTS[name].units:10s} {_fmt(res.outputs[name][0])}")
    click.echo("depth table:")
    click.echo(f"  {'depth m':>8s} {'mean degC':>10s} {'ampl K':>8s} {'min degC':>9s} "
               f"{'max degC':>9s} {'lag days':>9s}")
    for r in depth_table(res):
        click.echo(f"  {r['depth_m']:8.3g} {r['t_mean']:10.3f} {r['amplitude']:8.3f} "
                   f"{r['t_min']:9.3f} {r['t_max']:9.3f} {r['phase_lag']:9.1f}")
    others = [n for n in plan.outputs if n not in (*TABLE_OUTPUTS, *CELL_OUTPUTS)]
    if others:
        click.echo("other outputs of the recipe:")
    cautioned = False
    for name in others:
        info = OUTPUTS[name]
        vals = res.outputs[name]
        if info.per_depth:
            labels = [f"{d:g} m" for d in plan.config.depths_m]
        elif info.per_threshold:
            labels = [f"{v:g} degC" for v in plan.config.extras.get("threshold_values", ())]
        else:
            labels = [""] * vals.size
        if name == "frost_class" and vals.size and math.isfinite(vals[0]):
            from geothermmap.physics.frost import frost_class_legend

            legend = frost_class_legend(plan.config.extras.get("frost_classes",
                                                               (0.5, 1.0, 1.5, 2.0)))
            labels = [legend.get(int(vals[0]), ("",))[0]]
        codes = dict(info.codes)
        shown = ", ".join(f"{_fmt(v)}" + (f" ({lab})" if lab else "")
                          + (f" [{codes[v].replace('_', ' ')}]" if v in codes else "")
                          for v, lab in zip(vals, labels, strict=False))
        click.echo(f"  {name:28s} {info.units:12s} {shown}")
        if info.frost and not cautioned:  # once, under the first frost output shown
            click.echo(f"  CAUTION: {FROST_CAUTION}")
            cautioned = True


def write_plot(res: ProbeResult, path: Path) -> Path:
    """PNG: annual envelope (min, max) and mean vs depth, 0 degC, and dated profiles."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    d = res.damping_depth_m
    zmax = max(max(res.plan.config.depths_m), 3.0 * d if math.isfinite(d) else 2.0)
    z = np.linspace(0.0, zmax, 61)
    dense = probe_point(res.plan.recipe, res.x, res.y, res.plan.grid.crs.to_wkt(),
                        extra_depths_m=tuple(float(v) for v in z))
    idx = [dense.depths_m.index(float(v)) for v in z]
    fig, ax = plt.subplots(figsize=(6, 6.5), dpi=100)
    ax.fill_betweenx(z, dense.outputs["t_min"][idx], dense.outputs["t_max"][idx],
                     color="0.88", label="annual range (min to max)")
    ax.plot(dense.outputs["t_min"][idx], z, color="tab:blue", lw=1.5, label="annual minimum")
    ax.plot(dense.outputs["t_max"][idx], z, color="tab:red", lw=1.5, label="annual maximum")
    ax.plot(dense.outputs["t_mean"][idx], z, color="k", lw=1, ls="--", label="annual mean")
    fit = res.fit
    for (label, t), style in zip(PROFILE_DATES, (":", "-.", ":", "-."), strict=True):
        prof = periodic.temperature_at_depth(fit, d, z[:, None], t)[:, 0]
        ax.plot(prof, z, lw=1, ls=style, label=label)
    ax.axvline(0.0, color="tab:cyan", lw=1, label="0 degC")
    ax.invert_yaxis()
    ax.set_xlabel("temperature [degC]")
    ax.set_ylabel("depth [m]")
    ax.set_title(f"row {res.row}, col {res.col}; damping depth {d:.2f} m", fontsize=10)
    ax.legend(fontsize=8, loc="lower right")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fig.savefig(path)
    except OSError as err:
        raise UserError(f"cannot write the plot {path}: {err.strerror or err}") from None
    finally:
        plt.close(fig)
    return path


def _check_plot_path(path: Path) -> None:
    """Refuse a plot file type matplotlib cannot write before any work is done."""
    from matplotlib.backend_bases import FigureCanvasBase

    kinds = FigureCanvasBase.get_supported_filetypes()
    suffix = path.suffix.lower().lstrip(".")
    if suffix not in kinds:
        raise UserError(f"--plot {path}: unsupported picture type {path.suffix or '(none)'!r}; "
                        f"use one of {', '.join('.' + k for k in sorted(kinds))}")


@click.command()
@click.argument("recipe", type=click.Path(path_type=Path))
@click.option("--at", "at", nargs=2, type=float, required=True, metavar="X Y",
              help="The point, easting/longitude first.")
@click.option("--crs", default="EPSG:4326", show_default=True, help="CRS of X Y.")
@click.option("--plot", type=click.Path(path_type=Path), default=None, metavar="FILE.png",
              help="Also draw the annual envelope and dated profiles to a PNG.")
@click.option("--csv", "as_csv", is_flag=True,
              help="Print the depth table as CSV on stdout (nothing else).")
@click.option("--json", "as_json", is_flag=True,
              help="Print everything (point, inputs, every output band) as JSON on stdout.")
@handle_errors
def probe(recipe: Path, at: tuple[float, float], crs: str, plot: Path | None,
          as_csv: bool, as_json: bool) -> None:
    """Inputs, soil properties and the temperature profile of RECIPE at one point."""
    if as_csv and as_json:
        raise UserError("give --csv or --json, not both")
    x, y = at
    if plot is not None:
        _check_plot_path(plot)
    res = probe_point(recipe, x, y, crs)
    if as_json:
        import json

        click.echo(json.dumps(probe_record(res, x, y, crs), indent=2))
    elif as_csv:
        rows = depth_table(res)
        writer = csv.DictWriter(sys.stdout, fieldnames=list(rows[0]), lineterminator="\n")
        writer.writeheader()
        for r in rows:
            writer.writerow({k: (f"{v:.9g}" if isinstance(v, float) else v)
                             for k, v in r.items()})
    else:
        _print_report(res, x, y, crs)
    if plot is not None:
        out = write_plot(res, plot)
        if not (as_csv or as_json):
            click.echo(f"plot: {out}")


CLI_COMMANDS = [probe]
