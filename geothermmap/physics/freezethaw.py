"""One-dimensional heat conduction with freezing and thawing of pore water.

The ground column under each map cell is solved on its own depth grid with a
fully implicit (backward Euler) finite-volume scheme in the enthalpy form of the
heat equation,

    dH/dt = d/dz ( k(T) dT/dz ),       H(T) = sensible heat + latent heat,

with the non-linearity resolved at each time step by the enthalpy linearisation
of Swaminathan & Voller (1992). Cells are independent: the numba kernel
advances blocks of 32 cells together (the innermost loops run over the cells of
a block, which the compiler turns into SIMD code) and solves one tridiagonal
(Thomas) system per cell and iteration; a cell that has converged in a time
step is left alone while the others of its block iterate, so results do not
depend on the neighbours. The kernel releases the GIL (``nogil``), so dask or a
thread pool can run several blocks of cells at once; each call is
single-threaded.

Discretisation: node-centred finite volumes (node ``i`` owns
``[(z[i-1]+z[i])/2, (z[i]+z[i+1])/2]``, the bottom node ``[(z[-2]+z[-1])/2,
z[-1]]``), interface conductance from the harmonic mean of the two node
conductivities, the surface node held at the forcing, the bottom heat flux
added to the bottom node. The enthalpy update of the accepted iterate and the
reported surface heat flux come from the same linear solve, so the change of
column enthalpy equals the heat that entered, to round-off, whatever the
iteration tolerance.

Conventions
-----------
* Depth ``z`` [m] is positive downward; node 0 is the ground surface (Dirichlet
  ground-surface temperature), the last node is the bottom of the column.
* Time: the forcing has one value per time step on axis 0; step ``k`` ends at
  ``t_k`` and the state after step ``k`` belongs to ``t_k`` (backward Euler
  applies the forcing at the end of the step). The initial profile belongs to
  the start of the first step (January 1st 00:00 for a calendar year).
* Freezing: the pore water freezes linearly over the freezing range
  ``[T_f1, T_f2]`` (default -1..0 degC): the unfrozen fraction of the freezable
  water is ``phi = (T - T_f1) / (T_f2 - T_f1)`` clipped to [0, 1]. Heat capacity
  and conductivity are blended linearly by ``phi`` between the frozen and the
  unfrozen values supplied by the caller. Real unfrozen-water curves are
  curved (e.g. a power law of the freezing-point depression); the linear
  curve is a documented simplification.
* "Frozen" means ``T < T_f2`` (ice present: below the upper bound of the
  freezing range, 0 degC by default). Frost depth and the perennially frozen
  test use this threshold; frozen days count the days below 0 degC (the same
  for the default range; more days when ``T_f2 < 0``).
* Cells are on the trailing axes (flattened or not); time and depth on axis 0.

The outputs are screening estimates: design frost depths follow local codes and
licensed engineers.

References
----------
Carslaw, H. S., Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed.
    Oxford University Press. (Sec. 2.6 periodic surface temperature; Sec. 11.2
    Neumann solution of freezing.)
Swaminathan, C. R., Voller, V. R. (1992). A general enthalpy method for modeling
    solidification processes. Metallurgical Transactions B 23, 651-664.
    doi:10.1007/BF02649725
Patankar, S. V. (1980). Numerical Heat Transfer and Fluid Flow. Hemisphere,
    Washington. (Harmonic-mean interface conductance, Sec. 4.2; tridiagonal
    matrix algorithm, Sec. 4.2-5.)
Lunardini, V. J. (1981). Heat Transfer in Cold Climates. Van Nostrand
    Reinhold, New York.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
from numba import njit

__all__ = [
    "DAYS_PER_YEAR",
    "LATENT_HEAT_FUSION_J_KG",
    "WATER_DENSITY_KG_M3",
    "FreezeThawResult",
    "FreezeThawRun",
    "daily_forcing_from_harmonics",
    "daily_forcing_from_monthly",
    "depth_grid",
    "integrate_freeze_thaw",
    "needs_freeze_thaw",
    "periodic_initial_profile",
    "solve_freeze_thaw",
]

DAYS_PER_YEAR = 365.25  # project convention (mean Julian year)
SECONDS_PER_DAY = 86400.0
LATENT_HEAT_FUSION_J_KG = 3.34e5  # J kg-1, water at 0 degC; CRC Handbook gives 333.6 kJ kg-1
# (from memory), rounded as in common practice
WATER_DENSITY_KG_M3 = 1000.0  # kg m-3, liquid water near 0 degC (999.8, rounded; common practice)
MONTH_DAYS_365 = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.int64)
# days of the months of a 365-day (non-leap) calendar year

# Non-linear iteration controls of the kernel (numerical choices, not physics).
_MAX_ITER = 60  # iterations per time step before giving up (counted in unconverged_steps)
_TOL_T_K = 1e-4  # K, max |T(H) - T_linear| of a node for convergence
_TOL_K_REL = 1e-3  # relative change of a node's conductivity for convergence
# Spin-up acceleration (see _deep_mean_correction): nodes whose annual swing stays
# below this keep a near-constant conductivity even inside the freezing range.
_ACCEL_SWING_K = 0.05  # K
SPINUP_ACCELERATION = True  # switch for verification (tests compare with plain spin-up)


# --------------------------------------------------------------------------- grid


def depth_grid(
    bottom_depth_m: float = 20.0, n_layers: int = 40, first_layer_m: float = 0.02
) -> np.ndarray:
    """Node depths of a column: fine near the surface, geometric growth below.

    Layer ``j`` (``j = 0..n_layers-1``) is ``first_layer_m * r**j`` thick, with
    the growth ratio ``r >= 1`` chosen so that the layers add up to
    ``bottom_depth_m``. The default 20 m bottom is about six annual damping
    depths of a soil with diffusivity 1e-6 m2 s-1 (damping depth 3.2 m) and four
    of 2.5e-6 m2 s-1, so a zero-flux bottom hardly touches the annual cycle
    (amplitude exp(-4) < 2 %). A deeper bottom is needed only for
    very diffusive ground or for the geothermal gradient below permafrost.

    Parameters
    ----------
    bottom_depth_m : Depth of the bottom node. [m]
    n_layers : Number of layers (the grid has ``n_layers + 1`` nodes). [1]
    first_layer_m : Thickness of the top layer. [m]

    Returns
    -------
    Node depths ``z`` with ``z[0] = 0`` and ``z[-1] = bottom_depth_m``, shape
    ``(n_layers + 1,)``. [m]
    """
    if n_layers < 2:
        raise ValueError("depth_grid needs n_layers >= 2")
    if not (0.0 < first_layer_m * n_layers <= bottom_depth_m):
        raise ValueError(
            "depth_grid needs 0 < first_layer_m * n_layers <= bottom_depth_m "
            f"(got first_layer_m={first_layer_m}, n_layers={n_layers}, "
            f"bottom_depth_m={bottom_depth_m})"
        )
    target = bottom_depth_m / first_layer_m  # sum_{j<n} r**j
    if np.isclose(target, n_layers):
        ratio = 1.0
    else:
        lo, hi = 1.0, 2.0
        while (hi**n_layers - 1.0) / (hi - 1.0) < target:
            hi *= 2.0
        for _ in range(200):  # bisection on a monotone function; 200 halvings is exact
            mid = 0.5 * (lo + hi)
            if (mid**n_layers - 1.0) / (mid - 1.0) < target:
                lo = mid
            else:
                hi = mid
        ratio = 0.5 * (lo + hi)
    thickness = first_layer_m * ratio ** np.arange(n_layers)
    z = np.concatenate([[0.0], np.cumsum(thickness)])
    z[-1] = bottom_depth_m
    return z


# ------------------------------------------------------------------------ forcing


def daily_forcing_from_harmonics(
    mean: np.ndarray | float,
    cos_coef: np.ndarray,
    sin_coef: np.ndarray,
    n_days: int = 365,
) -> np.ndarray:
    """Daily surface temperature of one year from an annual harmonic fit.

    ``T(t) = mean + sum_n cos_coef[n-1] cos(n w t) + sin_coef[n-1] sin(n w t)``
    with ``w = 2 pi / 365.25 d-1`` and ``t`` in days since January 1st 00:00.
    The year is cut into ``n_days`` equal steps of ``365.25 / n_days`` days
    (1.000685 d for the default 365) and each sample is taken at the middle of
    its step, ``t_k = (k + 1/2) 365.25 / n_days``, so the series is exactly one
    period and repeats without a jump. Pass ``dt_days=365.25/n_days`` to the
    solver for an exact year, or ``dt_days=1.0`` (0.07 % shorter steps).

    Parameters
    ----------
    mean : Annual mean, shape ``cells``. [degC]
    cos_coef : Cosine coefficients of harmonics 1..H, shape ``(H, *cells)``. [K]
    sin_coef : Sine coefficients of harmonics 1..H, shape ``(H, *cells)``. [K]
    n_days : Number of time steps in the year. [1]

    Returns
    -------
    Surface temperature, shape ``(n_days, *cells)``. [degC]
    """
    mean = np.asarray(mean, dtype=np.float64)
    cos_coef = np.asarray(cos_coef, dtype=np.float64)
    sin_coef = np.asarray(sin_coef, dtype=np.float64)
    if cos_coef.shape != sin_coef.shape:
        raise ValueError("cos_coef and sin_coef must have the same shape (H, *cells)")
    omega = 2.0 * np.pi / DAYS_PER_YEAR
    t = (np.arange(n_days) + 0.5) * (DAYS_PER_YEAR / n_days)
    cells = np.broadcast_shapes(mean.shape, cos_coef.shape[1:])
    out = np.broadcast_to(mean, cells)[None, ...] * np.ones((n_days,) + (1,) * len(cells))
    for h in range(cos_coef.shape[0]):
        phase = (h + 1) * omega * t
        shape = (n_days,) + (1,) * len(cells)
        out = (
            out
            + np.cos(phase).reshape(shape) * cos_coef[h]
            + np.sin(phase).reshape(shape) * sin_coef[h]
        )
    return out


def _month_geometry(n_years: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Day centres, month midpoints and month index of each day (365-day years)."""
    starts = np.concatenate([[0], np.cumsum(MONTH_DAYS_365)[:-1]])
    year_offsets = 365 * np.arange(n_years)
    mid = (year_offsets[:, None] + starts[None, :] + MONTH_DAYS_365[None, :] / 2.0).ravel()
    day_centre = np.arange(365 * n_years) + 0.5
    month_of_day = np.repeat(np.tile(np.arange(12), n_years), np.tile(MONTH_DAYS_365, n_years))
    month_of_day = month_of_day + 12 * np.repeat(np.arange(n_years), 365)
    return day_centre, mid, month_of_day


