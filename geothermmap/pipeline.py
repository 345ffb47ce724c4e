"""Orchestration: plan a run from a recipe, build one dask graph, write outputs and a record.

One task per block of the target grid reads every input window once, computes every
output with the kernel and writes one block file; a second stage assembles each output
into a Cloud-Optimized GeoTIFF. Memory is bounded by chunk size x workers, never by the
grid size. The same task functions run on the local threaded scheduler, on a local
dask.distributed cluster (``workers``) or on an existing one (``scheduler``).
"""

from __future__ import annotations

import ctypes
import json
import math
import os
import shutil
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
from numba import njit
from rasterio.errors import RasterioError, RasterioIOError
from rasterio.windows import Window

from geothermmap import record
from geothermmap.checks import check_units
from geothermmap.errors import InputError, PhysicalBoundsError, RecipeError, UserError
from geothermmap.kernel import (
    BOUNDS_COUNTERS,
    CellBoundsError,
    KernelConfig,
    compute_block,
    group_module,
)
from geothermmap.outputs import FROST_CAUTION, OUTPUTS
from geothermmap.raster.cog import TileCodec, is_tile_store
from geothermmap.raster.grid import TargetGrid, crs_from_user_input
from geothermmap.raster.inputs import (
    InputLayer,
    close_cached_handles,
    configure_gdal,
    coverage_fraction,
    grid_of,
    open_layer,
)
from geothermmap.raster.writer import (
    PARTIAL_SUFFIX,
    TilePyramid,
    block_path,
    block_size,
    overview_count,
    tile_codec,
    tile_size,
    write_block,
    write_cog,
    write_overview,
)
from geothermmap.recipe import (
    DEFAULT_BULK_DENSITY_G_CM3,
    DEFAULT_ORGANIC_MATTER_PERCENT,
    INPUT_KINDS,
    UNIT_CONVERSIONS,
    InputSpec,
    Recipe,
    load_recipe,
)

WORK_DIR_NAME = ".geothermmap-work"
RECORD_NAME = "run_record.json"
#: What commands make from a run's maps in its folder (quicklooks, report, zone summaries).
DERIVED_FILES = ("quicklook", "report.html", "summary.gpkg", "summary.csv")
#: Names in an output folder that belong to the tool besides the maps themselves.
TOOL_FILES = (RECORD_NAME, WORK_DIR_NAME, *DERIVED_FILES)
DEFAULT_CHUNK = 512

#: Expected band counts per input (negative = any multiple of that number).
EXPECTED_BANDS = {"surface_temperature": (-12,), "water_content": (1, 12), "sand": (1,),
                  "clay": (1,), "bulk_density": (1,), "organic_matter": (1,), "quartz": (1,),
                  "n_factor_freezing": (1,), "n_factor_thawing": (1,)}


@dataclass(frozen=True)
class BlockTask:
    """Everything a worker needs for one block (picklable)."""

    bi: int
    bj: int
    window: tuple[int, int, int, int]  # col_off, row_off, width, height
    path: str


@dataclass(frozen=True)
class OverviewTask:
    """One overview tile (level k, tile row, tile col) of every output (picklable)."""

    k: int
    tr: int
    tc: int
    pyramid: TilePyramid


@dataclass(frozen=True)
class RunContext:
    """Static, picklable description of a run shared by all block tasks."""

    grid: TargetGrid
    layers: dict[str, InputLayer]
    config: KernelConfig
    codecs: dict[str, TileCodec]  # output -> how its tiles are stored
    overview_levels: int


@dataclass
class RunPlan:
    recipe: Recipe
    grid: TargetGrid
    layers: dict[str, InputLayer]
    config: KernelConfig
    chunk: int
    outputs: tuple[str, ...]
    band_layout: dict[str, tuple[int, ...]]
    notes: list[str] = field(default_factory=list)
    coverage: dict[str, float] = field(default_factory=dict)

    @cached_property
    def context(self) -> RunContext:
        """What every block and map writer needs (built once per plan)."""
        tile = tile_size(self.chunk)
        codecs = {name: tile_codec(OUTPUTS[name].dtype, self.recipe.compression,
                                   OUTPUTS[name].coded, tile, self.recipe.mantissa_bits)
                  for name in self.outputs}
        levels = min(overview_count(self.grid.width, self.grid.height),
                     min(c.max_levels for c in codecs.values()))
        return RunContext(self.grid, self.layers, self.config, codecs, levels)

    def blocks(self) -> list[tuple[int, int, Window]]:
        """Work blocks: chunks rounded up to whole COG tiles (see ``block_size``)."""
        return list(self.grid.blocks(block_size(self.chunk)))


