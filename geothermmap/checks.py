"""Plausibility checks of inputs against their declared units, on a decimated sample.

These catch the common silent mistakes (Kelvin declared as degC, fractions declared as
percent, water content in percent declared as m3 m-3) before any computation. They are
errors whatever ``strict`` says: a wrong unit makes every output wrong.
"""

from __future__ import annotations

import warnings

import numpy as np
from rasterio.errors import RasterioError

from geothermmap.errors import InputError
from geothermmap.raster.inputs import SAMPLE_BUDGET_CELLS, InputLayer, sample_values


def _finite(values: np.ndarray) -> np.ndarray:
    v = np.asarray(values, dtype=np.float64).ravel()
    return v[np.isfinite(v)]


def check_units(layer: InputLayer, declared_units: str, where: str) -> list[str]:
    """Raise InputError if sampled values contradict the declared units; return warnings."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        try:
            v = _finite(sample_values(layer))
            if v.size == 0:  # the sampled blocks are all nodata: look wider before failing
                v = _finite(sample_values(layer, budget_cells=64 * SAMPLE_BUDGET_CELLS))
        except RasterioError as err:
            raise InputError(f"input '{layer.name}' ({where}): cannot read the raster ({err}); "
                             "the file may be truncated or corrupt") from None
    notes: list[str] = []
    if v.size == 0:
        raise InputError(f"input '{layer.name}' ({where}): no valid values (all nodata)")
    lo, hi = float(v.min()), float(v.max())
    name = layer.name
    if name == "surface_temperature":
        if declared_units in {"degC", "deg_C", "celsius", "degree_Celsius"} and lo > 150:
            raise InputError(f"input '{name}' ({where}): values {lo:.1f}..{hi:.1f} are not "
                             "degC: Kelvin (set units: K), or tenths of a degree without a "
                             "scale tag (set units: '0.1 degC')")
        if declared_units in {"K", "kelvin"} and hi < -100:
            raise InputError(f"input '{name}' ({where}): values look like degC but units are "
                             "declared K; set units: degC")
        if declared_units in {"K", "kelvin"} and hi < -20:
            notes.append(f"input '{name}': every sampled month is below {hi:.1f} degC; if the "
                         "values are tenths of a degree Celsius, not Kelvin, set units: "
                         "'0.1 degC'")
        if lo < -95 or hi > 75:
            raise InputError(f"input '{name}' ({where}): temperatures {lo:.1f}..{hi:.1f} degC "
                             "are outside the range of ground-surface climates; check the "
                             "units and nodata value")
    elif name in {"sand", "clay"}:
        if declared_units in {"percent", "%"} and 0 < hi <= 1.0 / 100.0 + 1e-9:
            raise InputError(f"input '{name}' ({where}): values 0..{hi * 100:.3g} look like "
                             "fractions (0..1) but units are declared percent; set units: '1'")
        if declared_units in {"percent", "%"} and hi > 1.5:
            raise InputError(f"input '{name}' ({where}): values up to {hi * 100:.4g} % exceed "
                             "100 %; if they are g kg-1 (0..1000, as many soil grids store "
                             "texture), set units: 'g kg-1'")
        if declared_units == "1" and hi > 1.5:
            raise InputError(f"input '{name}' ({where}): values up to {hi:.3g} look like "
                             "percent but units are declared '1' (fraction); set units: percent")
    elif name == "water_content":
        if hi > 1.0:
            raise InputError(f"input '{name}' ({where}): volumetric water content up to "
                             f"{hi:.3g} m3 m-3 is above 1; if the values are percent, set "
                             "units: percent")
    elif name == "bulk_density":
        if hi > 3000 or lo < 30:
            raise InputError(f"input '{name}' ({where}): bulk density {lo:.4g}..{hi:.4g} kg m-3 "
                             "is implausible for soil; check the declared units (g cm-3 or "
                             "kg m-3)")
    elif name in {"n_factor_freezing", "n_factor_thawing"}:
        if lo <= 0.0 or hi >= 10.0:
            raise InputError(f"input '{name}' ({where}): n-factors {lo:.3g}..{hi:.3g} are not "
                             "ratios of surface to air degree-days (0 < n < 10, typically "
                             "0.2..2.5); check the file and its units")
    elif name == "organic_matter" and declared_units in {"percent", "%"} and 0 < hi <= 0.01:
        notes.append(f"input '{name}': all values at or below 1 % organic matter; if they are "
                     "fractions, declare units: '1'")
    return notes
