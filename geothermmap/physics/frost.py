"""Surface conditions, freezing indices and closed-form frost-depth estimates.

Plain numpy functions, cells on the trailing axes, time/winters on axis 0.

* n-factors turn air temperature into ground-surface temperature.
* Freezing index (degree-days below 0 degC) per winter and the design freezing
  index (mean of the 3 coldest winters).
* The Stefan equation and the modified Berggren equation (coefficient from the
  equal-property two-phase Neumann solution, which is how the Berggren charts
  were built).
* A frost class from burial-depth thresholds.

All frost depths here are screening estimates: design frost depths follow local
codes and licensed engineers.

References
----------
Aldrich, H. P., Paynter, H. M. (1953). Analytical studies of freezing and thawing
    of soils. Arctic Construction and Frost Effects Laboratory, Technical Report
    42, U.S. Army Corps of Engineers, Boston.
Carslaw, H. S., Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed.
    Oxford University Press, Sec. 11.2.
Lunardini, V. J. (1981). Heat Transfer in Cold Climates. Van Nostrand Reinhold.
Andersland, O. B., Ladanyi, B. (2004). Frozen Ground Engineering, 2nd ed. Wiley.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from geothermmap.physics import freezethaw
from geothermmap.physics._cells import elementwise
from geothermmap.physics.freezethaw import LATENT_HEAT_FUSION_J_KG, WATER_DENSITY_KG_M3
from geothermmap.physics.harmonics import HarmonicFit

__all__ = [
    "N_FACTORS",
    "berggren_coefficient",
    "design_freezing_index",
    "freezing_index_per_winter",
    "frost_class",
    "frost_class_legend",
    "berggren_frost_depth",
    "ground_surface_harmonics",
    "latent_heat_volumetric",
    "neumann_front_coefficient",
    "stefan_frost_depth",
    "surface_temperature_n_factor",
]

SECONDS_PER_DAY = 86400.0

#: n-factors (freezing, thawing) = surface / air degree-day ratios, by surface, for
#: surfaces exposed to sun and air with no building heat: U.S. Army / Air Force
#: TM 5-852-4 / AFM 88-19 Chap. 4, Arctic and Subarctic Construction: Foundations for
#: Structures, Table 4-1 (as reproduced in UFC 3-130-04). Where the table gives a range
#: ("1.6 to 2+", "1.4 to 2+") its lower end is used; the snow row has no thawing value
#: (NaN: a thawing season without snow belongs to another surface type). Site values
#: vary widely (Lunardini 1978): snow depth alone moves the freezing n-factor of
#: vegetated ground between about 0.3 and 1.
N_FACTORS: dict[str, tuple[float, float]] = {
    "snow_surface": (1.0, float("nan")),
    "portland_cement_concrete": (0.75, 1.5),
    "bituminous_pavement": (0.7, 1.6),  # thawing 1.6 to 2+
    "bare_soil": (0.7, 1.4),  # thawing 1.4 to 2+; the recipe defaults
    "shaded_surface": (0.9, 1.0),
    "turf": (0.5, 0.8),
    "tree_covered": (0.3, 0.4),
}


@elementwise()
def surface_temperature_n_factor(
    air_temperature_degC: np.ndarray,
    n_factor_freezing: np.ndarray | float = 0.7,
    n_factor_thawing: np.ndarray | float = 1.4,
) -> np.ndarray:
    """Ground-surface temperature from air temperature with n-factors.

    ``T_s = n_f T_a`` where ``T_a < 0`` and ``n_t T_a`` elsewhere, so the surface
    freezing (thawing) index is ``n_f`` (``n_t``) times the air index. Apply it to
    daily values: on monthly means it understates degree-days of months that
    cross 0 degC. See :data:`N_FACTORS` for typical values.

    Parameters
    ----------
    air_temperature_degC : Air temperature, ``(time, *cells)``. [degC]
    n_factor_freezing : Freezing n-factor, ``cells`` or scalar. [1]
    n_factor_thawing : Thawing n-factor, ``cells`` or scalar. [1]

    Returns
    -------
    Ground-surface temperature, same shape. [degC]

    References
    ----------
    Lunardini, V. J. (1978). Theory of n-factors and correlation of data. Proc. 3rd
        Int. Conf. on Permafrost, Edmonton, 40-46.
    """
    ta = np.asarray(air_temperature_degC, dtype=np.float64)
    return np.where(ta < 0.0, np.asarray(n_factor_freezing) * ta, np.asarray(n_factor_thawing) * ta)


def ground_surface_harmonics(
    air_fit: HarmonicFit,
    n_factor_freezing: np.ndarray | float = 0.7,
    n_factor_thawing: np.ndarray | float = 1.4,
    n_days: int = 365,
    cells_per_pass: int = 16384,
) -> HarmonicFit:
    """Harmonic fit of the ground-surface cycle implied by an air-temperature fit.

    The periodic analytic solution needs the cycle at the ground surface. The daily air
    cycle of ``air_fit`` (one period, ``n_days`` samples at step midpoints, as in
    :func:`freezethaw.daily_forcing_from_harmonics`) is turned into ground-surface
    temperature with :func:`surface_temperature_n_factor` and refitted with as many
    harmonics as ``air_fit`` has (least squares on equally spaced samples of one period:
    the discrete Fourier coefficients). The mean is the mean of the daily ground-surface
    values, so ``mean = (n_t I_t - n_f I_f) / P`` with the air thawing and freezing
    indices I_t, I_f over one period P. The kink at 0 degC moves a little of the cycle
    into higher harmonics, which the refit leaves out, as a fit of the same order to
    measured ground-surface temperatures would. Cells are done in passes of
    ``cells_per_pass`` to bound memory (n_days x cells float64 per pass).

    Parameters
    ----------
    air_fit : Harmonic fit of the air-temperature cycle, cells ``(n,)``. [degC, K]
    n_factor_freezing : Freezing n-factor, ``(n,)`` or scalar. [1]
    n_factor_thawing : Thawing n-factor, ``(n,)`` or scalar. [1]
    n_days : Samples per year. [1]
    cells_per_pass : Cells per pass. [1]

    Returns
    -------
    HarmonicFit of the ground-surface temperature, same shapes as ``air_fit``.

    References
    ----------
    Lunardini, V. J. (1978). Theory of n-factors and correlation of data. Proc. 3rd
        Int. Conf. on Permafrost, Edmonton, 40-46.
    """
    mean = np.asarray(air_fit.mean, dtype=np.float64)
    cos_c = np.asarray(air_fit.cos_coef, dtype=np.float64)
    sin_c = np.asarray(air_fit.sin_coef, dtype=np.float64)
    n = mean.shape[0]
    n_f = np.broadcast_to(np.asarray(n_factor_freezing, dtype=np.float64), (n,))
    n_t = np.broadcast_to(np.asarray(n_factor_thawing, dtype=np.float64), (n,))
    out_mean = np.empty(n)
    out_cos = np.empty_like(cos_c)
    out_sin = np.empty_like(sin_c)
    for i0 in range(0, n, cells_per_pass):
        sl = slice(i0, min(n, i0 + cells_per_pass))
        air = freezethaw.daily_forcing_from_harmonics(mean[sl], cos_c[:, sl], sin_c[:, sl],
                                                      n_days)
        ground = surface_temperature_n_factor(air, n_f[sl], n_t[sl])
        out_mean[sl], out_cos[:, sl], out_sin[:, sl] = freezethaw._fit_harmonics(
            ground, cos_c.shape[0])
    return HarmonicFit(out_mean, out_cos, out_sin)


@elementwise()
def latent_heat_volumetric(water_m3m3: np.ndarray | float) -> np.ndarray:
    """Latent heat of the pore water per unit volume of ground ``rho_w L_f theta``.

    Parameters
    ----------
    water_m3m3 : Freezable water content. [m3 m-3]

    Returns
    -------
    Volumetric latent heat. [J m-3]
    """
    return np.asarray(water_m3m3, dtype=np.float64) * (
        WATER_DENSITY_KG_M3 * LATENT_HEAT_FUSION_J_KG
    )


def freezing_index_per_winter(
    daily_degC: np.ndarray, steps_per_winter: int = 365, dt_days: float = 1.0
) -> tuple[np.ndarray, np.ndarray]:
    """Freezing index and freezing-season length of each winter.

    The series is cut into consecutive windows of ``steps_per_winter`` steps (the
    caller aligns window starts with the warm season, e.g. July 1st in the northern
    hemisphere); each window's freezing index is the sum of degree-days below
    0 degC, ``sum max(0, -T) dt``, and its length the number of days below 0 degC.

    Parameters
    ----------
    daily_degC : Surface temperature, ``(steps_per_winter * W, *cells)``. [degC]
    steps_per_winter : Steps per window. [1]
    dt_days : Step length. [d]

    Returns
    -------
    (freezing_index ``(W, *cells)`` [degC d], freezing_days ``(W, *cells)`` [d])
    """
    t = np.asarray(daily_degC, dtype=np.float64)
    if t.shape[0] % steps_per_winter:
        raise ValueError("the series must be whole windows of steps_per_winter steps")
    w = t.reshape((t.shape[0] // steps_per_winter, steps_per_winter) + t.shape[1:])
    fi = np.sum(np.maximum(-w, 0.0), axis=1) * dt_days
    days = np.sum(w < 0.0, axis=1) * dt_days
    return fi, days.astype(np.float64)


def design_freezing_index(
    freezing_index_degC_day: np.ndarray, n_coldest: int = 3
) -> tuple[np.ndarray, np.ndarray]:
    """Design freezing index: mean of the ``n_coldest`` largest winter indices.

    Follows the practice of the U.S. Army Corps of Engineers (TM 5-818-2 / UFC
    3-130-01; from memory): the design freezing index is the average of the three
    coldest winters of the latest 30 years of record. With fewer winters than
    ``n_coldest`` all winters are averaged.

    Parameters
    ----------
    freezing_index_degC_day : Freezing index per winter, ``(W, *cells)``. [degC d]
    n_coldest : Number of coldest winters averaged. [1]

    Returns
    -------
    (design index ``cells`` [degC d], boolean mask ``(W, *cells)`` of the winters
    used, ties broken by record order). NaN winters (incomplete) are left out; a cell
    with no finite winter gets NaN.
    """
    fi = np.asarray(freezing_index_degC_day, dtype=np.float64)
    k = min(n_coldest, fi.shape[0])
    order = np.argsort(-fi, axis=0, kind="stable")  # NaN (incomplete winters) sort last
    used = np.zeros(fi.shape, dtype=bool)
    np.put_along_axis(used, order[:k], True, axis=0)
    used &= np.isfinite(fi)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.sum(np.where(used, fi, 0.0), axis=0) / used.sum(axis=0), used


@elementwise()
def stefan_frost_depth(
    freezing_index_degC_day: np.ndarray | float,
    conductivity_frozen_w_mk: np.ndarray | float,
    water_m3m3: np.ndarray | float,
) -> np.ndarray:
    """Frost depth by the Stefan equation ``X = sqrt(2 k_f F / L)``, ``L = rho_w L_f theta``.

    Neglects the sensible heat of the frozen and unfrozen ground (upper bound as
    the Stefan number goes to 0). Screening estimate: design frost depths follow
    local codes and licensed engineers.

    Parameters
    ----------
    freezing_index_degC_day : Surface freezing index ``F``. [degC d]
    conductivity_frozen_w_mk : Frozen conductivity. [W m-1 K-1]
    water_m3m3 : Freezable water content. [m3 m-3]

    Returns
    -------
    Frost depth (inf where ``L = 0`` and ``F > 0``). [m]

    References
    ----------
    Lunardini, V. J. (1981). Heat Transfer in Cold Climates, Ch. 3.
    """
    f = np.asarray(freezing_index_degC_day, dtype=np.float64) * SECONDS_PER_DAY
    num = 2.0 * np.asarray(conductivity_frozen_w_mk, dtype=np.float64) * np.maximum(f, 0.0)
    lat = latent_heat_volumetric(water_m3m3)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.sqrt(num / lat)
    return np.where(num == 0.0, 0.0, x)


@elementwise("thermal_ratio", "fusion_parameter")
def neumann_front_coefficient(
    thermal_ratio: np.ndarray | float,
    fusion_parameter: np.ndarray | float,
    xi_max: float = 6.0,
) -> np.ndarray:
    """Front coefficient ``xi`` of the equal-property two-phase Neumann solution.

    A half-space at ``T_f + V_0`` whose surface is held at ``T_f - V_s`` from t = 0
    freezes to ``X = 2 xi sqrt(a t)`` with ``xi`` the root of (Carslaw & Jaeger 1959,
    Sec. 11.2, equal diffusivity ``a`` in both phases)

    ``exp(-xi^2) [1 / erf(xi) - alpha / erfc(xi)] = sqrt(pi) xi / mu``,

    ``alpha = V_0 / V_s`` (thermal ratio), ``mu = C V_s / L`` (fusion parameter).
    Solved by vectorised bisection (60 halvings: below 1e-16 relative).

    Parameters
    ----------
    thermal_ratio : ``alpha >= 0``. [1]
    fusion_parameter : ``mu > 0`` (inf = no latent heat). [1]
    xi_max : Upper end of the bracket (the root is capped there). [1]

    Returns
    -------
    ``xi``. [1]
    """
    from scipy.special import erf, erfc  # here: scipy.special costs ~0.3 s to import

    a = np.asarray(thermal_ratio, dtype=np.float64)
    mu = np.asarray(fusion_parameter, dtype=np.float64)
    a, mu = np.broadcast_arrays(np.maximum(a, 0.0), mu)
    inv_mu = np.where(np.isinf(mu), 0.0, 1.0 / np.where(mu > 0, mu, np.nan))
    lo = np.full(a.shape, 1e-12)
    hi = np.full(a.shape, xi_max)

    def g(x):
        return np.exp(-x * x) * (1.0 / erf(x) - a / erfc(x)) - np.sqrt(np.pi) * x * inv_mu

    for _ in range(60):
        mid = 0.5 * (lo + hi)
        pos = g(mid) > 0.0  # g decreases in xi
        lo = np.where(pos, mid, lo)
        hi = np.where(pos, hi, mid)
    xi = 0.5 * (lo + hi)
    return np.where(np.isnan(inv_mu), np.nan, xi)


@elementwise()
def berggren_coefficient(
    thermal_ratio: np.ndarray | float, fusion_parameter: np.ndarray | float
) -> np.ndarray:
    """Correction coefficient ``lambda`` of the modified Berggren equation.

    ``X = lambda sqrt(2 k F / L)``; with the equal-property Neumann root ``xi``
    (:func:`neumann_front_coefficient`), ``lambda = xi sqrt(2 / mu)``. This is the
    relation behind the published charts of lambda against the thermal ratio
    ``alpha = V_0 / V_s`` and the fusion parameter ``mu = C V_s / L`` (Aldrich &
    Paynter 1953). ``lambda -> 1`` as ``mu -> 0`` at ``alpha = 0`` (Stefan limit).

    Parameters
    ----------
    thermal_ratio : ``alpha = (mean annual temperature - 0 degC) / V_s``, >= 0. [1]
    fusion_parameter : ``mu = C V_s / L`` with ``V_s = F / t`` the mean surface
        temperature below 0 degC over the freezing season. [1]

    Returns
    -------
    ``lambda``. [1]

    References
    ----------
    Aldrich, H. P., Paynter, H. M. (1953). Analytical studies of freezing and
        thawing of soils. ACFEL Technical Report 42, U.S. Army Corps of Engineers.
    """
    mu = np.asarray(fusion_parameter, dtype=np.float64)
    xi = neumann_front_coefficient(thermal_ratio, mu)
    return xi * np.sqrt(2.0 / mu)


@elementwise()
def berggren_frost_depth(
    freezing_index_degC_day: np.ndarray | float,
    freezing_days: np.ndarray | float,
    mean_annual_degC: np.ndarray | float,
    conductivity_frozen_w_mk: np.ndarray | float,
    conductivity_unfrozen_w_mk: np.ndarray | float,
    heat_capacity_frozen_j_m3k: np.ndarray | float,
    heat_capacity_unfrozen_j_m3k: np.ndarray | float,
    water_m3m3: np.ndarray | float,
) -> np.ndarray:
    """Frost depth by the modified Berggren equation ``X = lambda sqrt(2 k F / L)``.

    ``k`` and ``C`` are the means of the frozen and unfrozen values (as in the
    usual worked examples; from memory), ``V_s = F / t``, ``V_0 = max(MAT, 0)``
    (the method is for seasonal frost; with a mean at or below 0 degC ``alpha =
    0``). Evaluated as ``X = 2 xi sqrt(k t / C)``, which equals the expression
    above and stays finite for dry ground (``L = 0``). Screening estimate: design
    frost depths follow local codes and licensed engineers.

    Parameters
    ----------
    freezing_index_degC_day : Surface freezing index ``F``. [degC d]
    freezing_days : Length ``t`` of the freezing season. [d]
    mean_annual_degC : Mean annual surface temperature. [degC]
    conductivity_frozen_w_mk, conductivity_unfrozen_w_mk : [W m-1 K-1]
    heat_capacity_frozen_j_m3k, heat_capacity_unfrozen_j_m3k : [J m-3 K-1]
    water_m3m3 : Freezable water content (``L = rho_w L_f theta``). [m3 m-3]

    Returns
    -------
    Frost depth (0 where ``F = 0``). [m]

    References
    ----------
    Aldrich, H. P., Paynter, H. M. (1953), see :func:`berggren_coefficient`.
    """
    f = np.asarray(freezing_index_degC_day, dtype=np.float64)
    t = np.asarray(freezing_days, dtype=np.float64)
    k = 0.5 * (np.asarray(conductivity_frozen_w_mk) + np.asarray(conductivity_unfrozen_w_mk))
    c = 0.5 * (np.asarray(heat_capacity_frozen_j_m3k) + np.asarray(heat_capacity_unfrozen_j_m3k))
    lat = latent_heat_volumetric(water_m3m3)
    frz = (f > 0.0) & (t > 0.0)
    vs = np.where(frz, f / np.where(t > 0, t, 1.0), 1.0)
    alpha = np.maximum(np.asarray(mean_annual_degC, dtype=np.float64), 0.0) / vs
    with np.errstate(divide="ignore"):
        mu = np.where(lat > 0, c * vs / np.where(lat > 0, lat, 1.0), np.inf)
    xi = neumann_front_coefficient(alpha, mu)
    x = 2.0 * xi * np.sqrt(k * t * SECONDS_PER_DAY / c)
    return np.where(frz, x, np.where(np.isnan(f), np.nan, 0.0))


#: Class colours of :func:`frost_class` (no frost, shallow ... deep, frozen at depth).
_CLASS_COLOURS = ("#f2f0e6", "#c6dbef", "#9ecae1", "#6baed6", "#3182bd", "#08519c", "#54278f")


@elementwise("frost_depth_m", "frozen_at_depth", dtype=np.uint8)
def frost_class(
    frost_depth_m: np.ndarray,
    thresholds_m: Sequence[float] = (0.5, 1.0, 1.5, 2.0),
    frozen_at_depth: np.ndarray | None = None,
) -> np.ndarray:
    """Frost class codes from burial-depth thresholds.

    Codes: 1 = no frost (depth 0); ``2 .. len(thresholds) + 2`` = frost depth in
    ``(0, t_1)``, ``[t_1, t_2)``, ..., ``[t_last, inf)``; ``len(thresholds) + 3`` =
    ground frozen at depth (perennially frozen). 0 = no value (NaN depth).

    Parameters
    ----------
    frost_depth_m : Frost depth, ``cells``. [m]
    thresholds_m : Increasing burial-depth thresholds. [m]
    frozen_at_depth : Boolean mask of perennially frozen cells, optional.

    Returns
    -------
    Class codes, uint8, shape ``cells``.
    """
    x = np.asarray(frost_depth_m, dtype=np.float64)
    th = np.asarray(thresholds_m, dtype=np.float64)
    codes = (2 + np.searchsorted(th, np.nan_to_num(x), side="right")).astype(np.uint8)
    codes = np.where(x <= 0.0, 1, codes)
    if frozen_at_depth is not None:
        codes = np.where(np.asarray(frozen_at_depth, dtype=bool), th.size + 3, codes)
    return np.where(np.isnan(x), 0, codes).astype(np.uint8)


def frost_class_legend(thresholds_m: Sequence[float] = (0.5, 1.0, 1.5, 2.0)) -> dict[int, tuple]:
    """Legend of :func:`frost_class`: code -> (label, colour)."""
    th = [float(v) for v in thresholds_m]
    labels = ["no frost"]
    labels.append(f"frost < {th[0]:g} m")
    labels += [f"frost {a:g}-{b:g} m" for a, b in zip(th[:-1], th[1:], strict=True)]
    labels.append(f"frost >= {th[-1]:g} m")
    labels.append("frozen at depth (perennially frozen)")
    n = len(labels)
    cols = list(_CLASS_COLOURS)
    while len(cols) < n:  # more thresholds than colours: repeat the deep blue
        cols.insert(-1, cols[-2])
    cols = cols[: n - 1] + [_CLASS_COLOURS[-1]]
    return {i + 1: (labels[i], cols[i]) for i in range(n)}