@dataclass
class RunResult:
    """What a run wrote and measured."""

    output_dir: Path
    outputs: dict[str, Path]
    record_path: Path
    record: dict[str, Any]

    @property
    def statistics(self) -> dict[str, Any]:
        return self.record["outputs"]

    @property
    def counts(self) -> dict[str, int]:
        return self.record["counts"]


# --------------------------------------------------------------------------- planning


def _target_grid(recipe: Recipe, first_temperature_path: Path | None) -> TargetGrid:
    if recipe.grid is not None:
        try:
            crs = crs_from_user_input(recipe.grid.crs)
        except ValueError as err:
            raise RecipeError(f"grid.crs: {recipe.grid.crs!r} is not a CRS ({err})") from None
        res = recipe.grid.resolution
        res_xy = (float(res), float(res)) if isinstance(res, int | float) else tuple(res)
        return TargetGrid.from_bounds(crs, tuple(recipe.grid.bounds), res_xy)
    if first_temperature_path is None:
        raise RecipeError("surface_temperature is a constant: give a 'grid' "
                          "{crs, resolution, bounds} for the output")
    return grid_of(first_temperature_path, "surface_temperature")


def _layer_paths(recipe: Recipe, name: str, spec: InputSpec | None = None) -> list[Path] | None:
    """Resolved paths of input ``name`` (``spec``: its spec when not under ``inputs``)."""
    spec = spec if spec is not None else recipe.inputs.get(name)
    if spec is None or spec.path is None:
        return None
    paths = spec.path if isinstance(spec.path, list) else [spec.path]
    return [recipe.path_of(p) for p in paths]


def select_outputs(recipe: Recipe, n_years: int = 1) -> tuple[str, ...]:
    """Resolve the recipe's ``outputs`` list (``all`` = every output the recipe enables)."""
    enabled_groups = {"core"}
    if recipe.freeze_thaw.enabled:
        enabled_groups.add("freeze_thaw")
        if n_years > 1:
            enabled_groups.add("multi_year")
    if recipe.root_zone is not None:
        enabled_groups.add("root_zone")
    if recipe.thresholds is not None:
        enabled_groups.add("thresholds")
    names: list[str] = []
    for item in recipe.outputs:
        if item == "all":
            names += [n for n, o in OUTPUTS.items() if o.group in enabled_groups]
        elif item in OUTPUTS:
            names.append(item)
        else:
            import difflib

            close = difflib.get_close_matches(item, list(OUTPUTS), n=1)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            raise RecipeError(f"outputs: unknown output '{item}'{hint}; valid names: all, "
                              + ", ".join(OUTPUTS))
    names = [n for n in names if OUTPUTS[n].group == "core" or group_module(OUTPUTS[n].group)]
    disabled = [n for n in names if OUTPUTS[n].group not in enabled_groups]
    if disabled:
        need = {"freeze_thaw": "freeze_thaw: {enabled: true}",
                "multi_year": "freeze_thaw enabled and a multi-year (12 x Y bands) input",
                "root_zone": "a root_zone section", "thresholds": "a thresholds section"}
        hints = sorted({need[OUTPUTS[n].group] for n in disabled})
        raise RecipeError(f"outputs: {', '.join(disabled)} need {'; '.join(hints)} in the "
                          "recipe")
    return tuple(dict.fromkeys(names))