def _linear_weights(day_centre: np.ndarray, mid: np.ndarray, cyclic: bool) -> np.ndarray:
    """Dense weights W (days x months) of linear interpolation between month midpoints."""
    n_months = mid.size
    n_days = day_centre.size
    w = np.zeros((n_days, n_months))
    if cyclic:
        period = 365.0 * (n_months // 12)
        xp = np.concatenate([[mid[-1] - period], mid, [mid[0] + period]])
        cols = np.concatenate([[n_months - 1], np.arange(n_months), [0]])
    else:
        xp = mid
        cols = np.arange(n_months)
    j = np.clip(np.searchsorted(xp, day_centre, side="right") - 1, 0, xp.size - 2)
    frac = (day_centre - xp[j]) / (xp[j + 1] - xp[j])
    frac = np.clip(frac, 0.0, 1.0)  # constant beyond the first/last midpoint (non-cyclic)
    rows = np.arange(n_days)
    np.add.at(w, (rows, cols[j]), 1.0 - frac)
    np.add.at(w, (rows, cols[j + 1]), frac)
    return w


def daily_forcing_from_monthly(
    monthly_degC: np.ndarray, method: str = "mean_preserving"
) -> np.ndarray:
    """Daily series from monthly means, 365 days per year.

    The days are the 365 days of a non-leap calendar (day ``k`` centred at
    ``t = k + 1/2`` days since January 1st). The daily curve is piecewise linear
    between nodes placed at the month midpoints:

    * ``method="linear"``: the node values are the monthly means themselves.
      This smooths the annual cycle: the monthly means of the daily curve come
      out slightly less extreme than the given ones.
    * ``method="mean_preserving"`` (default): the node values are solved so that
      the mean of the daily values over each calendar month equals the given
      monthly mean exactly (one linear system, shared by all cells). This keeps
      degree-day sums and the annual mean of the input.

    A single year (12 values) is treated as a climatology: the curve wraps from
    December to January. A longer series (12 Y values) is not wrapped: before
    mid-January of the first year and after mid-December of the last year the
    nearest node value is held constant.

    Parameters
    ----------
    monthly_degC : Monthly mean temperature, shape ``(12 Y, *cells)``. [degC]
    method : ``"mean_preserving"`` or ``"linear"``.

    Returns
    -------
    Daily temperature, shape ``(365 Y, *cells)``. [degC]
    """
    monthly = np.asarray(monthly_degC, dtype=np.float64)
    if monthly.ndim == 0 or monthly.shape[0] % 12 != 0 or monthly.shape[0] == 0:
        raise ValueError("monthly_degC needs 12 * Y values on axis 0")
    n_years = monthly.shape[0] // 12
    day_centre, mid, month_of_day = _month_geometry(n_years)
    w = _linear_weights(day_centre, mid, cyclic=(n_years == 1))
    flat = monthly.reshape(monthly.shape[0], -1)
    if method == "linear":
        nodes = flat
    elif method == "mean_preserving":
        avg = np.zeros((12 * n_years, 365 * n_years))
        avg[month_of_day, np.arange(365 * n_years)] = 1.0
        avg /= avg.sum(axis=1, keepdims=True)
        nodes = np.linalg.solve(avg @ w, flat)
    else:
        raise ValueError("method must be 'mean_preserving' or 'linear'")
    daily = w @ nodes
    return daily.reshape((365 * n_years,) + monthly.shape[1:])


def _fit_harmonics(first_year: np.ndarray, n_harmonics: int) -> tuple[np.ndarray, ...]:
    """Least-squares harmonic coefficients of equally spaced samples of one period."""
    n = first_year.shape[0]
    t = (np.arange(n) + 0.5) * (DAYS_PER_YEAR / n)
    omega = 2.0 * np.pi / DAYS_PER_YEAR
    mean = first_year.mean(axis=0)
    nh = min(n_harmonics, (n - 1) // 2)
    cos_c = np.empty((nh,) + first_year.shape[1:])
    sin_c = np.empty_like(cos_c)
    for h in range(nh):
        c = np.cos((h + 1) * omega * t)
        s = np.sin((h + 1) * omega * t)
        cos_c[h] = 2.0 / n * np.tensordot(c, first_year, axes=(0, 0))
        sin_c[h] = 2.0 / n * np.tensordot(s, first_year, axes=(0, 0))
    return mean, cos_c, sin_c


def periodic_initial_profile(
    mean_degC: np.ndarray | float,
    cos_coef: np.ndarray,
    sin_coef: np.ndarray,
    damping_depth_m: np.ndarray | float,
    grid_m: np.ndarray,
    *,
    t_days: np.ndarray | float = 0.0,
    bottom_heat_flux_w_m2: np.ndarray | float = 0.0,
    conductivity_w_mk: np.ndarray | float | None = None,
) -> np.ndarray:
    """Periodic analytic temperature profile (no phase change) as a starting state.

    For a surface temperature ``mean + sum_n a_n cos(n w t) + b_n sin(n w t)`` a
    homogeneous half-space without latent heat has (Carslaw & Jaeger 1959,
    Sec. 2.6)

    ``T(z, t) = mean + G z + sum_n exp(-z/d_n) [a_n cos(n w t - z/d_n)
    + b_n sin(n w t - z/d_n)]``,

    with ``d_n = d_1 / sqrt(n)`` the damping depth of harmonic ``n`` and
    ``G = q / k`` the steady geothermal gradient of a heat flux ``q`` entering
    from below (zero when ``conductivity_w_mk`` is None).

    Parameters
    ----------
    mean_degC : Annual mean surface temperature, shape ``cells``. [degC]
    cos_coef : Cosine coefficients, shape ``(H, *cells)``. [K]
    sin_coef : Sine coefficients, shape ``(H, *cells)``. [K]
    damping_depth_m : Annual damping depth ``sqrt(2 alpha / w)`` of the ground. [m]
    grid_m : Node depths, shape ``(nz,)``. [m]
    t_days : Time of the profile, days since January 1st 00:00 (scalar or
        per cell). [d]
    bottom_heat_flux_w_m2 : Geothermal heat flux into the column (positive
        upward). [W m-2]
    conductivity_w_mk : Conductivity for the geothermal gradient. [W m-1 K-1]

    Returns
    -------
    Temperature profile, shape ``(nz, *cells)``. [degC]

    References
    ----------
    Carslaw, H. S., Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed.
        Oxford University Press, Sec. 2.6.
    """
    z = np.asarray(grid_m, dtype=np.float64)
    mean = np.asarray(mean_degC, dtype=np.float64)
    cos_coef = np.asarray(cos_coef, dtype=np.float64)
    sin_coef = np.asarray(sin_coef, dtype=np.float64)
    d1 = np.asarray(damping_depth_m, dtype=np.float64)
    t_days = np.asarray(t_days, dtype=np.float64)
    cells = np.broadcast_shapes(mean.shape, cos_coef.shape[1:], d1.shape, t_days.shape)
    zz = z.reshape((-1,) + (1,) * len(cells))
    omega = 2.0 * np.pi / DAYS_PER_YEAR
    prof = np.broadcast_to(mean, cells) + np.zeros_like(zz)
    for h in range(cos_coef.shape[0]):
        dn = d1 / np.sqrt(h + 1.0)
        arg = (h + 1) * omega * t_days - zz / dn
        prof = prof + np.exp(-zz / dn) * (cos_coef[h] * np.cos(arg) + sin_coef[h] * np.sin(arg))
    if conductivity_w_mk is not None:
        prof = prof + zz * (np.asarray(bottom_heat_flux_w_m2) / np.asarray(conductivity_w_mk))
    return prof


def needs_freeze_thaw(
    surface_temperature_degC: np.ndarray,
    freezing_range_degC: tuple[float, float] = (-1.0, 0.0),
    initial_profile_degC: np.ndarray | None = None,
) -> np.ndarray:
    """Cells where ice can form, so the freeze-thaw solver is needed.

    With a Dirichlet surface and a bottom heat flux that is zero or upward
    (into the column), the ground is never colder than the coldest of the
    surface forcing and the initial profile (maximum principle of the heat
    equation). A cell whose surface minimum and initial profile stay at or
    above the upper bound of the freezing range never freezes; the periodic
    analytic solution (no latent heat) is exact for it.

    Parameters
    ----------
    surface_temperature_degC : Surface temperature, shape ``(time, *cells)``. [degC]
    freezing_range_degC : Freezing range ``(T_f1, T_f2)``. [degC]
    initial_profile_degC : Optional initial profile, shape ``(nz, *cells)``. [degC]

    Returns
    -------
    Boolean mask, shape ``cells``: True where ``min T < T_f2``. NaN cells are
    False.
    """
    t_hi = float(freezing_range_degC[1])
    ts = np.asarray(surface_temperature_degC, dtype=np.float64)
    cold = np.nanmin(np.where(np.isnan(ts), np.inf, ts), axis=0)
    if initial_profile_degC is not None:
        ip = np.asarray(initial_profile_degC, dtype=np.float64)
        cold = np.minimum(cold, np.min(np.where(np.isnan(ip), np.inf, ip), axis=0))
    return cold < t_hi


# ------------------------------------------------------------------------ kernel
#
# The kernel advances a block of B "slots" together, one cell per slot, so that
# the innermost loops run over slots (independent cells: SIMD and instruction-
# level parallelism instead of the serial dependency chain of one tridiagonal
# solve). Each slot runs its own cell's programme (spin-up passes, then the
# recorded years); when a cell is done its slot takes the next cell, so cells
# with long spin-ups do not hold up the others.

_FASTMATH = {"nsz", "arcp", "contract", "afn", "reassoc"}  # no nnan/ninf: NaN and inf are used


@njit(cache=True, nogil=True)
def _frost_depth_from_envelope(env, s, z, t_hi):  # pragma: no cover - compiled
    """Deepest depth where the minimum envelope env[:, s] crosses t_hi upward."""
    nz = z.shape[0]
    if env[nz - 1, s] < t_hi:
        return z[nz - 1]
    for i in range(nz - 2, -1, -1):
        if env[i, s] < t_hi:
            return z[i] + (t_hi - env[i, s]) / (env[i + 1, s] - env[i, s]) * (z[i + 1] - z[i])
    return 0.0


@njit(cache=True, nogil=True)
def _reset_winter(s, thawed, tmn_w):  # pragma: no cover - compiled
    """Start a new pass of slot s for the winter's own frost envelope."""
    for i in range(thawed.shape[0]):
        thawed[i, s] = False
        tmn_w[i, s] = np.inf


@njit(cache=True, nogil=True)
def _thaw_depth_from_envelope(env, s, z, t_hi):  # pragma: no cover - compiled
    """Depth where the maximum envelope env[:, s] first drops below t_hi (NaN if never)."""
    nz = z.shape[0]
    if env[0, s] < t_hi:
        return 0.0
    for i in range(1, nz):
        if env[i, s] < t_hi:
            return z[i - 1] + (env[i - 1, s] - t_hi) / (env[i - 1, s] - env[i, s]) * (
                z[i] - z[i - 1]
            )
    return np.nan


@njit(cache=True, nogil=True)
def _load_slot(
    s,
    c,
    par,
    ku_a,
    kf_a,
    cu_a,
    cf_a,
    lv_a,
    qb_a,
    t_init,
    t_lo,
    t_hi,
    T,
    H,
    t_start,
    tmn,
    tmx,
    tsum,
    fdays,
    tmin_c,
    tmax_c,
):  # pragma: no cover - compiled
    """Put cell c into slot s: constants, initial profile and enthalpy, empty statistics."""
    dtr = t_hi - t_lo
    kf = kf_a[c]
    cf = cf_a[c]
    cu = cu_a[c]
    lv = lv_a[c]
    par[0, s] = kf
    par[1, s] = ku_a[c] - kf
    par[2, s] = cf
    par[3, s] = cu - cf
    par[4, s] = 1.0 / cf
    par[5, s] = 1.0 / cu
    par[6, s] = lv
    par[7, s] = lv / dtr
    par[8, s] = qb_a[c]
    par[9, s] = dtr * 0.5 * (cf + cu) + lv
    par[10, s] = 0.5 * (cu - cf) * dtr
    par[11, s] = cf * dtr + lv
    for i in range(T.shape[0]):
        tt = t_init[i, c]
        T[i, s] = tt
        t_start[i, s] = tt
        phi = min(max((tt - t_lo) / dtr, 0.0), 1.0)
        H[i, s] = (
            cf * min(tt - t_lo, 0.0)
            + phi * (dtr * (cf + 0.5 * (cu - cf) * phi) + lv)
            + cu * max(tt - t_hi, 0.0)
        )
        tmn[i, s] = np.inf
        tmx[i, s] = -np.inf
        tsum[i, s] = 0.0
    for j in range(fdays.shape[0]):
        fdays[j, s] = 0.0
        tmin_c[j, s] = np.inf
        tmax_c[j, s] = -np.inf


@njit(cache=True, nogil=True)
def _deep_mean_correction(
    s, T, H, tsum, tmn, tmx, z, nsteps, t_lo, t_hi, par
):  # pragma: no cover - compiled
    """Spin-up acceleration: put the deep annual-mean profile at its periodic form.

    In the periodic state the annual-mean heat flux is the same at every depth
    (the bottom heat flux ``q``), so wherever a node's conductivity stays
    (nearly) constant over the year its annual-mean temperature follows
    ``d(mean T)/dz = q / k`` (the latent and sensible storage terms average out).
    That holds below the deepest node whose temperature swept through the
    freezing range during the year (swing above ``_ACCEL_SWING_K``). The slow
    drift of that deep mean (zero curtain, permafrost) is what makes spin-up
    take decades; between spin-up years this shifts each deep node by
    (target mean - current mean), integrating ``q / k`` down from the anchor
    node, and recomputes its enthalpy. The shallow part is left to the time
    stepping, and the spin-up test (change of the January-1st profile over a
    year without correction) decides convergence.
    """
    nz = z.shape[0]
    kf = par[0, s]
    ku = kf + par[1, s]
    cf = par[2, s]
    cu = cf + par[3, s]
    lv = par[6, s]
    qb = par[8, s]
    dtr = t_hi - t_lo
    p = 0
    for i in range(nz - 1, 0, -1):
        if tmn[i, s] < t_hi and tmx[i, s] > t_lo and tmx[i, s] - tmn[i, s] > _ACCEL_SWING_K:
            p = i
            break
    target = tsum[p, s] / nsteps
    k_prev = kf + (ku - kf) * min(max((target - t_lo) / dtr, 0.0), 1.0)
    shift_max = 0.0
    for i in range(p + 1, nz):
        k_i = kf + (ku - kf) * min(max((tsum[i, s] / nsteps - t_lo) / dtr, 0.0), 1.0)
        k_face = 2.0 * k_prev * k_i / (k_prev + k_i)
        target += qb * (z[i] - z[i - 1]) / k_face
        k_prev = k_i
        shift = target - tsum[i, s] / nsteps
        shift_max = max(shift_max, abs(shift))
        tt = T[i, s] + shift
        T[i, s] = tt
        phi = min(max((tt - t_lo) / dtr, 0.0), 1.0)
        H[i, s] = (
            cf * min(tt - t_lo, 0.0)
            + phi * (dtr * (cf + 0.5 * (cu - cf) * phi) + lv)
            + cu * max(tt - t_hi, 0.0)
        )
    return shift_max


@njit(cache=True, nogil=True, fastmath=_FASTMATH, error_model="numpy")
def _freeze_thaw_kernel(
    ts,
    ku_a,
    kf_a,
    cu_a,
    cf_a,
    lv_a,
    qb_a,
    z,
    t_init,
    t_lo,
    t_hi,
    dt_s,
    dt_days,
    spy,
    n_years,
    max_spin,
    spin_tol,
    k_first,
    accelerate,
    out_idx,
    out_w,
    record,
    block,
    frost_y,
    thaw_y,
    peren_y,
    fdays_y,
    frost_a,
    thaw_a,
    peren_a,
    fdays_a,
    tmin_o,
    tmax_o,
    spin_n,
    spin_ok,
    prof_start,
    prof_end,
    heat_in,
    bad_out,
    iter_out,
    series,
):  # pragma: no cover - compiled
    nz = z.shape[0]
    nl = nz - 1  # index of the bottom node; unknowns are nodes 1..nl
    n_cells = ts.shape[1]
    n_out = out_idx.shape[0]
    dtr = t_hi - t_lo
    inv_dtr = 1.0 / dtr
    if n_cells == 0:
        return
    nb = min(block, n_cells)
    # geometry shared by all cells (node-centred finite volumes)
    vol_dt = np.zeros(nz)
    rdz = np.zeros(nz)
    for i in range(1, nz):
        rdz[i] = 1.0 / (z[i] - z[i - 1])
        if i < nl:
            vol_dt[i] = 0.5 * (z[i + 1] - z[i - 1]) / dt_s
        else:
            vol_dt[i] = 0.5 * (z[i] - z[i - 1]) / dt_s
    # per-slot constants
    cell = np.zeros(nb, dtype=np.int64)
    active = np.zeros(nb, dtype=np.bool_)
    kstep = np.zeros(nb, dtype=np.int64)
    offset = np.zeros(nb, dtype=np.int64)
    year = np.zeros(nb, dtype=np.int64)
    nspin = np.zeros(nb, dtype=np.int64)
    heat = np.zeros(nb)
    bad = np.zeros(nb, dtype=np.int64)
    iters = np.zeros(nb, dtype=np.int64)
    corr = np.zeros(nb)  # largest shift of the last spin-up correction
    sflag = np.zeros(nb, dtype=np.int64)
    done = np.zeros(nb, dtype=np.bool_)  # converged in this time step
    qsurf = np.zeros(nb)  # surface heat flux of the accepted iterate
    par = np.ones((12, nb))  # per-slot constants, filled by _load_slot
    kf = par[0]
    dk = par[1]  # ku - kf
    cf = par[2]
    dc = par[3]  # cu - cf
    icf = par[4]  # 1 / cf
    icu = par[5]  # 1 / cu
    lvd = par[7]  # lv / (T_f2 - T_f1)
    qb = par[8]
    hhi = par[9]  # enthalpy at T_f2
    qa = par[10]  # quadratic coefficient of H(phi) in the freezing range
    qbb = par[11]  # linear coefficient of H(phi) in the freezing range
    gl = np.zeros(nb)
    g0 = np.zeros(nb)  # surface conductance of the last linear solve
    # per-slot profiles and statistics
    T = np.zeros((nz, nb))
    H = np.zeros((nz, nb))
    Hold = np.zeros((nz, nb))
    K = np.ones((nz, nb))
    C = np.ones((nz, nb))
    cp = np.zeros((nz, nb))
    dp = np.zeros((nz, nb))
    x = np.zeros((nz, nb))
    t_start = np.zeros((nz, nb))
    tmn = np.zeros((nz, nb))
    tmx = np.zeros((nz, nb))
    tmn_a = np.zeros((nz, nb))
    tmx_a = np.zeros((nz, nb))
    # a winter's own frost: the minimum of each node after it has been at or above t_hi
    # in this pass (thawed), so that frost left over from the previous winter is not
    # counted again; a node below t_hi all pass is frozen through this winter
    thawed = np.zeros((nz, nb), dtype=np.bool_)
    tmn_w = np.zeros((nz, nb))
    env_w = np.zeros((nz, nb))
    tsum = np.zeros((nz, nb))  # sum of T over the current pass (annual means)
    fdays = np.zeros((n_out, nb))
    tmin_c = np.zeros((n_out, nb))
    tmax_c = np.zeros((n_out, nb))

    next_cell = 0
    n_active = 0
    while True:
        # ---- free slots (all of them at the start) take the next cells
        for s in range(nb):
            if active[s] or next_cell >= n_cells:
                continue
            c = next_cell
            next_cell += 1
            cell[s] = c
            active[s] = True
            n_active += 1
            kstep[s] = k_first[c]
            offset[s] = 0
            year[s] = 0
            nspin[s] = -1 if k_first[c] > 0 else 0  # -1: part-year pre-pass
            heat[s] = 0.0
            bad[s] = 0
            iters[s] = 0
            corr[s] = 0.0
            _load_slot(s, c, par, ku_a, kf_a, cu_a, cf_a, lv_a, qb_a, t_init, t_lo, t_hi,
                       T, H, t_start, tmn, tmx, tsum, fdays, tmin_c, tmax_c)  # fmt: skip
            _reset_winter(s, thawed, tmn_w)
        if n_active == 0:
            break
        # ---- one implicit time step for all slots
        for s in range(nb):
            if active[s]:
                T[0, s] = ts[offset[s] + kstep[s], cell[s]]
        for i in range(nz):
            for s in range(nb):
                Hold[i, s] = H[i, s]
        for s in range(nb):
            phi = min(max((T[0, s] - t_lo) * inv_dtr, 0.0), 1.0)
            K[0, s] = kf[s] + dk[s] * phi
        for _it in range(_MAX_ITER):
            for i in range(1, nz):
                for s in range(nb):
                    tt = T[i, s]
                    phi = min(max((tt - t_lo) * inv_dtr, 0.0), 1.0)
                    K[i, s] = kf[s] + dk[s] * phi
                    lat = lvd[s] if (tt >= t_lo and tt < t_hi) else 0.0
                    C[i, s] = cf[s] + dc[s] * phi + lat
            # assemble and forward sweep (Thomas); lower = -g_left, upper = -g_right
            for s in range(nb):
                k0 = K[0, s]
                k1 = K[1, s]
                gl[s] = 2.0 * k0 * k1 / (k0 + k1) * rdz[1]
                g0[s] = gl[s]
            for s in range(nb):
                k1 = K[1, s]
                k2 = K[2, s]
                gr = 2.0 * k1 * k2 / (k1 + k2) * rdz[2]
                rhs = vol_dt[1] * (C[1, s] * T[1, s] - H[1, s] + Hold[1, s]) + gl[s] * T[0, s]
                diag = vol_dt[1] * C[1, s] + gl[s] + gr
                inv = 1.0 / diag
                dp[1, s] = rhs * inv
                cp[1, s] = -gr * inv
                gl[s] = gr
            for i in range(2, nl):
                vi = vol_dt[i]
                ri = rdz[i + 1]
                for s in range(nb):
                    ka = K[i, s]
                    kb = K[i + 1, s]
                    gr = 2.0 * ka * kb / (ka + kb) * ri
                    g = gl[s]
                    rhs = vi * (C[i, s] * T[i, s] - H[i, s] + Hold[i, s])
                    inv = 1.0 / (vi * C[i, s] + g + gr + g * cp[i - 1, s])
                    dp[i, s] = (rhs + g * dp[i - 1, s]) * inv
                    cp[i, s] = -gr * inv
                    gl[s] = gr
            vi = vol_dt[nl]
            for s in range(nb):
                g = gl[s]
                rhs = vi * (C[nl, s] * T[nl, s] - H[nl, s] + Hold[nl, s]) + qb[s]
                inv = 1.0 / (vi * C[nl, s] + g + g * cp[nl - 1, s])
                dp[nl, s] = (rhs + g * dp[nl - 1, s]) * inv
                cp[nl, s] = 0.0
            for s in range(nb):
                x[nl, s] = dp[nl, s]
            for i in range(nl - 1, 0, -1):
                for s in range(nb):
                    x[i, s] = dp[i, s] - cp[i, s] * x[i + 1, s]
            # Swaminathan & Voller (1992): H from the linearisation, then T = T(H).
            # Slots that converged in an earlier iteration keep their state, so a
            # cell's result does not depend on the other cells of its block.
            for s in range(nb):
                sflag[s] = 0
            for i in range(1, nz):
                for s in range(nb):
                    h_new = H[i, s] + C[i, s] * (x[i, s] - T[i, s])
                    hm = min(max(h_new, 0.0), hhi[s])
                    phi = 2.0 * hm / (qbb[s] + np.sqrt(qbb[s] * qbb[s] + 4.0 * qa[s] * hm))
                    t_new = (
                        t_lo
                        + phi * dtr
                        + min(h_new, 0.0) * icf[s]
                        + max(h_new - hhi[s], 0.0) * icu[s]
                    )
                    k_new = kf[s] + dk[s] * min(max((t_new - t_lo) * inv_dtr, 0.0), 1.0)
                    off = (abs(t_new - x[i, s]) > _TOL_T_K) or (
                        abs(k_new - K[i, s]) > _TOL_K_REL * K[i, s]
                    )
                    if not done[s]:
                        sflag[s] += 1 if off else 0
                        H[i, s] = h_new
                        T[i, s] = t_new
            n_off = 0
            for s in range(nb):
                if not done[s]:
                    iters[s] += 1
                    # surface flux of this linear solve: with the enthalpy update it
                    # balances the change of column enthalpy exactly (telescoping)
                    qsurf[s] = g0[s] * (T[0, s] - x[1, s])
                    if sflag[s] == 0:
                        done[s] = True
                    elif active[s]:
                        n_off += 1
            if n_off == 0:
                break
        for s in range(nb):
            if not done[s]:
                bad[s] += 1
            done[s] = False
        # ---- bookkeeping: heat balance, envelopes, output depths
        for s in range(nb):
            heat[s] += (qsurf[s] + qb[s]) * dt_s
        for i in range(nz):
            for s in range(nb):
                tt = T[i, s]
                tmn[i, s] = min(tmn[i, s], tt)
                tmx[i, s] = max(tmx[i, s], tt)
                tsum[i, s] += tt
                thawed[i, s] |= tt >= t_hi
                tmn_w[i, s] = min(tmn_w[i, s], tt if thawed[i, s] else np.inf)
        for j in range(n_out):
            ii = out_idx[j]
            ww = out_w[j]
            for s in range(nb):
                tz = T[ii, s] + ww * (T[ii + 1, s] - T[ii, s])
                fdays[j, s] += dt_days if tz < 0.0 else 0.0  # days below 0 degC
                tmin_c[j, s] = min(tmin_c[j, s], tz)
                tmax_c[j, s] = max(tmax_c[j, s], tz)
                if record and active[s]:
                    series[offset[s] + kstep[s], j, cell[s]] = tz
        # ---- per-slot calendar: end of a year, end of a cell, refill
        for s in range(nb):
            if not active[s]:
                continue
            kstep[s] += 1
            if kstep[s] < spy:
                continue
            kstep[s] = 0
            c = cell[s]
            finished = False
            if year[s] == 0:
                change = 0.0
                for i in range(1, nz):
                    change = max(change, abs(T[i, s] - t_start[i, s]))
                # periodic within the tolerance, and not moved by the last correction
                conv = change < spin_tol and corr[s] < spin_tol and nspin[s] >= 0
                if nspin[s] >= 0 and (conv or nspin[s] >= max_spin):
                    spin_n[c] = nspin[s]
                    spin_ok[c] = conv
                    for i in range(nz):
                        prof_start[i, c] = t_start[i, s]
                    year[s] = 1  # year 1 done; record it below
                else:
                    if nspin[s] >= 0 and accelerate:
                        corr[s] = _deep_mean_correction(
                            s, T, H, tsum, tmn, tmx, z, spy, t_lo, t_hi, par
                        )
                    nspin[s] += 1
                    heat[s] = 0.0
                    for i in range(nz):
                        t_start[i, s] = T[i, s]
                        tmn[i, s] = np.inf
                        tmx[i, s] = -np.inf
                        tsum[i, s] = 0.0
                    for j in range(n_out):
                        fdays[j, s] = 0.0
                        tmin_c[j, s] = np.inf
                        tmax_c[j, s] = -np.inf
                    _reset_winter(s, thawed, tmn_w)
                    continue
            else:
                year[s] += 1
            y = year[s] - 1  # index of the year just completed
            for i in range(nz):
                env_w[i, s] = tmn_w[i, s] if thawed[i, s] else tmn[i, s]
            frost_y[y, c] = _frost_depth_from_envelope(env_w, s, z, t_hi)
            _reset_winter(s, thawed, tmn_w)
            th = _thaw_depth_from_envelope(tmx, s, z, t_hi)
            thaw_y[y, c] = th
            peren_y[y, c] = th == th
            for j in range(n_out):
                fdays_y[y, j, c] = fdays[j, s]
                fdays[j, s] = 0.0
            for i in range(nz):
                if y == 0:
                    tmn_a[i, s] = tmn[i, s]
                    tmx_a[i, s] = tmx[i, s]
                else:
                    tmn_a[i, s] = min(tmn_a[i, s], tmn[i, s])
                    tmx_a[i, s] = max(tmx_a[i, s], tmx[i, s])
                tmn[i, s] = np.inf
                tmx[i, s] = -np.inf
            offset[s] = year[s] * spy
            finished = year[s] >= n_years
            if not finished:
                continue
            frost_a[c] = _frost_depth_from_envelope(tmn_a, s, z, t_hi)
            th = _thaw_depth_from_envelope(tmx_a, s, z, t_hi)
            thaw_a[c] = th
            peren_a[c] = th == th
            for j in range(n_out):
                acc = 0.0
                for yy in range(n_years):
                    acc += fdays_y[yy, j, c]
                fdays_a[j, c] = acc / n_years
                tmin_o[j, c] = tmin_c[j, s]
                tmax_o[j, c] = tmax_c[j, s]
            for i in range(nz):
                prof_end[i, c] = T[i, s]
            heat_in[c] = heat[s]
            bad_out[c] = bad[s]
            iter_out[c] = iters[s]
            active[s] = False  # refilled at the top of the next step
            n_active -= 1


# ---------------------------------------------------------------------- wrappers


class FreezeThawResult(NamedTuple):
    """Result of :func:`solve_freeze_thaw` (cells on the trailing axes).

    Attributes
    ----------
    frost_depth_m : Maximum depth of the ``T_f2`` isotherm (0 degC by default)
        over the record: the deepest depth at which the minimum-temperature
        envelope crosses ``T_f2`` (linear between nodes). 0 where the ground
        never freezes; the grid bottom when the envelope is still frozen there
        (perennially frozen ground deeper than the grid). For perennially frozen
        cells it is the base of the frozen ground, not a seasonal frost depth:
        use ``thaw_depth_m`` there. [m]
    thaw_depth_m : Active-layer thickness of perennially frozen cells: depth at
        which the maximum-temperature envelope first drops below ``T_f2``; NaN
        for cells with no node frozen all through the record. [m]
    perennially_frozen : True where some node stays frozen (``T < T_f2``) all
        through the record. [bool]
    frozen_days : Days per year each output depth is below 0 degC (mean over the
        years of the record). [d]
    t_min_degC : Minimum temperature at each output depth over the record. [degC]
    t_max_degC : Maximum temperature at each output depth over the record. [degC]
    spinup_years : Full spin-up years run before the recorded series (plus a
        part-year from the warm-season start with the analytic start). [1]
    spinup_converged : True where the January-1st profile repeated within the
        tolerance. [bool]
    frost_depth_per_year_m : Frost depth of each year of the record, ``(Y, ...)``:
        that year's own frost. A node counts once it has been at or above ``T_f2``
        in that year and then falls below it, or when it stays below ``T_f2`` all
        year; ground still frozen from the winter before that thaws during the year
        does not count again. [m]
    thaw_depth_per_year_m : Thaw depth of each year, ``(Y, ...)`` (NaN when that
        year had no node frozen all year). [m]
    frozen_days_per_year : Frozen days of each year and output depth,
        ``(Y, D, ...)``. [d]
    depths_out_m : Output depths, ``(D,)``. [m]
    grid_m : Node depths of the solver grid, ``(nz,)``. [m]
    start_profile_degC : Profile at the start of the recorded series (January
        1st after spin-up), ``(nz, ...)``. [degC]
    final_profile_degC : Profile at the end of the record, ``(nz, ...)``. [degC]
    surface_heat_in_j_m2 : Heat that entered the column through the surface and
        the bottom over the record (positive into the ground). [J m-2]
    unconverged_steps : Time steps (spin-up included) whose non-linear
        iteration hit the iteration limit; 0 in normal runs. [1]
    iterations : Linear solves done for the cell (spin-up included); divided by
        the number of steps it is the mean number of non-linear iterations. [1]
    """

    frost_depth_m: np.ndarray
    thaw_depth_m: np.ndarray
    perennially_frozen: np.ndarray
    frozen_days: np.ndarray
    t_min_degC: np.ndarray
    t_max_degC: np.ndarray
    spinup_years: np.ndarray
    spinup_converged: np.ndarray
    frost_depth_per_year_m: np.ndarray
    thaw_depth_per_year_m: np.ndarray
    frozen_days_per_year: np.ndarray
    depths_out_m: np.ndarray
    grid_m: np.ndarray
    start_profile_degC: np.ndarray
    final_profile_degC: np.ndarray
    surface_heat_in_j_m2: np.ndarray
    unconverged_steps: np.ndarray
    iterations: np.ndarray


class FreezeThawRun(NamedTuple):
    """Result of :func:`integrate_freeze_thaw` (cells on the trailing axes).

    Attributes
    ----------
    temperature_degC : Temperature at the output depths after each step,
        ``(nsteps, D, ...)``. [degC]
    final_profile_degC : Profile after the last step, ``(nz, ...)``. [degC]
    surface_heat_in_j_m2 : Heat that entered through surface and bottom. [J m-2]
    frost_depth_m : Deepest crossing of ``T_f2`` by the minimum envelope. [m]
    unconverged_steps : Steps that hit the iteration limit. [1]
    """

    temperature_degC: np.ndarray
    final_profile_degC: np.ndarray
    surface_heat_in_j_m2: np.ndarray
    frost_depth_m: np.ndarray
    unconverged_steps: np.ndarray


def _kernel_array(a, dtype=np.float64) -> np.ndarray:
    """C-contiguous, writable array of one dtype: one compiled kernel signature."""
    return np.require(a, dtype=dtype, requirements=["C_CONTIGUOUS", "WRITEABLE", "ALIGNED"])


def _as_cells(a, cells: tuple[int, ...], name: str) -> np.ndarray:
    arr = np.asarray(a, dtype=np.float64)
    try:
        arr = np.broadcast_to(arr, cells)
    except ValueError as err:
        raise ValueError(f"{name} of shape {arr.shape} does not fit the cells {cells}") from err
    return _kernel_array(arr.reshape(-1))


def _output_interp(depths_out_m, z: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    d = np.atleast_1d(np.asarray(depths_out_m, dtype=np.float64))
    if d.ndim != 1:
        raise ValueError("depths_out_m must be 1-D")
    if np.any(d < 0.0) or np.any(d > z[-1]) or np.any(np.isnan(d)):
        raise ValueError(f"depths_out_m must lie within the grid, 0..{z[-1]} m")
    idx = np.clip(np.searchsorted(z, d, side="right") - 1, 0, z.size - 2)
    w = (d - z[idx]) / (z[idx + 1] - z[idx])
    return d, idx.astype(np.int64), w


def _check_range(freezing_range_degC: Sequence[float]) -> tuple[float, float]:
    t_lo, t_hi = (float(v) for v in freezing_range_degC)
    if not t_hi > t_lo:
        raise ValueError("freezing_range_degC must be (T_f1, T_f2) with T_f2 > T_f1")
    return t_lo, t_hi


_BLOCK = 32  # cells advanced together by the kernel (tuned in benchmarks/bench_freezethaw.py)


def _run(
    ts,
    ku,
    kf,
    cu,
    cf,
    water,
    qb,
    z,
    t_init,
    t_lo,
    t_hi,
    dt_days,
    spy,
    n_years,
    max_spin,
    spin_tol,
    k_first,
    idx,
    w,
    record,
    accelerate=True,
):
    """Run the kernel on the valid cells; invalid cells (NaN or non-physical) get NaN."""
    n = ts.shape[1]
    nz = z.size
    d = idx.size
    lv = water * (WATER_DENSITY_KG_M3 * LATENT_HEAT_FUSION_J_KG)
    valid = (
        (ku > 0)
        & (kf > 0)
        & (cu > 0)
        & (cf > 0)
        & (water >= 0)
        & np.isfinite(qb)
        & np.isfinite(ku)
        & np.isfinite(kf)
        & np.isfinite(cu)
        & np.isfinite(cf)
        & np.isfinite(lv)
        & np.all(np.isfinite(ts), axis=0)
        & np.all(np.isfinite(t_init), axis=0)
    )
    all_valid = bool(valid.all())
    sel = slice(None) if all_valid else np.flatnonzero(valid)
    m = n if all_valid else int(valid.sum())

    def pick(a):
        return a if all_valid else _kernel_array(a[..., sel])

    shapes = {
        "frost_y": ((n_years, m), np.float64),
        "thaw_y": ((n_years, m), np.float64),
        "peren_y": ((n_years, m), np.bool_),
        "fdays_y": ((n_years, d, m), np.float64),
        "frost_a": ((m,), np.float64),
        "thaw_a": ((m,), np.float64),
        "peren_a": ((m,), np.bool_),
        "fdays_a": ((d, m), np.float64),
        "tmin_o": ((d, m), np.float64),
        "tmax_o": ((d, m), np.float64),
        "spin_n": ((m,), np.int32),
        "spin_ok": ((m,), np.bool_),
        "prof_start": ((nz, m), np.float64),
        "prof_end": ((nz, m), np.float64),
        "heat_in": ((m,), np.float64),
        "bad": ((m,), np.int32),
        "iters": ((m,), np.int64),
        "series": (((ts.shape[0], d, m) if record else (1, 1, 1)), np.float64),
    }
    out = {k: np.zeros(shape, dtype=dt) for k, (shape, dt) in shapes.items()}
    _freeze_thaw_kernel(
        pick(ts),
        pick(ku),
        pick(kf),
        pick(cu),
        pick(cf),
        pick(lv),
        pick(qb),
        z,
        pick(t_init),
        t_lo,
        t_hi,
        dt_days * SECONDS_PER_DAY,
        dt_days,
        spy,
        n_years,
        max_spin,
        spin_tol,
        pick(k_first),
        accelerate,
        idx,
        w,
        record,
        _BLOCK,
        out["frost_y"],
        out["thaw_y"],
        out["peren_y"],
        out["fdays_y"],
        out["frost_a"],
        out["thaw_a"],
        out["peren_a"],
        out["fdays_a"],
        out["tmin_o"],
        out["tmax_o"],
        out["spin_n"],
        out["spin_ok"],
        out["prof_start"],
        out["prof_end"],
        out["heat_in"],
        out["bad"],
        out["iters"],
        out["series"],
    )
    if all_valid:
        return out
    full = {}
    for key, (shape, dt) in shapes.items():
        if key == "series" and not record:
            full[key] = out[key]
            continue
        fill = np.nan if dt == np.float64 else 0
        arr = np.full(shape[:-1] + (n,), fill, dtype=dt)
        arr[..., sel] = out[key]
        full[key] = arr
    return full


def _prepare(
    surface_temperature_degC,
    ku,
    kf,
    cu,
    cf,
    water,
    qb,
    dt_days,
) -> tuple[np.ndarray, tuple[int, ...], list[np.ndarray]]:
    ts = np.asarray(surface_temperature_degC, dtype=np.float64)
    if ts.ndim < 1 or ts.shape[0] < 1:
        raise ValueError("surface_temperature_degC needs time on axis 0")
    if not dt_days > 0:
        raise ValueError("dt_days must be positive")
    cells = ts.shape[1:]
    ts2 = _kernel_array(ts.reshape(ts.shape[0], -1))
    props = [
        _as_cells(ku, cells, "conductivity_unfrozen_w_mk"),
        _as_cells(kf, cells, "conductivity_frozen_w_mk"),
        _as_cells(cu, cells, "heat_capacity_unfrozen_j_m3k"),
        _as_cells(cf, cells, "heat_capacity_frozen_j_m3k"),
        _as_cells(water, cells, "water_m3m3"),
        _as_cells(qb, cells, "bottom_heat_flux_w_m2"),
    ]
    return ts2, cells, props


# The analytic start is taken in the warm season, when the no-latent-heat
# profile holds the least ice: a quarter of a radian of the annual wave after
# the surface maximum (about 15 d; the subsurface maximum lags 58 d per damping
# depth). A numerical choice that shortens spin-up; the result does not depend
# on it once spun up.
_WARM_START_LAG_RAD = 0.25


def _initial_profile(
    initial_profile_degC,
    ts2,
    cells,
    z,
    ku,
    cu,
    qb,
    spy,
    dt_days,
    t_lo,
    t_hi,
    phase_by_mean=True,
) -> tuple[np.ndarray, np.ndarray]:
    """Initial profiles (nz, n) and the step index each cell starts at.

    An analytic start (no latent heat) overstates frost and thaw penetration
    and, taken literally, leaves seasonal ice (or thaw) at depth that melts
    (freezes) only over decades in the zero curtain. Each node therefore starts
    in the phase of its annual mean: ice-free (``T >= T_f2``) where the mean is
    at or above ``T_f2``, fully frozen (``T <= T_f1``) elsewhere.
    """
    n = ts2.shape[1]
    damping = np.sqrt(2.0 * (ku / cu) / (2.0 * np.pi / (DAYS_PER_YEAR * SECONDS_PER_DAY)))
    if initial_profile_degC is None or isinstance(initial_profile_degC, tuple | list):
        if initial_profile_degC is None:
            mean, cos_c, sin_c = _fit_harmonics(ts2[:spy], n_harmonics=3)
        else:
            parts = list(initial_profile_degC)
            if len(parts) not in (3, 4):
                raise ValueError(
                    "initial_profile_degC as a tuple is "
                    "(mean, cos_coef, sin_coef[, damping_depth_m])"
                )
            mean = _as_cells(parts[0], cells, "initial mean")
            cos_c = np.asarray(parts[1], dtype=np.float64).reshape(len(parts[1]), -1)
            sin_c = np.asarray(parts[2], dtype=np.float64).reshape(len(parts[2]), -1)
            if len(parts) == 4:
                damping = _as_cells(parts[3], cells, "initial damping_depth_m")
        omega = 2.0 * np.pi / DAYS_PER_YEAR
        if cos_c.shape[0] > 0:
            phase = np.arctan2(sin_c[0], cos_c[0]) + _WARM_START_LAG_RAD
            t_warm = np.mod(phase / omega, DAYS_PER_YEAR)
            t_warm = np.nan_to_num(t_warm)  # NaN cells are skipped by the kernel
            k_first = np.round(t_warm / dt_days).astype(np.int64) % spy
            k_first = np.broadcast_to(k_first, (n,)).copy()
        else:
            k_first = np.zeros(n, dtype=np.int64)
        prof = periodic_initial_profile(
            mean,
            cos_c,
            sin_c,
            damping,
            z,
            t_days=k_first * dt_days,
            bottom_heat_flux_w_m2=qb,
            conductivity_w_mk=ku,
        )
        if phase_by_mean:
            mean_prof = np.broadcast_to(mean, (n,))[None, :] + z[:, None] * (qb / ku)[None, :]
            prof = np.where(mean_prof >= t_hi, np.maximum(prof, t_hi), np.minimum(prof, t_lo))
    else:
        prof = np.asarray(initial_profile_degC, dtype=np.float64)
        if prof.shape[0] != z.size:
            raise ValueError(
                f"initial_profile_degC has {prof.shape[0]} depths, the grid has {z.size}"
            )
        prof = np.broadcast_to(prof.reshape(z.size, -1), (z.size, n))
        k_first = np.zeros(n, dtype=np.int64)
    prof = _kernel_array(np.broadcast_to(prof, (z.size, n)))
    return prof, _kernel_array(k_first, np.int64)


def solve_freeze_thaw(
    surface_temperature_degC: np.ndarray,
    conductivity_unfrozen_w_mk: np.ndarray | float,
    conductivity_frozen_w_mk: np.ndarray | float,
    heat_capacity_unfrozen_j_m3k: np.ndarray | float,
    heat_capacity_frozen_j_m3k: np.ndarray | float,
    water_m3m3: np.ndarray | float,
    depths_out_m: Sequence[float] | np.ndarray,
    *,
    freezing_range_degC: tuple[float, float] = (-1.0, 0.0),
    bottom_heat_flux_w_m2: np.ndarray | float = 0.0,
    dt_days: float = 1.0,
    initial_profile_degC: np.ndarray | tuple | None = None,
    grid_m: np.ndarray | None = None,
    spinup_tolerance_K: float = 0.01,
    max_spinup_years: int = 30,
) -> FreezeThawResult:
    """Periodic freeze-thaw regime of the ground under a daily surface forcing.

    Solves the enthalpy form of the 1-D heat equation (see the module
    docstring) for every cell, with a Dirichlet ground-surface temperature,
    a heat flux at the bottom of the column and latent heat
    ``L = rho_w L_f theta`` released linearly over the freezing range.

    Spin-up: the first year of forcing is repeated until the profile at
    January 1st changes by less than ``spinup_tolerance_K`` (max over nodes)
    over one year, or until ``max_spinup_years`` extra years have run. The
    year that met the tolerance (or the last one) is recorded as year 1; a
    multi-year forcing then continues with years 2..Y from its end state. So
    the record is the whole forcing series started from a spun-up January-1st
    state; per-year results (``*_per_year``) are the years of the forcing as
    given (calendar years unless the caller shifts the series, e.g. to start
    on July 1st so that a year is a northern winter), the overall ones cover
    the whole record (frozen days as a mean per year).

    With the analytic start (``initial_profile_degC`` None or a tuple) the
    run begins in the warm season (a quarter radian of the annual wave after
    the surface maximum) and integrates that part-year up to January 1st
    before the first spin-up year; each node starts in the phase of its annual
    mean. Between spin-up years the annual-mean temperature below the depth
    reached by the freezing range is put on its periodic form (linear with
    slope q / k; see ``_deep_mean_correction``), and a year counts as converged
    only when that correction was also below the tolerance. On test cells
    this reaches the periodic state of a plain spin-up run to 1e-5 K in 3-7
    years instead of 15-30. Slowest: marginal permafrost whose base or zero
    curtain lies inside the grid (mean temperatures within about 1 K of 0
    degC); there the frost depth after 30 years can still be metres from the
    periodic state (``spinup_converged`` and ``spinup_years`` report it).

    Screening estimate: design frost depths follow local codes and licensed
    engineers.

    Parameters
    ----------
    surface_temperature_degC : Daily ground-surface temperature, shape
        ``(steps_per_year * Y, *cells)`` with ``steps_per_year =
        round(365.25 / dt_days)``. [degC]
    conductivity_unfrozen_w_mk : Thermal conductivity of the unfrozen ground. [W m-1 K-1]
    conductivity_frozen_w_mk : Thermal conductivity of the frozen ground. [W m-1 K-1]
    heat_capacity_unfrozen_j_m3k : Volumetric heat capacity, unfrozen. [J m-3 K-1]
    heat_capacity_frozen_j_m3k : Volumetric heat capacity, frozen (sensible
        only; latent heat is added by the solver). [J m-3 K-1]
    water_m3m3 : Volumetric content of the water that freezes over the freezing
        range (total water minus the water still unfrozen at ``T_f1``). [m3 m-3]
    depths_out_m : Depths for frozen days and temperature extremes, ``(D,)``. [m]
    freezing_range_degC : ``(T_f1, T_f2)``, ice forms below ``T_f2`` and all
        freezable water is frozen at ``T_f1``. [degC]
    bottom_heat_flux_w_m2 : Heat flux entering the column through the bottom
        (geothermal heat flux, positive upward into the column; 0 = insulated
        bottom). [W m-2]
    dt_days : Time step. [d]
    initial_profile_degC : None (default: periodic analytic profile of a
        3-harmonic fit of the first forcing year with the unfrozen diffusivity,
        plus the geothermal gradient), a profile ``(nz, *cells)``, or a tuple
        ``(mean (cells), cos_coef (H, cells), sin_coef (H, cells)[,
        damping_depth_m (cells)])`` for :func:`periodic_initial_profile`. [degC]
    grid_m : Node depths (default :func:`depth_grid` ``()``: 41 nodes to 20 m). [m]
    spinup_tolerance_K : Spin-up stops when the January-1st profile changes by
        less than this over a year. [K]
    max_spinup_years : Largest number of spin-up years before the record. [1]

    Returns
    -------
    FreezeThawResult

    References
    ----------
    Swaminathan, C. R., Voller, V. R. (1992). A general enthalpy method for
        modeling solidification processes. Metallurgical Transactions B 23,
        651-664. doi:10.1007/BF02649725
    Carslaw, H. S., Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed.
        Oxford University Press.
    """
    t_lo, t_hi = _check_range(freezing_range_degC)
    ts2, cells, (ku, kf, cu, cf, water, qb) = _prepare(
        surface_temperature_degC,
        conductivity_unfrozen_w_mk,
        conductivity_frozen_w_mk,
        heat_capacity_unfrozen_j_m3k,
        heat_capacity_frozen_j_m3k,
        water_m3m3,
        bottom_heat_flux_w_m2,
        dt_days,
    )
    spy = int(round(DAYS_PER_YEAR / dt_days))
    nsteps = ts2.shape[0]
    if nsteps % spy != 0:
        raise ValueError(
            f"surface_temperature_degC has {nsteps} steps; with dt_days={dt_days} a year is "
            f"{spy} steps and the forcing must be whole years (use integrate_freeze_thaw for "
            "other lengths)"
        )
    n_years = nsteps // spy
    z = _kernel_array(depth_grid() if grid_m is None else grid_m)
    if z.ndim != 1 or z.size < 3 or z[0] != 0.0 or np.any(np.diff(z) <= 0):
        raise ValueError("grid_m must start at 0 and increase strictly, with >= 3 nodes")
    d, idx, w = _output_interp(depths_out_m, z)
    t_init, k_first = _initial_profile(
        initial_profile_degC, ts2, cells, z, ku, cu, qb, spy, dt_days, t_lo, t_hi
    )
    if max_spinup_years < 0:
        raise ValueError("max_spinup_years must be >= 0")
    o = _run(
        ts2,
        ku,
        kf,
        cu,
        cf,
        water,
        qb,
        z,
        t_init,
        t_lo,
        t_hi,
        float(dt_days),
        spy,
        n_years,
        int(max_spinup_years),
        float(spinup_tolerance_K),
        k_first,
        idx,
        w,
        False,
        accelerate=SPINUP_ACCELERATION,
    )
    nd = d.size
    return FreezeThawResult(
        frost_depth_m=o["frost_a"].reshape(cells),
        thaw_depth_m=o["thaw_a"].reshape(cells),
        perennially_frozen=o["peren_a"].reshape(cells),
        frozen_days=o["fdays_a"].reshape((nd,) + cells),
        t_min_degC=o["tmin_o"].reshape((nd,) + cells),
        t_max_degC=o["tmax_o"].reshape((nd,) + cells),
        spinup_years=o["spin_n"].reshape(cells),
        spinup_converged=o["spin_ok"].reshape(cells),
        frost_depth_per_year_m=o["frost_y"].reshape((n_years,) + cells),
        thaw_depth_per_year_m=o["thaw_y"].reshape((n_years,) + cells),
        frozen_days_per_year=o["fdays_y"].reshape((n_years, nd) + cells),
        depths_out_m=d,
        grid_m=z,
        start_profile_degC=o["prof_start"].reshape((z.size,) + cells),
        final_profile_degC=o["prof_end"].reshape((z.size,) + cells),
        surface_heat_in_j_m2=o["heat_in"].reshape(cells),
        unconverged_steps=o["bad"].reshape(cells),
        iterations=o["iters"].reshape(cells),
    )


def integrate_freeze_thaw(
    surface_temperature_degC: np.ndarray,
    conductivity_unfrozen_w_mk: np.ndarray | float,
    conductivity_frozen_w_mk: np.ndarray | float,
    heat_capacity_unfrozen_j_m3k: np.ndarray | float,
    heat_capacity_frozen_j_m3k: np.ndarray | float,
    water_m3m3: np.ndarray | float,
    initial_profile_degC: np.ndarray,
    grid_m: np.ndarray,
    depths_out_m: Sequence[float] | np.ndarray,
    *,
    freezing_range_degC: tuple[float, float] = (-1.0, 0.0),
    bottom_heat_flux_w_m2: np.ndarray | float = 0.0,
    dt_days: float = 1.0,
) -> FreezeThawRun:
    """Integrate the freeze-thaw heat equation over any number of steps.

    The same scheme as :func:`solve_freeze_thaw`, without spin-up or years:
    starts from ``initial_profile_degC`` and returns the temperature at the
    output depths after every step (memory ``nsteps * D * cells``; meant for
    point studies and verification, not for maps).

    Screening estimate: design frost depths follow local codes and licensed
    engineers.

    Parameters
    ----------
    surface_temperature_degC : Surface temperature at the end of each step,
        shape ``(nsteps, *cells)``. [degC]
    conductivity_unfrozen_w_mk : Unfrozen conductivity. [W m-1 K-1]
    conductivity_frozen_w_mk : Frozen conductivity. [W m-1 K-1]
    heat_capacity_unfrozen_j_m3k : Unfrozen volumetric heat capacity. [J m-3 K-1]
    heat_capacity_frozen_j_m3k : Frozen volumetric heat capacity. [J m-3 K-1]
    water_m3m3 : Freezable water content. [m3 m-3]
    initial_profile_degC : Profile at the start, ``(nz, *cells)`` or ``(nz,)``. [degC]
    grid_m : Node depths, ``(nz,)``. [m]
    depths_out_m : Output depths, ``(D,)``. [m]
    freezing_range_degC : ``(T_f1, T_f2)``. [degC]
    bottom_heat_flux_w_m2 : Heat flux into the column at the bottom. [W m-2]
    dt_days : Time step. [d]

    Returns
    -------
    FreezeThawRun
    """
    t_lo, t_hi = _check_range(freezing_range_degC)
    ts2, cells, (ku, kf, cu, cf, water, qb) = _prepare(
        surface_temperature_degC,
        conductivity_unfrozen_w_mk,
        conductivity_frozen_w_mk,
        heat_capacity_unfrozen_j_m3k,
        heat_capacity_frozen_j_m3k,
        water_m3m3,
        bottom_heat_flux_w_m2,
        dt_days,
    )
    z = _kernel_array(grid_m)
    if z.ndim != 1 or z.size < 3 or z[0] != 0.0 or np.any(np.diff(z) <= 0):
        raise ValueError("grid_m must start at 0 and increase strictly, with >= 3 nodes")
    d, idx, w = _output_interp(depths_out_m, z)
    t_init, k_first = _initial_profile(
        np.asarray(initial_profile_degC), ts2, cells, z, ku, cu, qb, 1, dt_days, t_lo, t_hi
    )
    nsteps = ts2.shape[0]
    o = _run(
        ts2,
        ku,
        kf,
        cu,
        cf,
        water,
        qb,
        z,
        t_init,
        t_lo,
        t_hi,
        float(dt_days),
        nsteps,
        1,
        0,
        np.inf,
        k_first,
        idx,
        w,
        True,
    )
    return FreezeThawRun(
        temperature_degC=o["series"].reshape((nsteps, d.size) + cells),
        final_profile_degC=o["prof_end"].reshape((z.size,) + cells),
        surface_heat_in_j_m2=o["heat_in"].reshape(cells),
        frost_depth_m=o["frost_a"].reshape(cells),
        unconverged_steps=o["bad"].reshape(cells),
    )
