"""Freeze-thaw and multi-year frost outputs of one block (numpy only, no I/O).

Chains the physics functions of :mod:`geothermmap.physics.freezethaw` and
:mod:`geothermmap.physics.frost` for the valid cells of a block; no formulas here.

Conventions (also written into the output tags):

* ``surface.kind == air``: the daily air series is turned into ground-surface
  temperature with the n-factors (:func:`frost.surface_temperature_n_factor`) before
  anything else; every frost output refers to the ground surface. (The periodic
  outputs of the core use :func:`frost.ground_surface_harmonics` of the same series.)
* Forcing: a 12-band climatology is forced with the daily series reconstructed from
  its harmonic fit (one periodic year of 365 steps of 365.25/365 d); a 12 x Y series
  with :func:`freezethaw.daily_forcing_from_monthly` (365-day years, 1-d steps).
* Winters: for a multi-year input of Y years, cells whose coldest climatological month
  is October..March (northern-hemisphere winter) use freezing seasons from July 1st to
  June 30th, other cells calendar years. One band per season: band k is the winter
  whose middle falls in year k of the record. For northern cells band 1 is NaN in
  ``freezing_index`` and ``frost_depth_winters`` (the record starts in mid-winter: that
  season is incomplete) and the last year's July..December is left out, so they have
  Y - 1 winters; the solver still runs year 1's July..December before year 1 (the
  season the spin-up repeats). The design winter uses the complete winters only.
* ``freezing_index``: degree-days below 0 degC of the ground surface per winter.
* ``frost_depth_latent``: maximum frost depth of the numerical run over the record.
* ``design_freezing_index``: mean of the 3 coldest winters; ``design_frost_depth``:
  mean numerical frost depth of those same 3 winters.
* Stefan and Berggren use the design freezing index (multi-year) or the single
  winter's, with frozen conductivity (Stefan) and mean properties (Berggren).
* ``frost_class``: from the design frost depth (multi-year) or frost_depth_latent;
  perennially frozen cells get their own class.
* Cells that never freeze (12-band input only): frost depth 0, frozen days 0, no
  thaw depth, t_min/t_max_latent from the periodic analytic solution of the daily
  forcing plus the geothermal gradient ``q z / k`` (as in the numerical run).
  Multi-year inputs run every cell numerically.
* Freezable water: all the water content (no unfrozen water left at the lower bound of the
  freezing range); frozen properties from the recipe's conductivity model with
  ``frozen=True``.
* Solver grid: one for every cell (:func:`solver_grid`), so results do not depend on the
  block. Spin-up: ``years: auto`` repeats the first season until the January-1st (season
  start) profile changes by less than 0.01 K, at most 30 years; an integer runs exactly that
  many spin-up years.
* ``frozen_days``, ``t_min_latent``, ``t_max_latent`` of a multi-year input cover the
  record of seasons (mean days per year; extremes over the record).

Screening estimates: design frost depths follow local codes and licensed engineers.
"""

from __future__ import annotations

import numpy as np

from geothermmap.kernel import CellState, KernelConfig
from geothermmap.physics import freezethaw, frost, properties

_N_COLDEST = 3  # design winter practice, see frost.design_freezing_index
_JULY_1 = 181  # day index of July 1st in a 365-day year
_SPINUP_TOL_K = 0.01  # K, January-1st profile repeat tolerance of the spin-up
_MAX_SPINUP_AUTO = 30  # years, limit of the automatic spin-up
_N_LAYERS = 40
_FIRST_LAYER_M = 0.02
_BOTTOM_M = 20.0


def solver_grid(depths_m) -> np.ndarray:
    """The solver grid of every cell: 40 layers from 2 cm, bottom at 20 m (or 1.5 x the
    deepest recipe depth). The same for all cells, so a cell's result does not depend on
    its block; 20 m is >= 5.7 annual damping depths for diffusivities up to 1.5e-6 m2 s-1."""
    bottom = max(_BOTTOM_M, 1.5 * float(np.max(depths_m, initial=0.0)))
    return freezethaw.depth_grid(bottom, _N_LAYERS, _FIRST_LAYER_M)


def _settings(config: KernelConfig) -> dict:
    ft = dict(config.extras.get("freeze_thaw", {}) or {})
    years = ft.get("years", "auto")
    return {
        "range": tuple(float(v) for v in ft.get("freezing_range", (-1.0, 0.0))),
        "q": float(ft.get("bottom_heat_flux", 0.06)),
        "max_spin": _MAX_SPINUP_AUTO if years in (None, "auto") else int(years),
        "tol": _SPINUP_TOL_K if years in (None, "auto") else 0.0,
        "kind": config.extras.get("surface_kind", "ground"),
        "classes": list(config.extras.get("frost_classes", [0.5, 1.0, 1.5, 2.0])),
    }