def plan_run(recipe: Recipe | str | Path) -> RunPlan:
    """Validate a recipe and its inputs without computing anything."""
    if not isinstance(recipe, Recipe):
        recipe = load_recipe(recipe)
    configure_gdal()
    t_paths = _layer_paths(recipe, "surface_temperature")
    grid = _target_grid(recipe, t_paths[0] if t_paths else None)

    layers: dict[str, InputLayer] = {}
    notes: list[str] = []
    specs = dict(recipe.inputs)
    specs.setdefault("bulk_density", InputSpec(value=DEFAULT_BULK_DENSITY_G_CM3,
                                               units="g cm-3"))
    specs.setdefault("organic_matter", InputSpec(value=DEFAULT_ORGANIC_MATTER_PERCENT,
                                                 units="percent"))
    if recipe.surface.kind == "air":  # n-factors: inputs (if given there) or surface keys
        for key in ("n_factor_freezing", "n_factor_thawing"):
            specs.setdefault(key, recipe.surface.n_factor_spec(key))
    coverage: dict[str, float] = {}
    for name, spec in specs.items():
        if name not in _KERNEL_INPUTS:
            continue
        kind, _, default_units = INPUT_KINDS[name]
        units = spec.units or default_units
        scale, offset = UNIT_CONVERSIONS[kind][units]
        layer = open_layer(
            name, _layer_paths(recipe, name, spec), spec.value, scale, offset, grid,
            band=spec.band, nodata=spec.nodata, expected_bands=EXPECTED_BANDS.get(name),
        )
        where = "constant" if layer.is_constant else ", ".join(s.path for s in layer.sources)
        notes += check_units(layer, units, where)
        cov = coverage_fraction(layer, grid)
        coverage[name] = cov
        if cov <= 0.0:
            raise InputError(f"input '{name}' ({where}) does not overlap the output grid "
                             f"(bounds {tuple(round(b, 3) for b in grid.bounds)} in "
                             f"{grid.crs.to_string()}); check its CRS and extent")
        if cov < 0.999:
            notes.append(f"input '{name}' covers about {cov:.0%} of the output grid; uncovered "
                         f"cells are nodata, counted as nodata_cells_in_{name} in the run "
                         "record")
        layers[name] = layer

    if recipe.surface.kind == "air":
        notes.append("surface.kind air: surface_temperature is air temperature; every output "
                     "uses the ground-surface temperature from the n-factors "
                     f"(freezing {_describe(specs['n_factor_freezing'])}, thawing "
                     f"{_describe(specs['n_factor_thawing'])})")
    n_years = layers["surface_temperature"].n_bands // 12
    outputs = select_outputs(recipe, n_years)
    thresholds = recipe.thresholds.model_dump() if recipe.thresholds else None
    extras = {
        "freeze_thaw": recipe.freeze_thaw.model_dump(),
        "surface_kind": recipe.surface.kind,
        "frost_classes": list(recipe.frost_classes),
        "n_years": n_years,
        "root_zone": recipe.root_zone.model_dump() if recipe.root_zone else None,
        "thresholds": thresholds,
        "threshold_values": list(thresholds["values"]) if thresholds else [],
    }
    config = KernelConfig(
        outputs=outputs,
        extras=extras,
        depths_m=tuple(float(d) for d in recipe.depths),
        harmonics=recipe.harmonics,
        conductivity_model=recipe.soil.conductivity_model,
        zero_amplitude_tolerance_K=recipe.zero_amplitude_tolerance,
        strict=recipe.strict,
    )
    from geothermmap.kernel import output_band_count

    layout: dict[str, tuple[int, ...]] = {}
    nxt = 1
    for name in outputs:
        n = output_band_count(name, config)
        layout[name] = tuple(range(nxt, nxt + n))
        nxt += n
    chunk = recipe.chunk or _default_chunk(layers["surface_temperature"])
    return RunPlan(recipe, grid, layers, config, chunk, outputs, layout, notes, coverage)


def _describe(spec: InputSpec) -> str:
    return f"{spec.value:g}" if spec.value is not None else str(spec.path)


_KERNEL_INPUTS = ("surface_temperature", "sand", "clay", "water_content", "bulk_density",
                  "organic_matter", "quartz", "n_factor_freezing", "n_factor_thawing")


def _default_chunk(layer: InputLayer) -> int:
    """Align to the input tiling when it is square and sensible, else 512."""
    if layer.is_constant or not layer.sources[0].same_grid:
        return DEFAULT_CHUNK
    with rasterio.open(layer.sources[0].path) as ds:
        by, bx = ds.block_shapes[0]
    if bx == by and bx % 512 == 0 and 512 <= bx <= 2048:
        return int(bx)
    return DEFAULT_CHUNK


# --------------------------------------------------------------------------- block task

_GDAL_READY = False
#: Set when a run is interrupted: block tasks still queued return at once.
CANCELLED = threading.Event()


def _read_inputs(ctx: RunContext, window: Window) -> dict[str, np.ndarray]:
    inputs = {}
    for name, layer in ctx.layers.items():
        try:
            inputs[name] = layer.read(ctx.grid, window)
        except (RasterioIOError, RasterioError) as err:
            files = ", ".join(s.path for s in layer.sources)
            raise InputError(f"input '{name}': cannot read {files} at rows "
                             f"{int(window.row_off)}..{int(window.row_off + window.height)}, "
                             f"cols {int(window.col_off)}..{int(window.col_off + window.width)}"
                             f" ({err}); the file may be truncated or corrupt") from None
    return inputs


def keep_freed_memory() -> None:
    """Let glibc's allocator reuse freed block arrays instead of unmapping them.

    Every block allocates and frees many arrays of a few MB (one float64 value per cell);
    by default glibc maps each from the kernel and unmaps it on free, so the next block
    page-faults and zeroes the same memory again (about 3 of 45 CPU seconds, mostly
    system time, in a 4096^2 run). Raising the mmap threshold to its maximum (32 MiB on
    64-bit) and the trim threshold keeps that memory in the heap. Peak memory does not
    grow: the same working set is reused. No-op where glibc is not the C library, or
    with the environment variable ``GEOTHERMMAP_KEEP_FREED_MEMORY=0``.
    """
    if os.environ.get("GEOTHERMMAP_KEEP_FREED_MEMORY", "1") == "0":
        return
    try:
        libc = ctypes.CDLL("libc.so.6")
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return
    m_trim_threshold, m_mmap_threshold = -1, -3  # <malloc.h>
    mallopt(m_mmap_threshold, 32 * 2**20)
    mallopt(m_trim_threshold, 512 * 2**20)


