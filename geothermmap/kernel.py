"""The per-cell model of a run, applied to one block of aligned inputs (numpy only, no I/O).

This module chains the physics functions (soil properties -> harmonic fit -> periodic
solution) and applies the recipe's physical-bounds policy. It holds no formulas of its
own: every equation lives in ``geothermmap.physics``. Work is done on the flattened valid
cells of a block only, so nodata (a lake, the edge of a source) costs nothing.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from geothermmap.errors import PhysicalBoundsError
from geothermmap.outputs import OUTPUTS
from geothermmap.physics import frost, harmonics, periodic, properties

#: Names of the bounds counters reported in the run record.
BOUNDS_COUNTERS = (
    "negative_values_clipped",
    "texture_sum_above_100_percent_rescaled",
    "fraction_above_1_clipped",
    "bulk_density_above_particle_density_masked",
    "water_above_porosity_clipped",
)


@dataclass(frozen=True)
class KernelConfig:
    """What the kernel computes for every cell (all picklable, for cluster workers)."""

    outputs: tuple[str, ...]
    depths_m: tuple[float, ...] = (0.1, 0.5, 1.0, 2.0)
    harmonics: int = 2
    conductivity_model: str = "johansen"
    zero_amplitude_tolerance_K: float = 0.1
    strict: bool = False
    extras: dict = field(default_factory=dict, hash=False, compare=False)


@dataclass
class KernelResult:
    outputs: dict[str, np.ndarray]  # name -> (bands, rows, cols) float32
    counts: dict[str, int]
    valid_cells: int
    nodata_cells: int


@dataclass
class CellState:
    """Everything an output group needs about the valid cells of a block (1-D over cells).

    ``inputs``: bounds-corrected canonical inputs (sand, clay, water_content, bulk_density,
    organic_matter, optional quartz, n_factor_freezing, n_factor_thawing); ``series``: the
    surface-temperature series as given, (12 x years, n) [degC]; ``monthly``: its monthly
    climatology (12, n); ``props``: unfrozen soil properties; ``fit``: harmonic fit of the
    ground-surface cycle (of ``monthly``, or with ``surface.kind: air`` of the air cycle
    turned into ground-surface temperature by the n-factors); ``air_fit``: the harmonic
    fit of ``monthly`` when that is air temperature, else None; ``damping_depth_m``:
    annual damping depth (n,).
    """

    inputs: dict[str, np.ndarray]
    series: np.ndarray
    monthly: np.ndarray
    props: dict[str, np.ndarray]
    fit: Any
    damping_depth_m: np.ndarray
    config: KernelConfig
    air_fit: Any = None


#: Output groups computed by separate modules, each exposing
#: ``compute(state: CellState, wanted: set[str]) -> dict[str, ndarray (bands, n) or (n,)]``
#: (an optional ``"_counts"`` entry holds run counters for the run record; names ending in
#: ``_max`` are combined over blocks by maximum, others by sum)
#: and optionally ``tags(config) -> dict[output, dict[str, str]]``.
GROUP_MODULES = {
    "freeze_thaw": "geothermmap.kernel_frost",
    "multi_year": "geothermmap.kernel_frost",
    "root_zone": "geothermmap.kernel_rootzone",
    "thresholds": "geothermmap.kernel_rootzone",
}


def group_module(group: str):
    """The module computing an output group, or None if this installation lacks it."""
    name = GROUP_MODULES.get(group)
    if name is None:
        return None
    try:
        return importlib.import_module(name)
    except ModuleNotFoundError:
        return None


class CellBoundsError(PhysicalBoundsError):
    """A bounds violation under ``strict``, with the block-local cell of the first offender."""

    def __init__(self, message: str, row: int, col: int):
        super().__init__(message)
        self.row = row
        self.col = col


def output_band_count(name: str, config: KernelConfig) -> int:
    info = OUTPUTS[name]
    if info.per_depth:
        return len(config.depths_m)
    if info.per_threshold:
        return len(config.extras.get("threshold_values", ()))
    if info.per_year:
        return int(config.extras.get("n_years", 1))
    return 1


def apply_bounds(
    cells: dict[str, np.ndarray],
    strict: bool,
    valid_index: np.ndarray,
    shape: tuple[int, int],
) -> tuple[dict[str, np.ndarray], dict[str, int], np.ndarray]:
    """Check inputs against physical bounds; clip, rescale or mask as documented.

    Returns the corrected cells, the counters, and a keep-mask (False = masked cell).
    Under ``strict`` nothing is corrected: every check runs on the values as given and
    the offending cell first in raster order (of any check) raises, with its
    block-local cell.
    """
    counts = dict.fromkeys(BOUNDS_COUNTERS, 0)
    out = dict(cells)
    # (first offending valid-cell position, check order, what): at one cell the check
    # made first (e.g. a fraction above 100 % before the texture sum it causes) is named
    offenders: list[tuple[int, int, str]] = []

    def violation(name: str, mask: np.ndarray, what: str) -> int:
        n = int(np.count_nonzero(mask))
        counts[name] += n
        if strict:
            if n:
                offenders.append((int(np.argmax(mask)), len(offenders), what))
            return 0  # strict: no corrections, the block raises below
        return n  # the corrections below only run where there is something to correct

    for key in ("sand", "clay", "water_content", "organic_matter", "quartz"):
        if key in out:
            neg = out[key] < 0
            if violation("negative_values_clipped", neg, f"negative {key}"):
                out[key] = np.where(neg, 0.0, out[key])
    for key in ("sand", "clay", "organic_matter", "quartz"):
        if key in out:
            big = out[key] > 1
            if violation("fraction_above_1_clipped", big, f"{key} above 100 %"):
                out[key] = np.where(big, 1.0, out[key])
    total = out["sand"] + out["clay"]
    over = total > 1.0
    if violation("texture_sum_above_100_percent_rescaled", over, "sand + clay above 100 %"):
        scale = np.where(over, 1.0 / np.where(over, total, 1.0), 1.0)
        out["sand"] = out["sand"] * scale
        out["clay"] = out["clay"] * scale

    rho_s = properties.particle_density(out["organic_matter"])
    too_dense = out["bulk_density"] >= rho_s
    n_dense = violation("bulk_density_above_particle_density_masked", too_dense,
                        "bulk density at or above particle density")
    keep = ~too_dense
    if n_dense:  # masked cells get a harmless density so the property models see numbers
        out["bulk_density"] = np.where(keep, out["bulk_density"], 0.5 * rho_s)
    phi = properties.porosity(out["bulk_density"], rho_s)
    wet = out["water_content"] > phi
    violation("water_above_porosity_clipped", wet & keep, "water content above porosity")
    if not strict and wet.any():  # masked cells too: the property models see numbers
        out["water_content"] = np.where(wet, phi, out["water_content"])
    if offenders:
        position, _, what = min(offenders)
        flat = valid_index[position]
        r, c = (int(v) for v in np.unravel_index(flat, shape))
        raise CellBoundsError(f"{what} (first at {{where}}); fix the input or set "
                              "strict: false to clip and count", r, c)
    return out, counts, keep


def compute_block(inputs: dict[str, np.ndarray], config: KernelConfig) -> KernelResult:
    """Compute every requested output for one block.

    Parameters
    ----------
    inputs
        Aligned inputs in canonical units, each (bands, rows, cols) float32 with NaN for
        nodata: ``surface_temperature`` (12 or 12 x years bands) [degC], ``sand``, ``clay``
        [1], ``water_content`` (1 or 12 bands) [m3 m-3], ``bulk_density`` [kg m-3],
        ``organic_matter`` [1], optional ``quartz`` [1].
    config
        Depths, harmonics, conductivity model, outputs, bounds policy.
    """
    t_surf = inputs["surface_temperature"]
    shape = t_surf.shape[1:]
    n_months = t_surf.shape[0]
    monthly = t_surf if n_months == 12 else t_surf.reshape(n_months // 12, 12, *shape).mean(axis=0)
    water = inputs["water_content"]
    water = water.mean(axis=0) if water.shape[0] > 1 else water[0]
    fields = {
        "sand": inputs["sand"][0],
        "clay": inputs["clay"][0],
        "water_content": water,
        "bulk_density": inputs["bulk_density"][0],
        "organic_matter": inputs["organic_matter"][0],
    }
    if "quartz" in inputs:
        fields["quartz"] = inputs["quartz"][0]

    valid = np.all(np.isfinite(t_surf), axis=0)
    # cells each input leaves without data (outside its coverage, or its own nodata)
    missing = {"surface_temperature": valid.size - int(np.count_nonzero(valid))}
    extra = {k: inputs[k][0] for k in ("n_factor_freezing", "n_factor_thawing") if k in inputs}
    for key, v in {**fields, **extra}.items():
        finite = np.isfinite(v)
        missing[key] = finite.size - int(np.count_nonzero(finite))
        valid &= finite
    valid_index = np.flatnonzero(valid)
    n_valid = valid_index.size
    every = n_valid == valid.size  # no nodata in the block: views instead of gathers

    def take(a: np.ndarray) -> np.ndarray:  # (..., rows, cols) -> (..., valid cells)
        flat = a.reshape(*a.shape[:-2], -1)
        return flat if every else flat[..., valid_index]

    outputs = {
        name: np.full((output_band_count(name, config), *shape), np.nan, dtype=np.float32)
        for name in config.outputs
    }
    counts = dict.fromkeys(BOUNDS_COUNTERS, 0)
    counts.update({f"nodata_cells_in_{k}": n for k, n in missing.items() if n})
    if n_valid == 0:
        return KernelResult(outputs, counts, 0, int(valid.size))

    cells = {k: take(v).astype(np.float64) for k, v in fields.items()}
    cells, bounds_counts, keep = apply_bounds(cells, config.strict, valid_index, shape)
    counts.update(bounds_counts)
    monthly_cells = take(monthly).astype(np.float64)
    for key in ("n_factor_freezing", "n_factor_thawing"):
        if key in inputs:
            cells[key] = take(inputs[key][0]).astype(np.float64)

    props = properties.soil_thermal_properties(
        cells["sand"], cells["clay"], cells["water_content"], cells["bulk_density"],
        cells["organic_matter"], cells.get("quartz"), model=config.conductivity_model,
    )
    fit = harmonics.fit_harmonics(monthly_cells, config.harmonics)
    air_fit = None
    if config.extras.get("surface_kind") == "air":  # every output refers to the ground
        air_fit = fit
        fit = frost.ground_surface_harmonics(
            air_fit, cells["n_factor_freezing"], cells["n_factor_thawing"])
    d1 = periodic.damping_depth(props["diffusivity_m2_s"])
    d1 = np.where(keep, d1, np.nan)

    values: dict[str, np.ndarray] = {}
    wanted = set(config.outputs)
    extremes = bool(wanted & {"t_min", "t_max", "doy_min", "doy_max"})
    if extremes or wanted & {"t_mean", "amplitude", "phase_lag"}:
        stats = periodic.depth_statistics(fit, d1, np.asarray(config.depths_m), extremes)
        values.update({k: stats[k] for k in stats if k in wanted})

    def a1() -> np.ndarray:  # annual surface amplitude, only for the outputs that use it
        return harmonics.amplitude(fit)[0]

    per_cell = {
        "damping_depth": lambda: d1,
        "conductivity": lambda: props["conductivity_w_mk"],
        "heat_capacity": lambda: props["heat_capacity_j_m3k"],
        "diffusivity": lambda: props["diffusivity_m2_s"],
        "zero_amplitude_depth": lambda: periodic.zero_amplitude_depth(
            a1(), d1, config.zero_amplitude_tolerance_K),
        "surface_heat_flux_amplitude": lambda: periodic.surface_heat_flux_amplitude(
            a1(), props["conductivity_w_mk"], props["heat_capacity_j_m3k"]),
        "frost_depth": lambda: periodic.frost_depth_conduction(fit, d1),
    }
    for name, fn in per_cell.items():
        if name in wanted:
            values[name] = fn()

    groups = {OUTPUTS[n].group for n in wanted} - {"core"}
    if groups:
        state = CellState(
            inputs=cells,
            series=take(t_surf).astype(np.float64),
            monthly=monthly_cells, props=props, fit=fit, damping_depth_m=d1, config=config,
            air_fit=air_fit)
        done: set[str] = set()
        for group in sorted(groups):
            module = group_module(group)
            if module is None or module.__name__ in done:
                continue
            done.add(module.__name__)
            group_values = module.compute(state, wanted)
            for key, value in group_values.pop("_counts", {}).items():
                counts[key] = counts.get(key, 0) + value  # "_max" keys: see pipeline
            values.update({k: v for k, v in group_values.items() if k in wanted})

    keep_all = bool(keep.all())
    for name, arr in values.items():
        arr = np.asarray(arr)
        if not keep_all:
            arr = np.where(keep, arr, np.nan)  # masked cells are nodata in every output
        target = outputs[name].reshape(outputs[name].shape[0], -1)
        arr = arr.reshape(target.shape[0], -1)
        if every:
            target[...] = arr  # cast to float32 on assignment
        else:
            target[:, valid_index] = arr
    n_masked = int(np.count_nonzero(~keep))
    return KernelResult(outputs, counts, n_valid - n_masked, int(valid.size) - n_valid + n_masked)