def _daily_forcing(state: CellState, kind: str) -> tuple[np.ndarray, float]:
    n_years = state.series.shape[0] // 12
    if n_years <= 1:  # the air cycle itself: n-factors act on daily values below
        fit = state.air_fit if kind == "air" and state.air_fit is not None else state.fit
        daily = freezethaw.daily_forcing_from_harmonics(fit.mean, fit.cos_coef, fit.sin_coef)
        dt = freezethaw.DAYS_PER_YEAR / 365
    else:
        daily = freezethaw.daily_forcing_from_monthly(state.series)
        dt = 1.0
    if kind == "air":
        daily = frost.surface_temperature_n_factor(
            daily, state.inputs["n_factor_freezing"], state.inputs["n_factor_thawing"])
    return daily, dt


def _northern_winter(monthly: np.ndarray) -> np.ndarray:
    """Cells whose coldest climatological month is October..March."""
    coldest = np.argmin(monthly, axis=0)
    return (coldest >= 9) | (coldest <= 2)


def _season_shift(daily: np.ndarray, monthly: np.ndarray) -> np.ndarray:
    """Start northern-winter cells on July 1st (see the module docstring)."""
    north = _northern_winter(monthly)
    shifted = np.concatenate([daily[_JULY_1:365], daily[: daily.shape[0] - (365 - _JULY_1)]])
    return np.where(north[None, :], shifted, daily)


def _analytic_extremes(daily, d1, k, q, depths, dt):
    """Min/max over the daily cycle of the periodic solution at the output depths."""
    mean, cos_c, sin_c = freezethaw._fit_harmonics(daily, n_harmonics=3)
    z = np.asarray(depths, dtype=np.float64)
    tmin = np.full((z.size, d1.size), np.inf)
    tmax = np.full((z.size, d1.size), -np.inf)
    for t in (np.arange(daily.shape[0]) + 0.5) * dt:  # loop over times, vectorised over cells
        p = freezethaw.periodic_initial_profile(
            mean, cos_c, sin_c, d1, z, t_days=float(t), bottom_heat_flux_w_m2=q,
            conductivity_w_mk=k)
        tmin = np.minimum(tmin, p)
        tmax = np.maximum(tmax, p)
    return tmin, tmax


def compute(state: CellState, wanted: set[str]) -> dict[str, np.ndarray]:
    """Frost outputs over the valid cells of a block (see the module docstring)."""
    cfg = state.config
    s = _settings(cfg)
    n = state.series.shape[1]
    depths = np.asarray(cfg.depths_m, dtype=np.float64)
    n_years = state.series.shape[0] // 12
    inp = state.inputs
    frozen = properties.soil_thermal_properties(
        inp["sand"], inp["clay"], inp["water_content"], inp["bulk_density"],
        inp["organic_matter"], inp.get("quartz"), model=cfg.conductivity_model, frozen=True)
    ku, cu = state.props["conductivity_w_mk"], state.props["heat_capacity_j_m3k"]
    kf, cf = frozen["conductivity_w_mk"], frozen["heat_capacity_j_m3k"]
    water = np.clip(inp["water_content"], 0.0, None)
    q = np.full(n, s["q"])

    daily, dt = _daily_forcing(state, s["kind"])
    mat = np.mean(daily, axis=0)  # of the record as given (the shift below repeats months)
    if n_years > 1:
        daily = _season_shift(daily, state.monthly)
    fi, fdays = frost.freezing_index_per_winter(daily, 365, dt)  # (W, n)
    first_is_whole = np.ones(n, dtype=bool)
    if n_years > 1:  # a northern winter 1 would join the record's first Jul-Dec to its Jan-Jun
        first_is_whole = ~_northern_winter(state.monthly)
        fi[0, ~first_is_whole] = np.nan
        fdays[0, ~first_is_whole] = np.nan

    d1 = np.asarray(state.damping_depth_m, dtype=np.float64)
    grid = solver_grid(cfg.depths_m)

    frost_y = np.zeros((fi.shape[0], n))
    frost_max = np.zeros(n)
    thaw = np.full(n, np.nan)
    peren = np.zeros(n, dtype=bool)
    frozen_days = np.zeros((depths.size, n))
    tmin = np.full((depths.size, n), np.nan)
    tmax = np.full((depths.size, n), np.nan)
    ok = np.isfinite(d1) & np.all(np.isfinite(daily), axis=0)
    if n_years > 1:
        run = ok
    else:
        run = ok & freezethaw.needs_freeze_thaw(daily, s["range"])
        calm = ok & ~run
        if calm.any():
            a, b = _analytic_extremes(daily[:, calm], d1[calm], ku[calm], q[calm], depths, dt)
            tmin[:, calm], tmax[:, calm] = a, b
    counts = {"freeze_thaw_cells_solved": int(run.sum()),
              "freeze_thaw_cells_analytic": int((ok & ~run).sum())}
    if run.any():
        r = freezethaw.solve_freeze_thaw(
            np.ascontiguousarray(daily[:, run]), ku[run], kf[run], cu[run], cf[run],
            water[run], depths, freezing_range_degC=s["range"],
            bottom_heat_flux_w_m2=q[run], dt_days=dt, grid_m=grid,
            spinup_tolerance_K=s["tol"], max_spinup_years=s["max_spin"])
        frost_max[run] = r.frost_depth_m
        frost_y[:, run] = r.frost_depth_per_year_m
        frost_y[0, ~first_is_whole] = np.nan
        thaw[run] = r.thaw_depth_m
        peren[run] = r.perennially_frozen
        frozen_days[:, run] = r.frozen_days
        tmin[:, run] = r.t_min_degC
        tmax[:, run] = r.t_max_degC
        years = np.broadcast_to(np.asarray(r.spinup_years), (int(run.sum()),))
        conv = np.broadcast_to(np.asarray(r.spinup_converged), (int(run.sum()),))
        counts["freeze_thaw_spinup_years_max"] = int(years.max())
        counts["freeze_thaw_spinup_years_sum"] = int(years.sum())
        counts["freeze_thaw_spinup_unconverged_cells"] = int((~conv).sum())
    bad = ~ok
    for arr in (frost_y, frozen_days, tmin, tmax):
        arr[..., bad] = np.nan
    frost_max[bad] = np.nan

    design_fi, used = frost.design_freezing_index(fi, _N_COLDEST)
    k_used = np.maximum(used.sum(axis=0), 1)
    design_days = np.sum(np.where(used, fdays, 0.0), axis=0) / k_used
    design_depth = np.sum(np.where(used, frost_y, 0.0), axis=0) / k_used
    design_depth[bad] = np.nan
    stefan = frost.stefan_frost_depth(design_fi, kf, water)
    berggren = frost.berggren_frost_depth(design_fi, design_days, mat, kf, ku, cf, cu, water)
    class_depth = design_depth if n_years > 1 else frost_max
    classes = frost.frost_class(class_depth, s["classes"], peren).astype(np.float64)

    out = {
        "frost_depth_latent": frost_max,
        "thaw_depth": thaw,
        "frozen_days": frozen_days,
        "t_min_latent": tmin,
        "t_max_latent": tmax,
        "freezing_index": fi,
        "frost_depth_stefan": np.where(np.isfinite(stefan), stefan, np.nan),
        "frost_depth_berggren": berggren,
        "frost_class": classes,
        "design_freezing_index": design_fi,
        "frost_depth_winters": frost_y,
        "design_frost_depth": design_depth,
    }
    result = {k: v for k, v in out.items() if k in wanted}
    result["_counts"] = counts  # run counters for the run record (see kernel.compute_block)
    return result