#: Under ``strict``: the row of the first offending cell found so far, per run (the work
#: folder), in this process. Blocks that start below it are not read: they cannot hold
#: the offender first in raster order, which is the one reported.
_STRICT_FIRST_ROW: dict[str, float] = {}
_STRICT_LOCK = threading.Lock()


def run_block(ctx: RunContext, task: BlockTask) -> dict[str, Any] | None:
    """Read, compute and write one block; return its partial statistics (or, under
    ``strict``, ``{"bounds_error": [row, col, message] or None}`` for a block that holds
    an offending cell or was skipped after one)."""
    global _GDAL_READY
    if CANCELLED.is_set():
        return None
    if not _GDAL_READY:  # once per process (cluster workers included)
        configure_gdal()
        keep_freed_memory()
        _GDAL_READY = True
    stats_path = Path(task.path + ".json")
    if is_tile_store(Path(task.path)) and stats_path.exists():  # complete from an earlier try
        try:
            return {**json.loads(stats_path.read_text()), "reused": True}
        except ValueError:
            pass  # unreadable ledger: recompute the block
    window = Window(*task.window)
    run_id = str(Path(task.path).parent)
    if int(window.row_off) > _STRICT_FIRST_ROW.get(run_id, math.inf):
        return {"bounds_error": None}  # cannot hold a cell before the offender already found
    inputs = _read_inputs(ctx, window)
    try:
        result = compute_block(inputs, ctx.config)
    except CellBoundsError as err:
        found = _bounds_error_on_grid(ctx.grid, window, err)
        with _STRICT_LOCK:
            _STRICT_FIRST_ROW[run_id] = min(found[0], _STRICT_FIRST_ROW.get(run_id, math.inf))
        return {"bounds_error": found}
    stats: dict[str, Any] = {"outputs": {}, "counts": result.counts,
                             "valid_cells": result.valid_cells,
                             "nodata_cells": result.nodata_cells}
    for name, arr in result.outputs.items():
        codes = OUTPUTS[name].codes
        stats["outputs"][name] = [_partial_stats(arr[i], codes) for i in range(arr.shape[0])]
    if CANCELLED.is_set():  # interrupted while computing: the work folder is going away
        return None
    stats_tmp = stats_path.with_name(stats_path.name + f".{os.getpid()}{PARTIAL_SUFFIX}")
    Path(task.path).parent.mkdir(parents=True, exist_ok=True)
    stats_tmp.write_text(json.dumps(stats))
    os.replace(stats_tmp, stats_path)
    write_block(Path(task.path), result.outputs, ctx.codecs, window, ctx.overview_levels)
    return stats


def _bounds_error_on_grid(grid: TargetGrid, window: Window, err: CellBoundsError) -> list:
    """[row, col, message] of a block's strict-bounds error, in grid rows and columns
    and map coordinates."""
    row = int(window.row_off) + err.row
    col = int(window.col_off) + err.col
    x, y = grid.xy(row, col)
    where = f"row {row}, col {col}, x={x:.3f}, y={y:.3f} in {grid.crs.to_string()}"
    return [row, col, str(err).replace("{where}", where)]


def scan_strict_bounds(plan: RunPlan) -> None:
    """For ``check`` under ``strict``: read every block once (no model beyond the soil
    properties) and raise as ``run`` would for the offending cell first in raster order.
    Blocks after the block row of the first offender are not read."""
    import dataclasses

    ctx = plan.context
    config = dataclasses.replace(plan.config, outputs=("damping_depth",))
    found: list[list] = []
    for _, _, window in plan.blocks():
        if found and int(window.row_off) > found[0][0]:
            break
        try:
            compute_block(_read_inputs(ctx, window), config)
        except CellBoundsError as err:
            found.append(_bounds_error_on_grid(plan.grid, window, err))
    _raise_first_bounds_error(found)


def run_overview(ctx: RunContext, task: OverviewTask, *blocks_done: Any) -> None:
    """Compress one overview tile of every output; ``blocks_done``: the block tasks it
    reads (their results, passed only so that the engines order the tasks)."""
    if CANCELLED.is_set() or any(isinstance(b, dict) and "bounds_error" in b
                                 for b in blocks_done):
        return  # a strict run that stops: some of its blocks were never written
    if is_tile_store(task.pyramid.overview_store(task.k, task.tr, task.tc)):
        return  # complete from an earlier attempt (--resume)
    write_overview(task.pyramid, task.k, task.tr, task.tc, ctx.codecs)


