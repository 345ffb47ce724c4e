"""Output groups ``root_zone`` and ``thresholds`` of the per-cell kernel (numpy only, no I/O).

Called by :func:`geothermmap.kernel.compute_block` with the :class:`CellState` of the valid
cells of a block. No formulas here: they live in :mod:`geothermmap.physics.rootzone`.

Recipe sections read from ``config.extras``:

- ``root_zone: {top, bottom}`` [m] -> ``root_zone_t_mean``, ``root_zone_t_min``,
  ``root_zone_t_max`` (temperature averaged over the depth range, then reduced over the
  year).
- ``thresholds: {depth, values, degree_day_base}`` [m], [degC], [degC] ->
  ``warming_doy``, ``cooling_doy``, ``days_above`` (one band per value, in recipe order)
  and ``degree_days`` (one band) at ``depth``.
"""

from __future__ import annotations

import numpy as np

from geothermmap.kernel import CellState, KernelConfig
from geothermmap.physics import rootzone
from geothermmap.physics.harmonics import YEAR_DAYS

ROOT_ZONE_OUTPUTS = ("root_zone_t_mean", "root_zone_t_min", "root_zone_t_max")
THRESHOLD_OUTPUTS = ("warming_doy", "cooling_doy", "days_above")


def compute(state: CellState, wanted: set[str]) -> dict[str, np.ndarray]:
    """Root-zone and threshold outputs of the valid cells of a block.

    Returns ``name -> (n,)`` for single-band outputs and ``(n_thresholds, n)`` for the
    per-threshold ones; only the names in ``wanted`` are computed.
    """
    extras = state.config.extras
    out: dict[str, np.ndarray] = {}
    if wanted & set(ROOT_ZONE_OUTPUTS):
        spec = extras.get("root_zone") or {}
        stats = rootzone.root_zone_statistics(
            state.fit, state.damping_depth_m, float(spec.get("top", 0.0)),
            float(spec.get("bottom", 0.3)))
        for key in ("t_mean", "t_min", "t_max"):
            name = f"root_zone_{key}"
            if name in wanted:
                out[name] = stats[key]
    if wanted & {*THRESHOLD_OUTPUTS, "degree_days"}:
        spec = extras.get("thresholds") or {}
        depth = float(spec.get("depth", 0.1))
        values = [float(v) for v in spec.get("values", ())]
        if wanted & set(THRESHOLD_OUTPUTS):
            n = np.shape(state.damping_depth_m)[0]
            bands = {k: np.empty((len(values), n)) for k in THRESHOLD_OUTPUTS}
            for i, value in enumerate(values):  # a loop over thresholds, not cells
                res = rootzone.threshold_crossings(state.fit, state.damping_depth_m, depth,
                                                   value)
                for k in THRESHOLD_OUTPUTS:
                    bands[k][i] = res[k]
            out.update({k: v for k, v in bands.items() if k in wanted})
        if "degree_days" in wanted:
            out["degree_days"] = rootzone.degree_days(
                state.fit, state.damping_depth_m, depth, float(spec.get("degree_day_base", 5.0)))
    return out


def tags(config: KernelConfig) -> dict[str, dict[str, str]]:
    """GeoTIFF tags of the group's outputs: depths, thresholds and the meaning of the codes."""
    extras = config.extras
    rz = extras.get("root_zone") or {}
    th = extras.get("thresholds") or {}
    codes = {
        "code_never_above": f"{rootzone.NEVER_ABOVE:g} = never above the threshold "
                            "(days_above 0)",
        "code_always_above": f"{rootzone.ALWAYS_ABOVE:g} = above the threshold all year "
                             f"(days_above {YEAR_DAYS:g})",
        "crossing_definition": "warming_doy: first upward crossing in the calendar year; "
                               "cooling_doy: last downward crossing; day of year = 1 + days "
                               "since January 1st 00:00; cooling before warming means the "
                               "warm season spans the new year",
    }
    out: dict[str, dict[str, str]] = {}
    if rz:
        for name in ROOT_ZONE_OUTPUTS:
            out[name] = {"root_zone_top_m": f"{float(rz.get('top', 0.0)):g}",
                         "root_zone_bottom_m": f"{float(rz.get('bottom', 0.3)):g}"}
    if th:
        common = {"depth_m": f"{float(th.get('depth', 0.1)):g}",
                  "thresholds_degC": ",".join(f"{float(v):g}" for v in th.get("values", ()))}
        for name in ("warming_doy", "cooling_doy"):
            out[name] = {**common, **codes}
        out["days_above"] = {**common, "year_days": f"{YEAR_DAYS:g}"}
        out["degree_days"] = {"depth_m": common["depth_m"],
                              "degree_day_base_degC": f"{float(th.get('degree_day_base', 5)):g}"}
    return out
