"""Periodic solution of the one-dimensional heat-diffusion equation in a half-space.

A homogeneous half-space (depth z positive downward) with thermal diffusivity kappa is
driven at its surface by the periodic temperature of a :class:`HarmonicFit`,

    T(0, t) = mean + sum_n [a_n cos(n w t) + b_n sin(n w t)],   w = 2 pi / 365.25 day-1.

The bounded periodic solution of dT/dt = kappa d2T/dz2 is the sum of damped, lagged
harmonics (Fourier's solution; Carslaw and Jaeger 1959, section 2.6):

    T(z, t) = mean + sum_n exp(-z / d_n) [a_n cos(n w t - z / d_n) + b_n sin(n w t - z / d_n)]

with the damping depth of the annual harmonic ``d = d_1 = sqrt(2 kappa / w) =
sqrt(kappa P / pi)`` and ``d_n = d / sqrt(n)``. At depth z, harmonic n keeps the fraction
``exp(-z / d_n)`` of its surface amplitude and lags by ``z / d_n`` radians, i.e.
``(z / d_n) / (n w)`` days. The mean does not change with depth: the periodic solution
carries no geothermal gradient.

Times are days since January 1st 00:00; "day of year" outputs are ``1 + t`` in
[1, 366.25). Depth-resolved outputs put depths on axis 0, cells on the remaining axes.

References
----------
Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
Oxford: Clarendon Press. Section 2.6, periodic surface temperature (section number
from memory).

van Wijk, W. R., & de Vries, D. A. (1963). Periodic temperature variations in a
homogeneous soil. In W. R. van Wijk (Ed.), Physics of Plant Environment (pp. 102-143).
Amsterdam: North-Holland.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from numpy.typing import ArrayLike, NDArray

from geothermmap.physics._cells import Layout, cellwise
from geothermmap.physics.harmonics import OMEGA_RAD_DAY, YEAR_DAYS, HarmonicFit

SECONDS_PER_DAY = 86400.0

#: Frost-depth code where the minimum of the surface cycle stays at or above 0 degC.
FROST_NONE = 0.0
#: Frost-depth code where the annual mean is at or below 0 degC: in the conduction-only
#: periodic solution the ground is then at or below 0 degC at depth all year round
#: (perennially frozen). This is a code, not a depth.
FROST_PERENNIAL = -1.0

_NEWTON_MAX_ITER = 12  # Newton steps in time per candidate extremum
_NEWTON_TOL_DAYS = 1e-4  # last Newton step [day]; quadratic convergence then leaves
# a time error near 1e-9 day and a value error near 1e-14 K
_BRACKETED_MAX_ITER = 60  # Newton/bisection steps in time on a bracket (bisection: ~20)
#: Sum of harmonic amplitudes [K] below which a cycle counts as constant: doy_min and
#: doy_max are then NaN (a 12-month fit of a constant leaves ~1e-15 K of rounding).
FLAT_CYCLE_K = 1e-9
_DEPTH_TOL_M = 1e-6  # frost-depth root tolerance [m]; the contract is 1 mm
_DEPTH_MAX_ITER = 100  # safeguarded Newton/bisection steps in depth (bisection alone: ~40)


def _n_samples(n_harmonics: int) -> int:
    """Coarse samples per year for the extremum search: >= 48, >= 12 per shortest period."""
    return max(48, 12 * n_harmonics)


# --------------------------------------------------------------------------------------
# Closed-form pieces (pure numpy; also work on dask arrays through numpy dispatch)
# --------------------------------------------------------------------------------------


def damping_depth(diffusivity_m2_s: ArrayLike, period_days: float = YEAR_DAYS) -> NDArray:
    """Damping depth of a periodic surface temperature, ``d = sqrt(kappa P / pi)``.

    Equivalent to ``sqrt(2 kappa / omega)`` with ``omega = 2 pi / P``. At depth d the
    amplitude is 1/e (36.8 %) of the surface amplitude and the lag is one radian.

    Parameters
    ----------
    diffusivity_m2_s : array_like
        Thermal diffusivity. [m2 s-1]
    period_days : float, default 365.25
        Period of the oscillation. [day]

    Returns
    -------
    ndarray
        Damping depth. [m]

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.
    """
    return np.sqrt(diffusivity_m2_s * (period_days * SECONDS_PER_DAY) / np.pi)


def amplitude_at_depth(
    surface_amplitude_K: ArrayLike,
    damping_depth_m: ArrayLike,
    depth_m: ArrayLike,
    harmonic: int = 1,
) -> NDArray:
    """Amplitude of harmonic n at depth, ``A_n exp(-z sqrt(n) / d)``.

    Parameters
    ----------
    surface_amplitude_K : array_like
        Amplitude of harmonic n at the surface. [K]
    damping_depth_m : array_like
        Damping depth d of the annual harmonic, > 0. [m]
    depth_m : array_like
        Depth below the surface, >= 0. [m]
    harmonic : int, default 1
        Harmonic number n. [1]

    Returns
    -------
    ndarray
        Amplitude at depth. [K]

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.
    """
    return surface_amplitude_K * np.exp(-depth_m * math.sqrt(harmonic) / damping_depth_m)


def phase_lag_days(damping_depth_m: ArrayLike, depth_m: ArrayLike, harmonic: int = 1) -> NDArray:
    """Lag of harmonic n at depth behind the surface, ``(z / d_n) / (n w)``.

    Parameters
    ----------
    damping_depth_m : array_like
        Damping depth d of the annual harmonic, > 0. [m]
    depth_m : array_like
        Depth below the surface, >= 0. [m]
    harmonic : int, default 1
        Harmonic number n. [1]

    Returns
    -------
    ndarray
        Time lag of the harmonic's peak (and trough) at depth. [day]

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.
    """
    n = float(harmonic)
    return depth_m * math.sqrt(n) / damping_depth_m / (n * OMEGA_RAD_DAY)


def temperature_at_depth(
    fit: HarmonicFit, damping_depth_m: ArrayLike, depth_m: ArrayLike, t_days: ArrayLike
) -> NDArray:
    """Temperature of the periodic solution at a depth and time.

    ``T(z, t) = mean + sum_n exp(-z/d_n) [a_n cos(n w t - z/d_n) + b_n sin(n w t - z/d_n)]``
    with ``d_n = d / sqrt(n)``. All arguments broadcast against each other (e.g. pass
    ``depth_m`` of shape (D, 1, 1) for (D, ny, nx) output). Numpy functions only, so a
    dask array in gives a lazy dask array out.

    Parameters
    ----------
    fit : HarmonicFit
        Surface temperature cycle. [degC], [K]
    damping_depth_m : array_like
        Damping depth of the annual harmonic, > 0; NaN where it is not positive. [m]
    depth_m : array_like
        Depth below the surface, >= 0. [m]
    t_days : array_like
        Time since January 1st 00:00. [day]

    Returns
    -------
    ndarray
        Temperature. [degC]

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.
    """
    _check_depths(depth_m)
    with np.errstate(divide="ignore", invalid="ignore"):
        # z / d with d <= 0 is meaningless: NaN
        z_over_d = np.where(np.greater(damping_depth_m, 0.0), depth_m / damping_depth_m, np.nan)
    out = fit.mean + 0.0 * z_over_d
    for k in range(np.shape(fit.cos_coef)[0]):
        n = k + 1
        r = z_over_d * math.sqrt(n)
        angle = n * OMEGA_RAD_DAY * t_days - r
        out = out + np.exp(-r) * (fit.cos_coef[k] * np.cos(angle) + fit.sin_coef[k] * np.sin(angle))
    return out


def zero_amplitude_depth(
    annual_amplitude_K: ArrayLike, damping_depth_m: ArrayLike, tolerance_K: float = 0.1
) -> NDArray:
    """Depth at which the annual amplitude has decayed to a tolerance, ``d ln(A / tol)``.

    Parameters
    ----------
    annual_amplitude_K : array_like
        Amplitude of the annual harmonic at the surface. [K]
    damping_depth_m : array_like
        Damping depth of the annual harmonic. [m]
    tolerance_K : float, default 0.1
        Amplitude regarded as zero; 0.1 K is about the resolution of field soil
        thermometers (common practice). [K]

    Returns
    -------
    ndarray
        Depth of "zero" annual amplitude; 0 where ``A <= tolerance_K``. [m]

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.
    """
    if not tolerance_K > 0:
        raise ValueError(f"tolerance_K must be positive, got {tolerance_K!r}")
    # np.maximum propagates NaN; log(1) = 0 gives depth 0 where A <= tol
    return damping_depth_m * np.log(np.maximum(np.divide(annual_amplitude_K, tolerance_K), 1.0))


def surface_heat_flux_amplitude(
    annual_amplitude_K: ArrayLike,
    conductivity_w_mk: ArrayLike,
    heat_capacity_j_m3k: ArrayLike,
    period_days: float = YEAR_DAYS,
) -> NDArray:
    """Amplitude of the periodic ground heat flux at the surface, ``A sqrt(lambda C omega)``.

    From ``G = -lambda dT/dz`` at z = 0 (downward flux positive) for a surface harmonic
    ``A cos(omega t)``: ``G(t) = A sqrt(lambda C omega) cos(omega t + pi / 4)``, i.e. the
    flux leads the surface temperature by pi / 4 (1/8 of the period, 45.7 days for the
    annual cycle). ``sqrt(lambda C)`` is the thermal effusivity.

    Parameters
    ----------
    annual_amplitude_K : array_like
        Surface amplitude of the harmonic. [K]
    conductivity_w_mk : array_like
        Thermal conductivity. [W m-1 K-1]
    heat_capacity_j_m3k : array_like
        Volumetric heat capacity. [J m-3 K-1]
    period_days : float, default 365.25
        Period of the harmonic. [day]

    Returns
    -------
    ndarray
        Amplitude of the surface heat flux. [W m-2]

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.
    """
    omega_rad_s = 2.0 * np.pi / (period_days * SECONDS_PER_DAY)
    return annual_amplitude_K * np.sqrt(conductivity_w_mk * heat_capacity_j_m3k * omega_rad_s)


# --------------------------------------------------------------------------------------
# Extremum search over the year (numba kernels; scalar path one cell at a time, fast
# path over chunks of cells; no large temporaries)
# --------------------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _coefs_at_depth(cos_coef, sin_coef, i, d, z, a, b):
    """Fill a, b with the damped, lagged coefficients of cell i at depth z."""
    for k in range(cos_coef.shape[0]):
        r = z * math.sqrt(k + 1.0) / d if z > 0.0 else 0.0
        e = math.exp(-r)
        cr = math.cos(r)
        sr = math.sin(r)
        c = cos_coef[k, i]
        s = sin_coef[k, i]
        a[k] = e * (c * cr - s * sr)
        b[k] = e * (c * sr + s * cr)


@njit(cache=True, nogil=True)
def _eval(a, b, t, w):
    """Value and first two time derivatives of sum_n a_n cos(n w t) + b_n sin(n w t)."""
    c1 = math.cos(w * t)
    s1 = math.sin(w * t)
    cn = c1
    sn = s1
    f = 0.0
    f1 = 0.0
    f2 = 0.0
    for k in range(a.shape[0]):
        nw = (k + 1.0) * w
        f += a[k] * cn + b[k] * sn
        f1 += nw * (b[k] * cn - a[k] * sn)
        f2 -= nw * nw * (a[k] * cn + b[k] * sn)
        cn, sn = cn * c1 - sn * s1, sn * c1 + cn * s1
    return f, f1, f2


@njit(cache=True, nogil=True)
def _refine(a, b, t0, v0, t_start, sign, dt, w):
    """Newton on d(sign f)/dt from t_start near sample (t0, v0).

    Stays within +-dt of t0 and never returns worse than the sample itself.
    """
    t = t_start
    f = v0
    fresh = False  # is f the value at t?
    for _ in range(_NEWTON_MAX_ITER):
        f, f1, f2 = _eval(a, b, t, w)
        fresh = True
        if not sign * f2 < 0.0:
            break
        step = -f1 / f2
        if abs(t + step - t0) > dt:
            break
        if abs(step) < _NEWTON_TOL_DAYS:
            # last step taken on the local quadratic model: the extremum value is
            # f - f1**2 / (2 f2) with an error of order (third derivative) * step**3
            t = t + step
            f = f + 0.5 * f1 * step
            break
        t = t + step
        fresh = False
    if not fresh:
        f, _, _ = _eval(a, b, t, w)
    if sign * f >= sign * v0:
        return t, f
    return t0, v0


@njit(cache=True, nogil=True)
def _newton_bracketed(a, b, lo, hi, t, sign, w):
    """Extremum of sign * f in [lo, hi], where d(sign f)/dt is >= 0 at lo and <= 0 at hi.

    Newton steps on d(sign f)/dt, replaced by bisection whenever a step leaves the
    bracket or the curvature has the wrong sign.
    """
    f = 0.0
    for _ in range(_BRACKETED_MAX_ITER):
        f, f1, f2 = _eval(a, b, t, w)
        if sign * f1 > 0.0:
            lo = t
        else:
            hi = t
        tn = t - f1 / f2 if sign * f2 < 0.0 else lo - 1.0
        newton = lo <= tn <= hi
        if not newton:
            tn = 0.5 * (lo + hi)
        step = tn - t
        # converged on a short Newton step only: a short bisection step (t near the middle
        # of a still wide bracket) says nothing about the distance to the extremum
        if newton and abs(step) < _NEWTON_TOL_DAYS:
            return tn, f + 0.5 * f1 * step
        if hi - lo < _NEWTON_TOL_DAYS:
            f, _, _ = _eval(a, b, tn, w)
            return tn, f
        t = tn
    f, _, _ = _eval(a, b, t, w)
    return t, f


@njit(cache=True, nogil=True)
def _extrema(a, b, ctab, stab, v, dt, w, year, want_max=True):
    """Global max and min over one period: (t_max, f_max, t_min, f_min), t in [0, year).

    With ``want_max`` false the maximum may be skipped (returned as NaN) where that saves
    work: the frost-depth search needs only the minimum.
    """
    h = a.shape[0]
    m = ctab.shape[1]
    if h == 1:
        amp = math.hypot(a[0], b[0])
        t_hi = (math.atan2(b[0], a[0]) % (2.0 * math.pi)) / w
        t_lo = t_hi + 0.5 * year
        if t_lo >= year:
            t_lo -= year
        if t_hi >= year:
            t_hi -= year
        return t_hi, amp, t_lo, -amp
    # Fast path, annual harmonic dominant: with f = A1 cos(theta) + g, theta = w t - phi,
    # |g'| <= w sum_n n A_n = w rho A1 and |g''| <= w**2 sum_n n**2 A_n. If rho < 1, f' = 0
    # only where |sin theta| <= rho, i.e. on two arcs around theta = 0 and pi; if moreover
    # A1 sqrt(1 - rho**2) > sum_n n**2 A_n, f'' has one sign on each arc, so each arc holds
    # exactly one extremum: the global maximum and minimum, found by bracketed Newton.
    a1 = math.hypot(a[0], b[0])
    curv = w * w * a1  # bound on |f''|
    s1 = 0.0
    s2 = 0.0
    for k in range(1, h):
        amp_k = math.hypot(a[k], b[k])
        s1 += (k + 1.0) * amp_k
        s2 += (k + 1.0) * (k + 1.0) * amp_k
    curv += w * w * s2
    if a1 > 0.0 and s1 < a1 and a1 * math.sqrt(1.0 - (s1 / a1) ** 2) > s2:
        t_peak = math.atan2(b[0], a[0]) / w
        half = math.asin(s1 / a1) / w
        if want_max:
            t_hi, f_hi = _newton_bracketed(a, b, t_peak - half, t_peak + half, t_peak, 1.0, w)
        else:
            t_hi, f_hi = 0.0, np.nan
        t_trough = t_peak + 0.5 * year
        t_lo, f_lo = _newton_bracketed(a, b, t_trough - half, t_trough + half, t_trough, -1.0, w)
        t_hi = t_hi % year
        t_lo = t_lo % year
        if t_hi >= year:
            t_hi -= year
        if t_lo >= year:
            t_lo -= year
        return t_hi, f_hi, t_lo, f_lo
    slack = 0.5 * curv * dt * dt  # a true extremum within dt of a sample differs by <= slack
    # sample the cycle; harmonic-outer loop so the inner loop over samples vectorises
    ak = a[0]
    bk = b[0]
    for j in range(m):
        v[j] = ak * ctab[0, j] + bk * stab[0, j]
    for k in range(1, h):
        ak = a[k]
        bk = b[k]
        for j in range(m):
            v[j] += ak * ctab[k, j] + bk * stab[k, j]
    vmax = v[0]
    vmin = v[0]
    kmax = 0
    kmin = 0
    for j in range(1, m):
        if v[j] > vmax:
            vmax = v[j]
            kmax = j
        elif v[j] < vmin:
            vmin = v[j]
            kmin = j
    t_hi = kmax * dt
    f_hi = vmax
    t_lo = kmin * dt
    f_lo = vmin
    for j in range(m):
        vj = v[j]
        is_hi = vj + slack >= vmax
        is_lo = vj - slack <= vmin
        if not (is_hi or is_lo):
            continue
        vp = v[j - 1] if j > 0 else v[m - 1]
        vn = v[j + 1] if j + 1 < m else v[0]
        is_hi = is_hi and (j == kmax or (vj >= vp and vj > vn))
        is_lo = is_lo and (j == kmin or (vj <= vp and vj < vn))
        if not (is_hi or is_lo):
            continue
        # start Newton at the vertex of the parabola through the three samples
        curv_j = vp - 2.0 * vj + vn
        shift = 0.5 * (vp - vn) / curv_j * dt if curv_j != 0.0 else 0.0
        if not abs(shift) <= dt:
            shift = 0.0
        if is_hi:
            t, f = _refine(a, b, j * dt, vj, j * dt + shift, 1.0, dt, w)
            if f > f_hi:
                t_hi = t
                f_hi = f
        if is_lo:
            t, f = _refine(a, b, j * dt, vj, j * dt + shift, -1.0, dt, w)
            if f < f_lo:
                t_lo = t
                f_lo = f
    t_hi = t_hi % year
    t_lo = t_lo % year
    if t_hi >= year:
        t_hi -= year
    if t_lo >= year:
        t_lo -= year
    return t_hi, f_hi, t_lo, f_lo


@njit(cache=True, nogil=True)
def _sample_tables(h, m, w, dt):
    ctab = np.empty((h, m))
    stab = np.empty((h, m))
    for k in range(h):
        for j in range(m):
            x = (k + 1.0) * w * j * dt
            ctab[k, j] = math.cos(x)
            stab[k, j] = math.sin(x)
    return ctab, stab


@njit(cache=True, nogil=True)
def _cell_is_valid(mean, cos_coef, sin_coef, dd, i):
    if math.isnan(mean[i]) or not dd[i] > 0.0:
        return False
    for k in range(cos_coef.shape[0]):
        if math.isnan(cos_coef[k, i]) or math.isnan(sin_coef[k, i]):
            return False
    return True


# Vectorised fast path. Cells are processed in chunks of _CHUNK with small scratch arrays;
# every pass is one simple loop over the cells of a chunk (harmonics and iterations are
# outer loops), which LLVM runs on SIMD lanes. A fixed number of Newton steps is followed
# by a check that proves the result (see _chunk_newton); a cell that fails it is redone
# by the scalar path above (_extrema, _frost_cell), so the fast path changes speed only.
#
# Frame of the fast path: at depth z, with r = z / d and phi_1 the surface phase of the
# annual harmonic (a_1 = A_1 cos phi_1, b_1 = A_1 sin phi_1), the annual harmonic peaks at
# w t = phi_1 + r. Writing w t = phi_1 + r + u, harmonic n at depth is Re(D_n exp(i n u))
# with
#     D_n = (a_n - i b_n) exp(i n phi_1) exp(-sqrt(n) r) exp(i (n - sqrt(n)) r),
# so D_1 = A_1 exp(-r) is real and exp(i n phi_1) = ((a_1 + i b_1) / A_1)**n needs no
# trigonometric call. Per cell and depth the transform needs exp(-sqrt(n) r) for each n
# and cos, sin of (n - sqrt(n)) r for n >= 2 only (no cos/sin of sqrt(n) r), evaluated
# by the polynomial versions _exp_neg_parts and _sincos so that the loops over cells
# vectorise (libm is not vectorised without SVML). The maximum and minimum start at
# u = 0 and u = pi, the annual harmonic's peak and trough, where cos u and sin u are
# exact. Newton steps in u rotate (cos u, sin u) by (cos x, sin x) from Taylor
# polynomials (|x| <= _ROT_MAX, longer steps are shortened), and cos(n u), sin(n u)
# follow by angle addition: no trigonometric call inside the iteration.

_CHUNK = 128  # cells per chunk: ~20 scratch arrays of this length stay in L1
_FAST_ITER = 5  # Newton steps in u for an extremum (typical need: 3-4)
_FAST_TOL_RAD = 1e-6  # proven bound |F'| / min|F''| on the distance to the extremum [rad]
# (= 5.8e-5 day) at the last evaluated point; after the last step the error is ~1e-12 rad
_ROT_MAX = 0.5  # largest Newton step [rad] rotated by the Taylor polynomials below
_FROST_ITER = 8  # Newton steps in depth (typical need: 3-5)
_FROST_TIME_ITER = 3  # warm-started Newton steps in u per depth step


# Taylor coefficients (-1)**k / (2k + 1)! and (-1)**k / (2k)! of sin and cos
_S3, _S5, _S7, _S9, _S11, _S13, _S15 = (
    (-1.0) ** k / math.factorial(2 * k + 1) for k in range(1, 8)
)
_C2, _C4, _C6, _C8, _C10, _C12, _C14, _C16 = (
    (-1.0) ** k / math.factorial(2 * k) for k in range(1, 9)
)


@njit(cache=True, nogil=True, error_model="numpy")
def _rot_cs(x):
    """cos x and sin x for |x| <= 0.5 by Taylor polynomials to x**16 and x**15.

    Truncation error <= 0.5**17 / 17! < 1e-19: rounding-limited (a few 1e-17).
    """
    y = x * x
    sn = x + x * y * (_S3 + y * (_S5 + y * (_S7 + y * (_S9 + y * (_S11 + y * (_S13 + y * _S15))))))
    cs = 1.0 + y * (
        _C2 + y * (_C4 + y * (_C6 + y * (_C8 + y * (_C10 + y * (_C12 + y * (_C14 + y * _C16))))))
    )
    return cs, sn


_S17 = -1.0 / math.factorial(17)
_C18 = -1.0 / math.factorial(18)
_E = tuple(1.0 / math.factorial(k) for k in range(14))  # exp Taylor coefficients
# Cody-Waite splits (fdlibm): the leading parts have trailing zero bits, so k * hi is
# exact for the k used here
_LN2_HI = 6.93147180369123816490e-01
_LN2_LO = 1.90821492927058770002e-10
_INV_LN2 = 1.44269504088896338700e00
_PIO2_1 = 1.57079632673412561417e00  # first 33 bits of pi / 2
_PIO2_1T = 6.07710050650619224932e-11  # pi / 2 - _PIO2_1
_TWO_OVER_PI = 6.36619772367581382433e-01
_SINCOS_MAX = 1.0e6  # _sincos is used below this argument, libm above


@njit(cache=True, nogil=True, error_model="numpy")
def _exp_neg_parts(y):
    """exp(-y) = p * 2**-k for 0 <= y <= 708, without a libm call (loops vectorise).

    Returns p and the bit pattern of 2**-k (a float64 with biased exponent 1023 - k): the
    caller reinterprets it through a float64 view of an int64 array, since a table
    look-up would stop LLVM from vectorising the loop. y = k ln 2 + f with
    |f| <= ln(2) / 2 (Cody-Waite, k ln2_hi exact), exp(-f) by its Taylor polynomial to
    f**13 (truncation < 4e-18 relative): rounding-limited, a few 1e-16 relative. y is
    clamped to [0, 708] (NaN to 708): the caller handles y > 708 and NaN.
    """
    yc = y if y < 708.0 else 708.0
    yc = yc if yc > 0.0 else 0.0
    kf = np.floor(yc * _INV_LN2 + 0.5)
    g = kf * _LN2_LO - (yc - kf * _LN2_HI)  # -f
    p = 1.0 + g * (_E[1] + g * (_E[2] + g * (_E[3] + g * (_E[4] + g * (_E[5] + g * (
        _E[6] + g * (_E[7] + g * (_E[8] + g * (_E[9] + g * (_E[10] + g * (
            _E[11] + g * (_E[12] + g * _E[13]))))))))))))  # fmt: skip
    return p, (1023 - np.int64(kf)) << 52


@njit(cache=True, nogil=True, error_model="numpy")
def _exp_neg_finish(y, p, scale):
    """exp(-y) from _exp_neg_parts: p * 2**-k; 0 for y > 708, NaN for NaN."""
    if y <= 708.0:
        return p * scale
    return 0.0 if y > 708.0 else y


@njit(cache=True, nogil=True, error_model="numpy")
def _sincos(x):
    """cos x and sin x for 0 <= x < _SINCOS_MAX without a libm call.

    x = q pi/2 + t with |t| <= pi/4 (two-part Cody-Waite reduction: absolute error of t
    below q * 1e-26), Taylor polynomials to t**18 and t**17 (truncation < 1e-19), and
    the quadrant q mod 4. Rounding-limited (~2e-16 absolute). NaN gives NaN.
    """
    qf = np.floor(x * _TWO_OVER_PI + 0.5)
    t = (x - qf * _PIO2_1) - qf * _PIO2_1T
    y = t * t
    sn = t + t * y * (_S3 + y * (_S5 + y * (_S7 + y * (_S9 + y * (_S11 + y * (
        _S13 + y * (_S15 + y * _S17)))))))  # fmt: skip
    cs = 1.0 + y * (_C2 + y * (_C4 + y * (_C6 + y * (_C8 + y * (_C10 + y * (
        _C12 + y * (_C14 + y * (_C16 + y * _C18))))))))  # fmt: skip
    qm = qf - 4.0 * np.floor(0.25 * qf)
    if qm == 0.0:
        return cs, sn
    if qm == 1.0:
        return -sn, cs
    if qm == 2.0:
        return -cs, -sn
    return sn, -cs


@njit(cache=True, nogil=True, error_model="numpy")
def _chunk_invariants(cos_coef, sin_coef, dd, i0, n, amp, er, ei, phi1, inv_d):
    """Per-cell constants of the fast-path frame (see above) for cells i0 .. i0 + n - 1."""
    h = cos_coef.shape[0]
    for j in range(n):
        i = i0 + j
        a1 = cos_coef[0, i]
        b1 = sin_coef[0, i]
        amp1 = math.sqrt(a1 * a1 + b1 * b1)
        c1 = a1 / amp1
        s1 = b1 / amp1
        amp[0, j] = amp1
        phi1[j] = math.atan2(b1, a1)
        inv_d[j] = 1.0 / dd[i]
        pc = c1
        ps = s1
        for k in range(1, h):
            pc, ps = pc * c1 - ps * s1, ps * c1 + pc * s1  # exp(i (k + 1) phi_1)
            ak = cos_coef[k, i]
            bk = sin_coef[k, i]
            er[k, j] = ak * pc + bk * ps  # (a - i b) (pc + i ps)
            ei[k, j] = ak * ps - bk * pc
            amp[k, j] = math.sqrt(ak * ak + bk * bk)


#: sin(pi / n) for n = 0 .. MAX_HARMONICS (entries 0, 1 unused): n h < pi iff rho < sin(pi / n)
_SIN_PI_OVER_N = (0.0, 0.0) + tuple(math.sin(math.pi / n) for n in range(2, 6))


@njit(cache=True, nogil=True, error_model="numpy")
def _chunk_transform(r, n, amp, er, ei, al, be, rho, marg_hi, marg_lo, tmp, ib, fb):
    """u-frame coefficients al, be at r = z / d per cell, and the fast-path tests.

    ``tmp`` (3, n) and ``ib`` are scratch arrays, ``fb`` a float64 view of ``ib``.

    With F(u) = A_1 cos u + sum_{n>=2} A_n cos(n u + psi_n) (amplitudes at depth) and
    ``rho = sum_{n>=2} n A_n / A_1 < 1``, F' = 0 only on the arcs |sin u| <= rho around
    u = 0 and u = pi, of half-width h = asin(rho) (as in :func:`_extrema`). ``marg_hi`` and
    ``marg_lo`` are lower bounds of -F'' on the first arc and of F'' on the second:

        A_1 cos h + sum_n n**2 A_n min cos(n u + psi_n),            |u| <= h,
        A_1 cos h - sum_n n**2 A_n max cos(n (pi + v) + psi_n),     |v| <= h,

    the extremes of each cosine over its interval of half-width n h taken exactly (at an
    end, or +-1 where the interval holds 0 or pi; +-1 as well if n h >= pi). Where one is
    positive F' is strictly monotone on that arc, which then holds exactly one critical
    point: the global maximum (resp. minimum). The bounds are never weaker than the
    ``A_1 sqrt(1 - rho**2) > sum n**2 A_n`` test of :func:`_extrema`. No libm call: cos h,
    sin h = sqrt(1 - rho**2), rho, cos/sin(n h) by angle addition, cos/sin psi_n from al, be.
    NaN or rho >= 1 gives -1 (no fast path).
    """
    h = amp.shape[0]
    ep = tmp[0]
    # coefficients: branch-free loops over the cells (they vectorise), libm only for
    # arguments beyond the range of _sincos
    for k in range(h):
        nn = k + 1.0
        sq = math.sqrt(nn)
        for j in range(n):
            ep[j], ib[j] = _exp_neg_parts(sq * r[j])
        if k == 0:
            for j in range(n):
                al[0, j] = amp[0, j] * _exp_neg_finish(r[j], ep[j], fb[j])
                be[0, j] = 0.0
            continue
        for j in range(n):
            ek = _exp_neg_finish(sq * r[j], ep[j], fb[j])
            ep[j] = ek
            cx, sx = _sincos((nn - sq) * r[j])
            al[k, j] = (er[k, j] * cx - ei[k, j] * sx) * ek
            be[k, j] = -(er[k, j] * sx + ei[k, j] * cx) * ek
        for j in range(n):
            x = (nn - sq) * r[j]
            if x >= _SINCOS_MAX:
                cx = math.cos(x)
                sx = math.sin(x)
                al[k, j] = (er[k, j] * cx - ei[k, j] * sx) * ep[j]
                be[k, j] = -(er[k, j] * sx + ei[k, j] * cx) * ep[j]
    # fast-path bounds: harmonic-outer passes of branch-free loops over the cells
    ch = tmp[1]  # cos h, then cos(n h)
    cnh = tmp[1]
    snh = tmp[2]  # sin(n h)
    for j in range(n):
        rho[j] = 0.0
    for k in range(1, h):
        nn = k + 1.0
        for j in range(n):
            rho[j] += nn * math.sqrt(al[k, j] * al[k, j] + be[k, j] * be[k, j])
    for j in range(n):
        a1 = al[0, j]
        s1 = rho[j]
        rho_j = s1 / a1
        rho[j] = rho_j
        # NaN or rho >= 1: no fast path (ch NaN -> bounds NaN -> -1 below)
        chj = math.sqrt(1.0 - rho_j * rho_j) if (a1 > 0.0 and s1 < a1) else np.nan
        ch[j] = chj
        snh[j] = rho_j
        marg_hi[j] = a1 * chj
        marg_lo[j] = a1 * chj
    ch_sh = tmp[0]  # keep cos h, sin h for the recurrence
    for j in range(n):
        ch_sh[j] = ch[j]
    for k in range(1, h):
        nn = k + 1.0
        sharp = k + 1 < len(_SIN_PI_OVER_N)
        lim = _SIN_PI_OVER_N[k + 1] if sharp else 0.0
        for j in range(n):
            c0 = ch_sh[j]
            s0 = rho[j]
            if k > 1:  # cos(n h), sin(n h) from cos((n-1) h), sin((n-1) h)
                cj = cnh[j] * c0 - snh[j] * s0
                sj = snh[j] * c0 + cnh[j] * s0
            else:  # n = 2
                cj = c0 * c0 - s0 * s0
                sj = 2.0 * s0 * c0
            cnh[j] = cj
            snh[j] = sj
            ak = al[k, j]
            bk = be[k, j]
            amp_k = math.sqrt(ak * ak + bk * bk)
            usable = sharp and s0 < lim and amp_k > 0.0
            inv = 1.0 / amp_k if amp_k > 0.0 else 0.0
            cp = ak * inv  # cos psi
            sp = -bk * inv  # sin psi
            c_plus = cp * cj - sp * sj  # cos(psi + n h)
            c_minus = cp * cj + sp * sj  # cos(psi - n h)
            # min and max of cos(n u + psi) over |u| <= h: +-1 where the interval holds
            # pi (resp. 0), else at an end
            lo_c = min(c_plus, c_minus) if (usable and not -cp >= cj) else -1.0
            hi_c = max(c_plus, c_minus) if (usable and not cp >= cj) else 1.0
            marg_hi[j] += nn * nn * amp_k * lo_c
            # cos(n (pi + v) + psi) = (-1)**n cos(n v + psi)
            marg_lo[j] -= nn * nn * amp_k * (hi_c if k % 2 == 1 else -lo_c)
    for j in range(n):
        if not marg_hi[j] > -1.0:  # also NaN
            marg_hi[j] = -1.0
        if not marg_lo[j] > -1.0:
            marg_lo[j] = -1.0


@njit(cache=True, nogil=True, error_model="numpy")
def _chunk_newton(n, sign, al, be, rho, marg, c, s, u, f, ok, ck, sk, f1, f2, n_iter):
    """``n_iter`` Newton steps on d(sign F)/du from the states (c, s, u) = (cos u, sin u, u).

    Steps longer than _ROT_MAX are shortened to it (a damped step; the state stays exact).
    Leaves in f the extremum value by the quadratic model of the last step, in (c, s, u)
    the updated state, and in ok[j] whether the last point is provably within
    _FAST_TOL_RAD of the extremum sought: sign F'' < 0 there, the point lies on the arc
    |sin u| <= rho on the side sign cos u > 0, which holds the one critical point of that
    side, and |F'| < _FAST_TOL_RAD * marg, where marg <= |F''| on the arc (so that the
    distance to the critical point is at most |F'| / marg).
    """
    h = al.shape[0]
    for it in range(n_iter):
        for j in range(n):
            cj = c[j]
            sj = s[j]
            a0 = al[0, j]
            f[j] = a0 * cj
            f1[j] = -a0 * sj
            f2[j] = -a0 * cj
            ck[j] = cj
            sk[j] = sj
        for k in range(1, h):
            nn = k + 1.0
            for j in range(n):
                cj = c[j]
                sj = s[j]
                ckj = ck[j] * cj - sk[j] * sj
                skj = sk[j] * cj + ck[j] * sj
                ck[j] = ckj
                sk[j] = skj
                ak = al[k, j]
                bk = be[k, j]
                term = ak * ckj + bk * skj
                f[j] += term
                f1[j] += nn * (bk * ckj - ak * skj)
                f2[j] -= nn * nn * term
        if it == n_iter - 1:
            for j in range(n):
                ok[j] = (
                    sign * f2[j] < 0.0
                    and abs(f1[j]) < _FAST_TOL_RAD * marg[j]
                    and sign * c[j] > 0.0
                    and abs(s[j]) <= rho[j]
                )
        for j in range(n):
            x = min(max(-f1[j] / f2[j], -_ROT_MAX), _ROT_MAX)
            cd, sd = _rot_cs(x)
            cj = c[j]
            sj = s[j]
            c[j] = cj * cd - sj * sd
            s[j] = sj * cd + cj * sd
            u[j] += x
            f[j] += 0.5 * f1[j] * x


@njit(cache=True, nogil=True)
def _chunk_buffers(h, nc):
    """Work arrays of the vectorised fast path for one chunk of nc cells, h harmonics."""
    return (np.empty((h, nc)), np.zeros((h, nc)), np.zeros((h, nc)), np.empty((h, nc)),
            np.empty((h, nc)), np.empty(nc), np.empty(nc), np.empty(nc), np.empty(nc),
            np.empty(nc), np.empty(nc))


@njit(cache=True, nogil=True)
def _newton_buffers(nc):
    """Work arrays of the Newton passes for one chunk of nc cells: transform scratch
    (tmp, ib), state (c, s, u, f), harmonic terms (ck, sk), derivatives (f1, f2)."""
    return (np.empty((3, nc)), np.empty(nc, dtype=np.int64), np.empty(nc), np.empty(nc),
            np.empty(nc), np.empty(nc), np.empty(nc), np.empty(nc), np.empty(nc),
            np.empty(nc))


@njit(cache=True, nogil=True)
def _extrema_kernel(
    mean, cos_coef, sin_coef, dd, depths, m,
    t_min, t_max, doy_min, doy_max, t_mean, amplitude, phase_lag,
):  # fmt: skip
    """All depth_statistics outputs, (depth, cell) arrays, NaN for invalid cells."""
    h = cos_coef.shape[0]
    n_cells = mean.shape[0]
    year = YEAR_DAYS
    w = OMEGA_RAD_DAY
    dt = year / m
    ctab, stab = _sample_tables(h, m, w, dt)
    a = np.empty(h)
    b = np.empty(h)
    v = np.empty(m)
    nc = _CHUNK
    amp, er, ei, al, be, phi1, inv_d, r, rho, marg_hi, marg_lo = _chunk_buffers(h, nc)
    tmp, ib, c, s, u, f, ck, sk, f1, f2 = _newton_buffers(nc)
    fb = ib.view(np.float64)
    valid = np.empty(nc, dtype=np.bool_)
    ok_hi = np.empty(nc, dtype=np.bool_)
    ok_lo = np.empty(nc, dtype=np.bool_)
    c_hi = np.empty(nc)
    s_hi = np.empty(nc)
    u_hi = np.empty(nc)
    f_hi = np.empty(nc)
    for i0 in range(0, n_cells, nc):
        n = min(nc, n_cells - i0)
        for j in range(n):
            valid[j] = _cell_is_valid(mean, cos_coef, sin_coef, dd, i0 + j)
        _chunk_invariants(cos_coef, sin_coef, dd, i0, n, amp, er, ei, phi1, inv_d)
        for jd in range(depths.shape[0]):
            z = depths[jd]
            for j in range(n):
                r[j] = z * inv_d[j] if z > 0.0 else 0.0
            _chunk_transform(r, n, amp, er, ei, al, be, rho, marg_hi, marg_lo, tmp, ib, fb)
            for j in range(n):
                i = i0 + j
                t_mean[jd, i] = mean[i]
                amplitude[jd, i] = al[0, j]
                phase_lag[jd, i] = r[j] / w
            if h > 1:
                for j in range(n):
                    c_hi[j] = 1.0
                    s_hi[j] = 0.0
                    u_hi[j] = 0.0
                    c[j] = -1.0
                    s[j] = 0.0
                    u[j] = math.pi
                _chunk_newton(n, 1.0, al, be, rho, marg_hi, c_hi, s_hi, u_hi, f_hi, ok_hi,
                              ck, sk, f1, f2, _FAST_ITER)  # fmt: skip
                _chunk_newton(n, -1.0, al, be, rho, marg_lo, c, s, u, f, ok_lo,
                              ck, sk, f1, f2, _FAST_ITER)  # fmt: skip
                _chunk_write(n, i0, jd, mean, phi1, r, u_hi, f_hi, u, f, t_min, t_max,
                             doy_min, doy_max)  # fmt: skip
            for j in range(n):
                i = i0 + j
                if not valid[j]:
                    t_min[jd, i] = np.nan
                    t_max[jd, i] = np.nan
                    doy_min[jd, i] = np.nan
                    doy_max[jd, i] = np.nan
                    t_mean[jd, i] = np.nan
                    amplitude[jd, i] = np.nan
                    phase_lag[jd, i] = np.nan
                elif h == 1 or not (
                    marg_hi[j] > 0.0 and ok_hi[j] and marg_lo[j] > 0.0 and ok_lo[j]
                ):
                    _coefs_at_depth(cos_coef, sin_coef, i, dd[i], z, a, b)
                    t_hi, vh, t_lo, vl = _extrema(a, b, ctab, stab, v, dt, w, year)
                    t_max[jd, i] = mean[i] + vh
                    t_min[jd, i] = mean[i] + vl
                    doy_max[jd, i] = 1.0 + t_hi
                    doy_min[jd, i] = 1.0 + t_lo


@njit(cache=True, nogil=True, error_model="numpy")
def _chunk_write(n, i0, jd, mean, phi1, r, u_hi, f_hi, u_lo, f_lo, t_min, t_max, doy_min, doy_max):
    """Write the fast-path results of a chunk (cells the fast path did not prove are
    overwritten afterwards). Time = (phi_1 + r + u) / w, reduced to [0, year)."""
    year = YEAR_DAYS
    w = OMEGA_RAD_DAY
    for j in range(n):
        i = i0 + j
        base = phi1[j] + r[j]
        t_hi = (base + u_hi[j]) / w
        t_hi -= year * np.floor(t_hi / year)
        t_hi = t_hi - year if t_hi >= year else t_hi
        t_lo = (base + u_lo[j]) / w
        t_lo -= year * np.floor(t_lo / year)
        t_lo = t_lo - year if t_lo >= year else t_lo
        t_max[jd, i] = mean[i] + f_hi[j]
        t_min[jd, i] = mean[i] + f_lo[j]
        doy_max[jd, i] = 1.0 + t_hi
        doy_min[jd, i] = 1.0 + t_lo


@njit(cache=True, nogil=True)
def _min_and_slope(cos_coef, sin_coef, i, d, z, a, b, ctab, stab, v, dt, w, year):
    """Minimum over the year of the oscillating part at depth z, and its depth derivative.

    By the envelope theorem d(min_t f)/dz = df/dz at the minimising time.
    """
    _coefs_at_depth(cos_coef, sin_coef, i, d, z, a, b)
    _, _, t_lo, f_lo = _extrema(a, b, ctab, stab, v, dt, w, year, False)
    c1 = math.cos(w * t_lo)
    s1 = math.sin(w * t_lo)
    cn = c1
    sn = s1
    slope = 0.0
    for k in range(a.shape[0]):
        # d/dz of a_k cos(n w t) + b_k sin(n w t) with a_k, b_k damped and lagged by z/d_n
        inv_dn = math.sqrt(k + 1.0) / d
        slope += inv_dn * ((a[k] * sn - b[k] * cn) - (a[k] * cn + b[k] * sn))
        cn, sn = cn * c1 - sn * s1, sn * c1 + cn * s1
    return f_lo, slope


@njit(cache=True, nogil=True)
def _frost_cell(mean, cos_coef, sin_coef, dd, i, a, b, ctab, stab, v, dt, w, year):
    """Frost depth of cell i, scalar path: every depth step runs the general extremum search."""
    h = cos_coef.shape[0]
    if not _cell_is_valid(mean, cos_coef, sin_coef, dd, i):
        return np.nan
    mu = mean[i]
    d = dd[i]
    if mu <= 0.0:
        return FROST_PERENNIAL
    amp_sum = 0.0
    for k in range(h):
        amp_sum += math.hypot(cos_coef[k, i], sin_coef[k, i])
    a1 = math.hypot(cos_coef[0, i], sin_coef[0, i])
    if h == 1:
        return d * math.log(a1 / mu) if a1 > mu else FROST_NONE
    if amp_sum <= mu:  # even the envelope stays above 0 degC
        return FROST_NONE
    f0, slope = _min_and_slope(cos_coef, sin_coef, i, d, 0.0, a, b, ctab, stab, v, dt, w, year)
    if mu + f0 >= 0.0:
        return FROST_NONE
    # Bracket: min_t T(0) < 0; at z_hi the envelope sum_n A_n exp(-z/d_n) <= sum_n A_n
    # exp(-z/d) = mu, so min_t T(z_hi) >= 0. min_t T(z) is non-decreasing in z
    # (maximum principle), so the root is the deepest depth reaching 0 degC.
    lo = 0.0
    hi = d * math.log(amp_sum / mu)
    z = d * math.log(a1 / mu) if a1 > mu else 0.5 * hi
    if not (lo < z < hi):
        z = 0.5 * (lo + hi)
    for _ in range(_DEPTH_MAX_ITER):
        f, slope = _min_and_slope(cos_coef, sin_coef, i, d, z, a, b, ctab, stab, v, dt, w, year)
        g = mu + f
        if g <= 0.0:
            lo = z
        else:
            hi = z
        zn = z - g / slope if slope > 0.0 else -1.0
        if not (lo < zn < hi):
            zn = 0.5 * (lo + hi)
        converged = abs(zn - z) < _DEPTH_TOL_M or hi - lo < _DEPTH_TOL_M
        z = zn
        if converged:
            break
    return z


@njit(cache=True, nogil=True, error_model="numpy")
def _chunk_slope(n, al, be, c, s, inv_d, slope):
    """d/dz at fixed time of the oscillating part at the states (c, s) = (cos u, sin u)."""
    h = al.shape[0]
    for j in range(n):
        slope[j] = inv_d[j] * al[0, j] * (s[j] - c[j])
        ck = c[j]
        sk = s[j]
        for k in range(1, h):
            ck, sk = ck * c[j] - sk * s[j], sk * c[j] + ck * s[j]
            ak = al[k, j]
            bk = be[k, j]
            slope[j] += math.sqrt(k + 1.0) * inv_d[j] * (
                (ak * sk - bk * ck) - (ak * ck + bk * sk)
            )


@njit(cache=True, nogil=True)
def _frost_kernel(mean, cos_coef, sin_coef, dd, m, out):
    h = cos_coef.shape[0]
    year = YEAR_DAYS
    w = OMEGA_RAD_DAY
    dt = year / m
    ctab, stab = _sample_tables(h, m, w, dt)
    a = np.empty(h)
    b = np.empty(h)
    v = np.empty(m)
    n_cells = mean.shape[0]
    if h == 1:
        for i in range(n_cells):
            out[i] = _frost_cell(mean, cos_coef, sin_coef, dd, i, a, b, ctab, stab, v, dt, w, year)
        return
    nc = _CHUNK
    amp, er, ei, al, be, phi1, inv_d, r, rho, marg_hi, marg_lo = _chunk_buffers(h, nc)
    tmp, ib, c, s, u, f, ck, sk, f1, f2 = _newton_buffers(nc)
    fb = ib.view(np.float64)
    ok = np.empty(nc, dtype=np.bool_)
    slope = np.empty(nc)
    z = np.empty(nc)
    lo = np.empty(nc)
    hi = np.empty(nc)
    # state per cell: 0 finished (out written), 1 depth search on the fast path, 2 depth
    # search with the general extremum search (once the fast path failed for the cell)
    state = np.empty(nc, dtype=np.int8)
    todo = np.empty(nc, dtype=np.bool_)
    for i0 in range(0, n_cells, nc):
        n = min(nc, n_cells - i0)
        _chunk_invariants(cos_coef, sin_coef, dd, i0, n, amp, er, ei, phi1, inv_d)
        n_run = 0
        for j in range(n):
            i = i0 + j
            state[j] = 0
            r[j] = 0.0
            c[j] = -1.0
            s[j] = 0.0
            u[j] = math.pi
            if not _cell_is_valid(mean, cos_coef, sin_coef, dd, i):
                out[i] = np.nan
                continue
            mu = mean[i]
            if mu <= 0.0:
                out[i] = FROST_PERENNIAL
                continue
            amp_sum = 0.0
            for k in range(h):
                amp_sum += amp[k, j]  # sqrt(a**2 + b**2), as hypot to rounding
            if amp_sum <= mu:  # even the envelope stays above 0 degC
                out[i] = FROST_NONE
                continue
            a1 = amp[0, j]
            hi[j] = dd[i] * math.log(amp_sum / mu)
            lo[j] = 0.0
            zj = dd[i] * math.log(a1 / mu) if a1 > mu else 0.5 * hi[j]
            if not (0.0 < zj < hi[j]):
                zj = 0.5 * hi[j]
            z[j] = zj
            state[j] = 1
            n_run += 1
        # Surface minimum: frost only where mu + min_t T(0) < 0. T at the annual trough
        # (u = pi) bounds the minimum from above: where it is below 0 degC frost is
        # certain and the search is not needed; elsewhere the fast path, or failing that
        # the general search, decides.
        n_check = 0
        for j in range(n):
            todo[j] = False
            if state[j] != 1:
                continue
            f_pi = -amp[0, j]
            for k in range(1, h):
                f_pi += er[k, j] if k % 2 == 1 else -er[k, j]
            if not mean[i0 + j] + f_pi < 0.0:
                todo[j] = True
                n_check += 1
        if n_check > 0:
            _chunk_transform(r, n, amp, er, ei, al, be, rho, marg_hi, marg_lo, tmp, ib, fb)
            _chunk_newton(n, -1.0, al, be, rho, marg_lo, c, s, u, f, ok,
                          ck, sk, f1, f2, _FAST_ITER)  # fmt: skip
            for j in range(n):
                if not todo[j]:
                    continue
                i = i0 + j
                if marg_lo[j] > 0.0 and ok[j]:
                    f0 = f[j]
                else:
                    f0, _ = _min_and_slope(cos_coef, sin_coef, i, dd[i], 0.0, a, b,
                                           ctab, stab, v, dt, w, year)  # fmt: skip
                if mean[i] + f0 >= 0.0:
                    out[i] = FROST_NONE
                    state[j] = 0
                    n_run -= 1
            for j in range(n):  # the depth search starts at the trough for every cell
                c[j] = -1.0
                s[j] = 0.0
                u[j] = math.pi
        for it in range(_FROST_ITER):
            if n_run == 0:
                break
            n_fast = 0
            for j in range(n):
                todo[j] = state[j] == 1
                n_fast += todo[j]
                r[j] = z[j] * inv_d[j] if todo[j] else 0.0
            if n_fast > 0:  # else only cells on the general search are left
                _chunk_transform(r, n, amp, er, ei, al, be, rho, marg_hi, marg_lo, tmp, ib, fb)
                # the first two depth steps move the minimiser most; later ones start close
                n_iter = _FAST_ITER if it < 2 else _FROST_TIME_ITER
                _chunk_newton(n, -1.0, al, be, rho, marg_lo, c, s, u, f, ok,
                              ck, sk, f1, f2, n_iter)  # fmt: skip
                _chunk_slope(n, al, be, c, s, inv_d, slope)
            for j in range(n):
                if state[j] == 0:
                    continue
                if state[j] == 1 and marg_lo[j] > 0.0 and ok[j]:
                    fj = f[j]
                    sj = slope[j]
                else:  # no proven minimum at this depth: general search from now on
                    state[j] = 2
                    i = i0 + j
                    fj, sj = _min_and_slope(cos_coef, sin_coef, i, dd[i], z[j], a, b,
                                            ctab, stab, v, dt, w, year)  # fmt: skip
                # safeguarded Newton step in depth, as in _frost_cell
                g = mean[i0 + j] + fj
                zj = z[j]
                if g <= 0.0:
                    lo[j] = zj
                else:
                    hi[j] = zj
                zn = zj - g / sj if sj > 0.0 else -1.0
                if not (lo[j] < zn < hi[j]):
                    zn = 0.5 * (lo[j] + hi[j])
                z[j] = zn
                if abs(zn - zj) < _DEPTH_TOL_M or hi[j] - lo[j] < _DEPTH_TOL_M:
                    out[i0 + j] = zn
                    state[j] = 0
                    n_run -= 1
        for j in range(n):  # not converged in _FROST_ITER steps: scalar path from scratch
            if state[j] != 0:
                i = i0 + j
                out[i] = _frost_cell(mean, cos_coef, sin_coef, dd, i, a, b,
                                     ctab, stab, v, dt, w, year)  # fmt: skip


# --------------------------------------------------------------------------------------
# Public functions built on the kernels (numpy in, numpy out)
# --------------------------------------------------------------------------------------


def _check_depths(depth_m: ArrayLike) -> None:
    if np.any(np.asarray(depth_m) < 0):
        raise ValueError("depths must be >= 0 m (positive downward from the surface)")


def _flatten_cells(fit: HarmonicFit, damping_depth_m: ArrayLike):
    """Broadcast the fit and damping depth to one cell shape; return flat C arrays."""
    mean = np.asarray(fit.mean, dtype=np.float64)
    cos_coef = np.asarray(fit.cos_coef, dtype=np.float64)
    sin_coef = np.asarray(fit.sin_coef, dtype=np.float64)
    dd = np.asarray(damping_depth_m, dtype=np.float64)
    if cos_coef.shape != sin_coef.shape or cos_coef.ndim < 1 or cos_coef.shape[0] < 1:
        raise ValueError("fit.cos_coef and fit.sin_coef must have the same shape (H, ...)")
    h = cos_coef.shape[0]
    shape = np.broadcast_shapes(mean.shape, cos_coef.shape[1:], dd.shape)
    def contiguous(a: np.ndarray, lead: tuple) -> np.ndarray:  # -> (*lead, cells)
        full = lead + shape
        a = np.ascontiguousarray(a if a.shape == full else np.broadcast_to(a, full))
        # read-only blocks (e.g. from dask) would make numba compile the kernels again
        return (a if a.flags.writeable else a.copy()).reshape(*lead, -1)

    flat = (contiguous(mean, ()), contiguous(cos_coef, (h,)), contiguous(sin_coef, (h,)),
            contiguous(dd, ()))
    return shape, flat


_STAT_KEYS = ("t_mean", "amplitude", "phase_lag", "t_min", "t_max", "doy_min", "doy_max")


def _stats_layout(depths_m: ArrayLike, extremes: bool = True) -> Layout:
    depths = np.atleast_1d(np.asarray(depths_m, dtype=np.float64))
    _check_depths(depths)
    return Layout(_STAT_KEYS if extremes else _STAT_KEYS[:3], (("depth", depths),))


def _frost_layout(max_depth_m: float | None = None) -> Layout:
    if max_depth_m is not None and not max_depth_m > 0:
        raise ValueError(f"max_depth_m must be positive, got {max_depth_m!r}")
    return Layout(None)


@cellwise(_stats_layout)
def depth_statistics(
    fit: HarmonicFit, damping_depth_m: ArrayLike, depths_m: ArrayLike, extremes: bool = True
) -> dict[str, NDArray[np.float64]]:
    """Annual-cycle statistics of the periodic solution at several depths.

    With ``extremes=False`` only the closed-form ``t_mean``, ``amplitude`` and
    ``phase_lag`` are returned (no extremum search: for runs that map none of the others).

    For one harmonic the extremes are closed-form (``mean +- A exp(-z/d)``). For more:

    - if the annual harmonic dominates at that depth (``rho = sum_{n>=2} n A_n / A_1 < 1``
      and T'' keeps one sign on each of the arcs ``|sin(w t - phase)| <= rho`` around the
      annual harmonic's peak and trough, shown by a lower bound of |T''| there; the
      simplest such bound is ``A_1 sqrt(1 - rho**2) > sum_{n>=2} n**2 A_n``), the cycle
      provably has exactly one maximum and one minimum, each within ``asin(rho) / w`` of
      that peak and trough. Each is found by Newton iterations on dT/dt started there
      (vectorised over cells, no trigonometric call per step) and accepted only where the
      last point is proven within 1e-6 rad of the extremum (on its arc, right curvature,
      ``|T'| < 1e-6 rad * min|T''|``; in practice the error is ~1e-12 rad); other cells
      go to the scalar search: bracketed Newton/bisection on the arcs where the simplest
      bound holds, else
    - the cycle is sampled at max(48, 12 H) times over the year, every sampled
      local extremum that could hold the global one (within the curvature bound
      ``0.5 max|T''| dt**2``) is refined by Newton iterations on dT/dt, and the best kept.

    Accuracy against dense sampling plus brentq in tests: better than 1e-9 K and 1e-4
    day. Runs in a compiled kernel (numba, releases the GIL) over chunks of 128 cells,
    depth by depth, with no large temporaries; a cell's result does not depend on the
    other cells. Dask inputs stay lazy (the kernel runs chunk by chunk of the cells; the
    harmonics axis is one chunk); xarray inputs give xarray results with their cell
    coordinates and a ``depth`` coordinate.

    Parameters
    ----------
    fit : HarmonicFit
        Surface temperature cycle, cells of shape (...). [degC], [K]
    damping_depth_m : array_like
        Damping depth of the annual harmonic, broadcast against the cells; cells where it
        is not positive or NaN give NaN. [m]
    depths_m : array_like, shape (D,)
        Depths below the surface, >= 0 (a scalar counts as D = 1). [m]

    Returns
    -------
    dict of str to ndarray, each of shape (D, ...)
        ``"t_mean"``: annual mean, the same at every depth. [degC]
        ``"amplitude"``: amplitude of the annual harmonic at depth. [K]
        ``"phase_lag"``: lag of the annual harmonic behind the surface, ``z / d / w``. [day]
        ``"t_min"``, ``"t_max"``: minimum and maximum over the year of the full
        multi-harmonic cycle at depth. [degC]
        ``"doy_min"``, ``"doy_max"``: day of year ``1 + t`` of the minimum and maximum,
        in [1, 366.25); NaN for a constant temperature (amplitudes summing below
        :data:`FLAT_CYCLE_K`). [day]
        NaN in a cell's inputs gives NaN in all its outputs.

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.

    van Wijk, W. R., & de Vries, D. A. (1963). Periodic temperature variations in a
    homogeneous soil. In W. R. van Wijk (Ed.), Physics of Plant Environment
    (pp. 102-143). Amsterdam: North-Holland.
    """
    depths = np.atleast_1d(np.asarray(depths_m, dtype=np.float64))
    if depths.ndim != 1:
        raise ValueError(f"depths_m must be a scalar or 1-D, got shape {depths.shape}")
    _check_depths(depths)
    shape, (mean, cos_coef, sin_coef, dd) = _flatten_cells(fit, damping_depth_m)
    n_cells = mean.shape[0]
    n_depths = depths.shape[0]
    h = cos_coef.shape[0]
    if not extremes:
        valid = np.isfinite(mean) & (dd > 0.0) & np.all(np.isfinite(cos_coef), axis=0) & np.all(
            np.isfinite(sin_coef), axis=0)
        d_valid = np.where(valid, dd, np.nan)[None, :]
        z = depths[:, None]
        closed = {
            "t_mean": np.broadcast_to(np.where(valid, mean, np.nan), (n_depths, n_cells)),
            "amplitude": amplitude_at_depth(np.hypot(cos_coef[0], sin_coef[0]), d_valid, z),
            "phase_lag": phase_lag_days(d_valid, z),
        }
        return {key: val.reshape((n_depths,) + shape) for key, val in closed.items()}

    out = {key: np.empty((n_depths, n_cells)) for key in _STAT_KEYS}
    _extrema_kernel(
        mean, cos_coef, sin_coef, dd, depths, _n_samples(h),
        out["t_min"], out["t_max"], out["doy_min"], out["doy_max"],
        out["t_mean"], out["amplitude"], out["phase_lag"],
    )  # fmt: skip
    # a cycle with no amplitude (a constant temperature) has no day of its extremes
    flat = np.sum(np.hypot(cos_coef, sin_coef), axis=0) < FLAT_CYCLE_K
    if flat.any():
        out["doy_min"][:, flat] = np.nan
        out["doy_max"][:, flat] = np.nan
    return {key: val.reshape((n_depths,) + shape) for key, val in out.items()}


@cellwise(_frost_layout)
def frost_depth_conduction(
    fit: HarmonicFit, damping_depth_m: ArrayLike, max_depth_m: float | None = None
) -> NDArray[np.float64]:
    """Deepest depth at which the yearly minimum of the periodic solution reaches 0 degC.

    Screening estimate only: pure conduction in a homogeneous half-space with no latent
    heat of the soil water, so it overstates the frost depth (freezing water releases
    heat that slows the frost front; see the Stefan and Berggren approaches for that).
    Design frost depths follow local codes and licensed engineers, not this function.

    The minimum over the year of T(z, t) is non-decreasing with depth (maximum principle)
    and tends to the mean, so where the mean is above 0 degC and the surface minimum is
    below it there is one depth z* where it crosses 0 degC.

    - One harmonic: closed form ``z* = d ln(A / mean)`` for ``A > mean > 0``.
    - More harmonics: safeguarded Newton/bisection in depth on ``[0, z_hi]`` with
      ``z_hi = d ln(sum_n A_n / mean)``, an upper bound of the root of the envelope
      ``sum_n A_n exp(-z / d_n) = mean`` (because d_n <= d); the slope of the yearly
      minimum with depth is dT/dz at the minimising time (envelope theorem). Tolerance
      1e-6 m (contract: 1 mm). Each depth step needs the yearly minimum at that depth:
      where the annual harmonic provably dominates (see :func:`depth_statistics`) it
      comes from Newton iterations in time started at the previous step's minimiser and
      accepted only with the same proof check; once that fails for a cell, its later
      steps use the general search. The surface minimum (fast path or general search)
      is only needed where T at the annual trough is >= 0 degC: T there bounds the
      minimum from above, so below 0 degC it already proves that frost reaches down.

    Parameters
    ----------
    fit : HarmonicFit
        Surface temperature cycle. [degC], [K]
    damping_depth_m : array_like
        Damping depth of the annual harmonic (use frozen-soil properties for a frost
        estimate), broadcast against the cells. [m]
    max_depth_m : float, optional
        Clip positive depths to this value (e.g. the depth of the model domain). [m]

    Returns
    -------
    ndarray, shape (...)
        Frost depth [m], or the codes :data:`FROST_NONE` (0.0) where the surface minimum
        stays at or above 0 degC and :data:`FROST_PERENNIAL` (-1.0) where the annual mean
        is at or below 0 degC. NaN where an input is NaN or the damping depth is not
        positive.

    References
    ----------
    Carslaw, H. S., & Jaeger, J. C. (1959). Conduction of Heat in Solids (2nd ed.).
    Oxford: Clarendon Press. Section 2.6.
    """
    _frost_layout(max_depth_m)
    shape, (mean, cos_coef, sin_coef, dd) = _flatten_cells(fit, damping_depth_m)
    out = np.empty(mean.shape[0])
    _frost_kernel(mean, cos_coef, sin_coef, dd, _n_samples(cos_coef.shape[0]), out)
    if max_depth_m is not None:
        out = np.where(out > max_depth_m, max_depth_m, out)
    return out.reshape(shape)