def overview_tasks(tasks: list[BlockTask], pyramid: TilePyramid
                   ) -> list[tuple[OverviewTask, list[int]]]:
    """Overview tasks, each with the indices of the block tasks it reads."""
    index = {(t.bi, t.bj): i for i, t in enumerate(tasks)}
    out = []
    for k, tr, tc in pyramid.overview_tiles():
        deps = sorted({index[pyramid.block_of(r, c)] for r, c in pyramid.sources(k, tr, tc)})
        out.append((OverviewTask(k, tr, tc, pyramid), deps))
    return out


@njit(cache=True, nogil=True)
def _stats_pass(a, codes):
    """Count, sum, sum of squares, min, max of the finite values that are no code value,
    and the count of each code value, in one float64 pass."""
    n = 0
    total = 0.0
    squares = 0.0
    lo = math.inf
    hi = -math.inf
    coded = np.zeros(codes.shape[0], dtype=np.int64)
    for v in a.ravel():
        x = np.float64(v)
        if math.isfinite(x):
            is_code = False
            for k in range(codes.shape[0]):
                if x == codes[k]:
                    coded[k] += 1
                    is_code = True
            if is_code:
                continue
            n += 1
            total += x
            squares += x * x
            lo = min(lo, x)
            hi = max(hi, x)
    return n, total, squares, lo, hi, coded


def _partial_stats(a: np.ndarray, codes: tuple[tuple[float, str], ...] = ()) -> list:
    """[count, sum, sum of squares, min, max, [count of each code value]] of one band:
    code values (e.g. frost_depth -1) are counted apart, not averaged."""
    values = np.array([c for c, _ in codes], dtype=np.float64)
    n, total, squares, lo, hi, coded = _stats_pass(np.ascontiguousarray(a), values)
    return [int(n), float(total), float(squares), float(lo), float(hi),
            [int(k) for k in coded]]


def _combine(parts: list[dict[str, Any]], outputs: tuple[str, ...]) -> tuple[dict, dict]:
    totals: dict[str, list[list[float]]] = {}
    counts = dict.fromkeys(BOUNDS_COUNTERS, 0)
    counts["valid_cells"] = 0
    counts["nodata_cells"] = 0
    counts["blocks_reused"] = 0
    for p in parts:
        counts["blocks_reused"] += int(p.get("reused", False))
        counts["valid_cells"] += p["valid_cells"]
        counts["nodata_cells"] += p["nodata_cells"]
        for k, v in p["counts"].items():
            counts[k] = max(counts.get(k, 0), v) if k.endswith("_max") else counts.get(k, 0) + v
        for name in outputs:
            bands = p["outputs"][name]
            n_codes = len(OUTPUTS[name].codes)
            acc = totals.setdefault(name, [[0, 0.0, 0.0, math.inf, -math.inf, [0] * n_codes]
                                           for _ in bands])
            for a, b in zip(acc, bands, strict=True):
                a[0] += b[0]
                a[1] += b[1]
                a[2] += b[2]
                a[3] = min(a[3], b[3])
                a[4] = max(a[4], b[4])
                coded = b[5] if len(b) > 5 else [0] * n_codes  # block files of old runs
                a[5] = [x + y for x, y in zip(a[5], coded, strict=True)]
    summary = {}
    for name, bands in totals.items():
        rows = []
        for n, s, ss, lo, hi, coded in bands:
            n = int(n)
            mean = s / n if n else None
            std = math.sqrt(max(ss / n - mean * mean, 0.0)) if n else None
            row = {"count": n, "mean": mean, "std": std,
                   "min": lo if n else None, "max": hi if n else None}
            row.update({f"{code_name}_cells": k
                        for (_, code_name), k in zip(OUTPUTS[name].codes, coded, strict=True)})
            rows.append(row)
        summary[name] = rows
    return summary, counts


# --------------------------------------------------------------------------- engines