def tags(config: KernelConfig) -> dict[str, dict[str, str]]:
    """Legend of frost_class and method notes of the frost outputs."""
    s = _settings(config)
    legend = frost.frost_class_legend(s["classes"])
    cls = {"class_0": "nodata"}
    for code, (label, colour) in legend.items():
        cls[f"class_{code}"] = label
        cls[f"class_{code}_color"] = colour
    cls["class_basis"] = ("design_frost_depth (multi-year input) or frost_depth_latent; "
                          "perennially frozen cells get the last class")
    fr = f"freezing range {s['range'][0]:g}..{s['range'][1]:g} degC"
    num = (f"1-D implicit enthalpy solver, latent heat of the pore water, {fr}, bottom heat "
           f"flux {s['q']:g} W m-2, spin-up from the periodic solution")
    surface = ("ground surface temperature from air temperature with n-factors"
               if s["kind"] == "air" else "ground surface temperature as given")
    winters = ("freezing seasons July-June where the coldest month is October-March (band 1 "
               "nodata there: the record starts mid-winter), else calendar years; band k is "
               "the winter whose middle falls in year k")
    return {
        "frost_class": cls,
        "frost_depth_latent": {"method": num + "; maximum over the record", "surface": surface,
                               "perennially_frozen_cells": "base of the frozen ground, or the "
                               "solver grid bottom when deeper; see thaw_depth there"},
        "thaw_depth": {"method": num},
        "frozen_days": {"method": num + "; mean days per year below 0 degC"},
        "t_min_latent": {"method": num},
        "t_max_latent": {"method": num},
        "freezing_index": {"method": "degree-days below 0 degC of the ground surface per "
                           "winter", "winters": winters, "surface": surface},
        "frost_depth_stefan": {"method": "Stefan equation sqrt(2 k_frozen F / L) with the "
                               "design (multi-year) or single-winter freezing index"},
        "frost_depth_berggren": {"method": "modified Berggren equation, coefficient from the "
                                 "equal-property Neumann solution, mean frozen/unfrozen "
                                 "properties"},
        "design_freezing_index": {"method": "mean of the 3 coldest winters of the record",
                                  "winters": winters},
        "frost_depth_winters": {"method": num, "winters": winters},
        "design_frost_depth": {"method": "mean numerical frost depth of the 3 coldest winters "
                               "(by freezing index)"},
    }