def _execute(tasks: list[BlockTask], ctx: RunContext, *, workers: int | None,
             scheduler: str | None, progress: Callable[[int], None] | None,
             overviews: Sequence[tuple[OverviewTask, list[int]]] = ()) -> list[dict]:
    """Run block tasks, and overview tasks after the blocks they read, on the chosen dask
    engine; returns the block results in task order."""
    import dask

    if scheduler is None and workers is None:
        from concurrent.futures import ThreadPoolExecutor

        from dask.callbacks import Callback

        delayed = [dask.delayed(run_block, pure=False)(ctx, t) for t in tasks]
        ovr = [dask.delayed(run_overview, pure=False)(ctx, o, *(delayed[i] for i in deps))
               for o, deps in overviews]

        class _Tick(Callback):
            def _posttask(self, key, result, dsk, state, id):  # noqa: A002
                if progress is not None and isinstance(result, dict) and "outputs" in result:
                    progress(1)

        # our own pool, so that an interrupt can wait for running tasks to finish
        pool = ThreadPoolExecutor(max_workers=os.cpu_count() or 1,
                                  thread_name_prefix="geothermmap")
        try:
            with _Tick():
                done = dask.compute(*delayed, *ovr, scheduler="threads", pool=pool)
                return list(done[:len(delayed)])
        except BaseException:
            CANCELLED.set()
            raise
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
            CANCELLED.clear()
    from distributed import Client, LocalCluster, as_completed

    cluster = None
    try:
        if scheduler is not None:
            client = Client(scheduler, timeout="10s")
        else:
            cluster = LocalCluster(n_workers=int(workers or 1), threads_per_worker=1,
                                   processes=True, host="127.0.0.1", dashboard_address=None)
            client = Client(cluster)
    except (OSError, ValueError, TypeError) as err:  # unreachable, or not an address
        raise UserError(f"cannot reach the dask scheduler {scheduler!r}: {err}; give an "
                        "address like tcp://HOST:PORT") from None
    futures: list = []
    try:
        futures = client.map(run_block, [ctx] * len(tasks), tasks, pure=False)
        index = {f.key: i for i, f in enumerate(futures)}
        futures += [client.submit(run_overview, ctx, o, *(futures[i] for i in deps),
                                  pure=False) for o, deps in overviews]
        results: list[dict | None] = [None] * len(tasks)
        for fut in as_completed(futures):
            result = fut.result()
            if fut.key in index:
                results[index[fut.key]] = result
                if progress is not None:
                    progress(1)
        return results  # type: ignore[return-value]
    except BaseException:
        import logging

        # cancelled tasks on a stopping cluster log CancelledError noise: the user has
        # already been told why the run stopped
        logging.getLogger("distributed").setLevel(logging.CRITICAL)
        client.cancel(futures)
        raise
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


# --------------------------------------------------------------------------- the run


def _check_output_dir(out: Path, overwrite: bool) -> dict | None:
    """Refuse folders that hold files geothermmap did not write (unless ``overwrite``)."""
    previous = record.read(out / RECORD_NAME)
    if not out.exists():
        return None
    if not out.is_dir():
        raise UserError(f"output path {out} exists and is not a folder")
    ours = set(TOOL_FILES)
    if previous:  # complete maps, and maps an interrupted run was writing
        ours |= set(previous.get("files", [])) | set(previous.get("pending_files", []))
    foreign = sorted(p.name for p in out.iterdir()
                     if p.name not in ours and not _is_partial(p.name))
    if foreign and not overwrite:
        shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
        raise UserError(f"output folder {out} holds files geothermmap did not write ({shown}); "
                        "choose another folder with -o, or pass --overwrite")
    return previous


def run_recipe(
    recipe: Recipe | str | Path,
    output_dir: str | Path,
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    resume: bool = False,
    overwrite: bool = False,
    progress: Callable[[str, int, int], None] | None = None,
) -> RunResult:
    """Run a recipe: compute every requested output and write COGs plus a run record.

    Parameters
    ----------
    recipe
        A :class:`Recipe` or the path of a YAML recipe.
    output_dir
        Folder for the outputs (created if needed).
    workers
        Start a local dask.distributed cluster with this many worker processes.
    scheduler
        Address of an existing dask.distributed scheduler (``tcp://host:port``).
    resume
        Keep outputs and blocks already complete for the same recipe and inputs.
    overwrite
        Allow writing into a folder that holds files geothermmap did not write.
    progress
        Callback ``(stage, done, total)`` for progress reporting.
    """
    t0 = time.perf_counter()
    plan = plan_run(recipe)
    out = Path(output_dir).resolve()
    previous = _check_output_dir(out, overwrite)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise UserError(f"cannot create the output folder {out}: {err.strerror or err}; "
                        "choose another folder with -o") from None
    _remove_partials(out)

    t_hash = time.perf_counter()
    checksums = record.input_checksums(plan)
    run_key = record.run_key(plan, checksums)
    timings = {"plan_s": t_hash - t0, "checksums_s": time.perf_counter() - t_hash}

    done: dict[str, dict] = {}  # complete maps of an earlier run of the same recipe and inputs
    if resume and previous and previous.get("run_key_base") == run_key["base"]:
        for name, entry in previous.get("outputs", {}).items():
            if name in OUTPUTS and _intact(out / entry["file"], entry.get("sha256")):
                done[name] = entry  # kept (also when this run asks for fewer outputs)
    if previous:  # a fresh run replaces the earlier run's outputs
        kept = {e["file"] for e in done.values()}
        replaced = 0
        for fname in set(previous.get("files", [])) | set(previous.get("pending_files", [])):
            if fname not in kept:
                (out / fname).unlink(missing_ok=True)
                replaced += 1
        if replaced:  # pictures, report and summaries of the earlier maps would mislead
            _remove_derived(out)

    work = out / WORK_DIR_NAME / run_key["full"]
    if (out / WORK_DIR_NAME).exists():  # blocks of another recipe or input are stale
        for stale in (out / WORK_DIR_NAME).iterdir():
            if not resume or stale.name != run_key["full"]:
                shutil.rmtree(stale, ignore_errors=True)
    ctx = plan.context
    blocks = plan.blocks()
    tasks = [BlockTask(bi, bj, (int(w.col_off), int(w.row_off), int(w.width), int(w.height)),
                       str(block_path(work, bi, bj))) for bi, bj, w in blocks]

    rec = record.new_record(plan, out, checksums, run_key, timings)
    if done and previous:
        rec["counts"] = previous.get("counts", {})
    rec["outputs"] = dict(done)
    rec["files"] = sorted({e["file"] for e in done.values()})
    record.write(out / RECORD_NAME, rec)

    todo = [n for n in plan.outputs if n not in done]
    try:
        if todo:
            t1 = time.perf_counter()
            counter = [0]

            def tick(n: int) -> None:
                counter[0] += n
                if progress:
                    progress("blocks", counter[0], len(tasks))

            if progress:
                progress("blocks", 0, len(tasks))
            pyramid = TilePyramid(str(work), plan.grid.width, plan.grid.height,
                                  tile_size(plan.chunk), block_size(plan.chunk),
                                  ctx.overview_levels)
            parts = _execute(tasks, ctx, workers=workers, scheduler=scheduler, progress=tick,
                             overviews=overview_tasks(tasks, pyramid))
            timings["compute_s"] = time.perf_counter() - t1
            _raise_first_bounds_error([p["bounds_error"] for p in parts
                                       if p and p.get("bounds_error")])
            summary, counts = _combine(parts, plan.outputs)
            rec["counts"] = counts
            rec["counts"]["uncovered_input_fraction"] = {
                k: round(1.0 - v, 6) for k, v in plan.coverage.items() if v < 0.999}
            t2 = time.perf_counter()
            # maps are renamed into place before the record lists them: name them first,
            # so that a rerun after an interrupt knows them as this tool's files
            rec["pending_files"] = sorted(OUTPUTS[n].filename for n in todo)
            record.write(out / RECORD_NAME, rec)
            if progress:
                progress("maps", 0, len(todo))
            # two outputs at a time: a byte copy of tiles the tasks compressed, bound by
            # file writes that release the GIL
            from concurrent.futures import ThreadPoolExecutor

            pool = ThreadPoolExecutor(2, thread_name_prefix="geothermmap-cog")
            try:
                written = pool.map(lambda n: _write_output(plan, n, out, pyramid), todo)
                for i, (name, path) in enumerate(zip(todo, written, strict=True), start=1):
                    _record_output(plan, rec, name, path, summary[name], counts, out)
                    if progress:
                        progress("maps", i, len(todo))
            finally:  # an interrupt waits for running copies, so cleanup sees them all
                pool.shutdown(wait=True, cancel_futures=True)
            rec.pop("pending_files", None)
            order = [n for n in plan.outputs if n in rec["outputs"]]
            order += [n for n in rec["outputs"] if n not in order]  # kept from a resume
            rec["outputs"] = {n: rec["outputs"][n] for n in order}
            if progress:
                progress("maps", len(todo), len(todo))
            timings["write_s"] = time.perf_counter() - t2
        timings["total_s"] = time.perf_counter() - t0
        rec["timings"] = timings
        rec["status"] = "complete"
        record.write(out / RECORD_NAME, rec)
    except KeyboardInterrupt:
        # an interrupt leaves no temporary files: partial maps and block files go;
        # maps already complete stay and are listed in the run record
        _remove_partials(out)
        _remove_work_dir(out)
        _close_record(out, rec, "interrupted", "stopped by an interrupt")
        raise
    except BaseException as err:
        _remove_partials(out)  # block files stay: --resume reuses them
        _close_record(out, rec, "failed", str(err) or type(err).__name__)
        raise
    finally:
        close_cached_handles()
    shutil.rmtree(out / WORK_DIR_NAME, ignore_errors=True)
    paths = {n: out / OUTPUTS[n].filename for n in plan.outputs}
    return RunResult(out, paths, out / RECORD_NAME, rec)


def _raise_first_bounds_error(found: list[list]) -> None:
    """Under ``strict``: raise for the offending cell first in raster order of the grid
    (the same cell whatever order the blocks ran in); ``found``: [row, col, message] of
    each block's first offender."""
    if found:
        raise PhysicalBoundsError(min(found)[2])


def _remove_derived(out: Path) -> None:
    """Remove what earlier commands made from the maps of this folder (quicklooks, the
    report, zone summaries): they describe maps that are being replaced."""
    for name in DERIVED_FILES:
        path = out / name
        if path.is_dir():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)


def _close_record(out: Path, rec: dict, status: str, reason: str) -> None:
    """Mark the run record of a run that stopped early, so that no record says "running"
    after the process has gone; it still lists only the complete outputs."""
    rec["status"] = status
    rec["error"] = reason
    try:
        record.write(out / RECORD_NAME, rec)
    except OSError:
        pass  # the folder went away or filled up: the original error is what matters


def _remove_work_dir(out: Path) -> None:
    """Remove the block files; again after a pause if a task still finishing (e.g. on a
    cluster worker) wrote one while the folder was being removed."""
    for pause in (0.0, 0.5, 2.0):
        time.sleep(pause)
        shutil.rmtree(out / WORK_DIR_NAME, ignore_errors=True)
        if not (out / WORK_DIR_NAME).exists():
            return


def _intact(path: Path, sha256: str | None) -> bool:
    """Whether a map an earlier run completed is still the file it recorded."""
    return path.is_file() and (sha256 is None or record.sha256_file(path) == sha256)


def _record_output(plan: RunPlan, rec: dict, name: str, path: Path, summary: dict,
                   counts: dict, out: Path) -> None:
    """Add a complete output to the run record and write the record."""
    entry = record.output_entry(plan, name, path, summary)
    entry["input_corrections"] = {k: counts.get(k, 0) for k in BOUNDS_COUNTERS}
    rec["outputs"][name] = entry
    rec["files"] = sorted({e["file"] for e in rec["outputs"].values()})
    record.write(out / RECORD_NAME, rec)  # lists only complete outputs


def _is_partial(name: str) -> bool:
    return name.startswith(".") and PARTIAL_SUFFIX in name


def _remove_partials(out: Path) -> None:
    """Remove temporary files of an unfinished write (never under a final name), in the
    folder and its quicklook folder."""
    for folder in (out, out / "quicklook"):
        if folder.is_dir():
            for p in folder.iterdir():
                if p.is_file() and _is_partial(p.name):
                    p.unlink(missing_ok=True)


def band_descriptions(plan: RunPlan, name: str) -> list[tuple[str, dict[str, str]]]:
    info = OUTPUTS[name]
    if info.per_depth:
        return [(f"depth {d:g} m", {"depth_m": f"{d:g}"}) for d in plan.config.depths_m]
    if info.per_threshold:
        vals = plan.config.extras.get("threshold_values", ())
        return [(f"threshold {v:g} degC", {"threshold_degC": f"{v:g}"}) for v in vals]
    if info.per_year:
        n = int(plan.config.extras.get("n_years", 1))
        return [(f"winter {i + 1} (its middle in year {i + 1} of the record)",
                 {"winter": str(i + 1)}) for i in range(n)]
    return [(info.description.split(".")[0], {})]


def output_tags(plan: RunPlan, name: str) -> dict[str, str]:
    info = OUTPUTS[name]
    tags = {
        "units": info.units,
        "description": info.description,
        "long_name": name,
        "software": f"geothermmap {record.package_version()}",
        "recipe": plan.recipe.name,
        "conductivity_model": plan.config.conductivity_model,
        "harmonics": str(plan.config.harmonics),
    }
    if info.per_depth:
        tags["depths_m"] = ",".join(f"{d:g}" for d in plan.config.depths_m)
    if plan.recipe.mantissa_bits is not None and info.dtype == "float32":
        tags["mantissa_bits"] = (f"{plan.recipe.mantissa_bits} of 23: values rounded to "
                                 f"a relative {2.0 ** -(plan.recipe.mantissa_bits + 1):.1e}")
    if info.frost:
        tags["caution"] = FROST_CAUTION
    if plan.recipe.surface.kind == "air":
        tags["surface"] = ("ground surface temperature from the air-temperature input with "
                           "the freezing and thawing n-factors (daily values; periodic outputs "
                           "use the harmonic refit of that daily cycle)")
    module = group_module(info.group) if info.group != "core" else None
    if module is not None and hasattr(module, "tags"):
        tags.update(module.tags(plan.config).get(name, {}))
    return tags


def _write_output(plan: RunPlan, name: str, out: Path, pyramid: TilePyramid) -> Path:
    info = OUTPUTS[name]
    descriptions, band_tags = zip(*band_descriptions(plan, name), strict=True)
    return write_cog(out / info.filename, name, plan.grid, pyramid, descriptions,
                     band_tags, plan.context.codecs[name], units=info.units,
                     tags=output_tags(plan, name))
