"""Annual harmonics of a monthly surface-temperature climatology.

A climatology of 12 monthly means is reduced to a mean and a few harmonics of the
annual period,

    T(t) = mean + sum_n [cos_coef_n cos(n w t) + sin_coef_n sin(n w t)],
    w = 2 pi / YEAR_DAYS  [rad day-1],

with ``t`` in days since January 1st 00:00. A monthly mean is the *average* of the
cycle over its month, not a sample at mid-month, so an average flattens the peaks: a
harmonic of period P averaged over a month of length L keeps only the fraction
sin(pi L / P) / (pi L / P) of its amplitude (1.1 % lost for the annual harmonic, 4.5 %
for the semi-annual one). The fit below corrects for this exactly by using, as design
matrix, the exact monthly average of every basis function over its calendar month.
Monthly means made by exactly averaging a sinusoid therefore give back its amplitude
and phase to machine precision.

Month boundaries are the calendar months of a 365-day year (31, 28, 31, ... days),
scaled by 365.25 / 365 so that twelve months fill one 365.25-day year: a monthly
climatology is an average over many years, leap years included, so its months are on
average 0.07 % longer than in a common year.

Array convention: months on axis 0 of the input, harmonics on axis 0 of the
coefficients, cells on the remaining axes.
"""

from __future__ import annotations

from functools import lru_cache
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

YEAR_DAYS = 365.25  # mean length of the calendar year (Julian year). [day]
OMEGA_RAD_DAY = 2.0 * np.pi / YEAR_DAYS  # angular frequency of the annual cycle. [rad day-1]

#: Days per calendar month in a common (365-day) year, January first.
MONTH_LENGTHS_COMMON_YEAR_DAYS = np.array(
    [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.float64
)
#: Month boundaries [day since January 1st 00:00], shape (13,): the calendar months of a
#: 365-day year scaled to a 365.25-day year. ``MONTH_EDGES_DAYS[k]`` is the start of month
#: k (0 = January) and ``MONTH_EDGES_DAYS[12] == YEAR_DAYS``.
MONTH_EDGES_DAYS = np.concatenate(([0.0], np.cumsum(MONTH_LENGTHS_COMMON_YEAR_DAYS))) * (
    YEAR_DAYS / 365.0
)
#: Mid-points of the months [day since January 1st 00:00], shape (12,).
MONTH_MID_DAYS = 0.5 * (MONTH_EDGES_DAYS[:-1] + MONTH_EDGES_DAYS[1:])

MIN_HARMONICS = 1
MAX_HARMONICS = 5  # 2 H + 1 unknowns must not exceed the 12 monthly means
SUPPORTED_HARMONICS = (1, 2, 3)  # the contract; 4 and 5 are solvable but poorly determined

MONTH_EDGES_DAYS.flags.writeable = False
MONTH_MID_DAYS.flags.writeable = False
MONTH_LENGTHS_COMMON_YEAR_DAYS.flags.writeable = False


class HarmonicFit(NamedTuple):
    """Mean and harmonic coefficients of an annual temperature cycle.

    ``T(t) = mean + sum_n [cos_coef[n-1] cos(n w t) + sin_coef[n-1] sin(n w t)]`` with
    ``w = 2 pi / 365.25`` [rad day-1] and ``t`` in days since January 1st 00:00.

    Attributes
    ----------
    mean : ndarray, shape (...)
        Annual mean temperature. [degC]
    cos_coef : ndarray, shape (H, ...)
        Cosine coefficients of harmonics 1..H. [K]
    sin_coef : ndarray, shape (H, ...)
        Sine coefficients of harmonics 1..H. [K]
    """

    mean: NDArray[np.float64]
    cos_coef: NDArray[np.float64]
    sin_coef: NDArray[np.float64]

    @property
    def n_harmonics(self) -> int:
        """Number of harmonics H."""
        return int(np.shape(self.cos_coef)[0])

    @property
    def amplitude(self) -> NDArray[np.float64]:
        """Amplitude of each harmonic, shape (H, ...). [K] See :func:`amplitude`."""
        return amplitude(self)

    @property
    def peak_day(self) -> NDArray[np.float64]:
        """Time of the peak of each harmonic, shape (H, ...). [day] See :func:`peak_day`."""
        return peak_day(self)


def _check_n_harmonics(n_harmonics: int) -> int:
    if isinstance(n_harmonics, bool) or int(n_harmonics) != n_harmonics:
        raise ValueError(f"n_harmonics must be an integer, got {n_harmonics!r}")
    n = int(n_harmonics)
    if not MIN_HARMONICS <= n <= MAX_HARMONICS:
        raise ValueError(
            f"n_harmonics must be between {MIN_HARMONICS} and {MAX_HARMONICS} "
            f"(12 monthly means determine at most 2 H + 1 = 11 coefficients), got {n}"
        )
    return n


def monthly_basis_averages(n_harmonics: int = 2) -> NDArray[np.float64]:
    """Exact monthly averages of the fit's basis functions (the design matrix).

    Column 0 is the constant 1; columns 1..H are ``cos(n w t)`` and columns H+1..2H are
    ``sin(n w t)``, each averaged exactly over the months bounded by
    :data:`MONTH_EDGES_DAYS`:

        <cos(n w t)>_k = [sin(n w t_{k+1}) - sin(n w t_k)] / (n w (t_{k+1} - t_k))
        <sin(n w t)>_k = [cos(n w t_k) - cos(n w t_{k+1})] / (n w (t_{k+1} - t_k))

    Parameters
    ----------
    n_harmonics : int, default 2
        Number of annual harmonics H, 1..5.

    Returns
    -------
    ndarray, shape (12, 2 H + 1)
        Design matrix. [1]
    """
    return _design_matrix(_check_n_harmonics(n_harmonics)).copy()


@lru_cache(maxsize=MAX_HARMONICS)
def _design_matrix(n_harmonics: int) -> NDArray[np.float64]:
    t0 = MONTH_EDGES_DAYS[:-1]
    t1 = MONTH_EDGES_DAYS[1:]
    length = t1 - t0
    cols = [np.ones(12)]
    cos_cols = []
    sin_cols = []
    for n in range(1, n_harmonics + 1):
        nw = n * OMEGA_RAD_DAY
        cos_cols.append((np.sin(nw * t1) - np.sin(nw * t0)) / (nw * length))
        sin_cols.append((np.cos(nw * t0) - np.cos(nw * t1)) / (nw * length))
    g = np.column_stack(cols + cos_cols + sin_cols)
    g.flags.writeable = False
    return g


@lru_cache(maxsize=MAX_HARMONICS)
def _pseudo_inverse(n_harmonics: int) -> NDArray[np.float64]:
    p = np.linalg.pinv(_design_matrix(n_harmonics))  # shape (2 H + 1, 12)
    p.flags.writeable = False
    return p


def _as_float64(x: ArrayLike):
    """float64 view/copy of ``x``; duck arrays (dask) stay lazy, everything else -> ndarray."""
    if hasattr(x, "__array_function__") and hasattr(x, "astype"):
        return x if x.dtype == np.float64 else x.astype(np.float64)
    return np.asarray(x, dtype=np.float64)


def fit_harmonics(monthly_degC: ArrayLike, n_harmonics: int = 2) -> HarmonicFit:
    """Least-squares fit of a mean and annual harmonics to 12 monthly mean temperatures.

    The model is averaged exactly over each calendar month (see
    :func:`monthly_basis_averages`), which corrects the amplitude damping that monthly
    averaging causes. The least-squares solution is a fixed linear map of the 12 monthly
    values (the pseudo-inverse of the 12 x (2 H + 1) design matrix), applied to all
    cells at once with one matrix product. With H = 5 there are 11 unknowns for 12
    values; H = 1..3 is the supported range, 4 and 5 are accepted for experiments but
    are sensitive to noise in the monthly values.

    Parameters
    ----------
    monthly_degC : array_like, shape (12, ...)
        Monthly mean temperatures, January first on axis 0; any trailing shape. A numpy
        array, anything ``np.asarray`` accepts, or a dask array (kept lazy). [degC]
    n_harmonics : int, default 2
        Number of annual harmonics H, 1..5 (1..3 supported). ValueError outside 1..5.

    Returns
    -------
    HarmonicFit
        ``mean`` (...), ``cos_coef`` (H, ...), ``sin_coef`` (H, ...), float64. A NaN in
        any month of a cell gives NaN for all coefficients of that cell. [degC], [K]

    References
    ----------
    Epstein, E. S. (1991). On obtaining daily climatological values from monthly means.
    Journal of Climate, 4(3), 365-368. doi:10.1175/1520-0442(1991)004<0365:OODCVF>2.0.CO;2
    (harmonics of monthly means with the averaging correction for equal-length months;
    here the correction is the exact integral over the actual calendar months).
    """
    n = _check_n_harmonics(n_harmonics)
    x = _as_float64(monthly_degC)
    if x.ndim == 0 or x.shape[0] != 12:
        raise ValueError(
            f"monthly_degC must have the 12 months on axis 0, got shape {tuple(x.shape)}"
        )
    # A NaN month propagates to every coefficient by IEEE arithmetic (NaN * p = NaN).
    coefs = np.tensordot(_pseudo_inverse(n), x, axes=([1], [0]))
    return HarmonicFit(mean=coefs[0], cos_coef=coefs[1 : n + 1], sin_coef=coefs[n + 1 :])


def amplitude(fit: HarmonicFit) -> NDArray[np.float64]:
    """Amplitude of each harmonic, ``sqrt(cos_coef**2 + sin_coef**2)``.

    Parameters
    ----------
    fit : HarmonicFit
        Harmonic coefficients. [K]

    Returns
    -------
    ndarray, shape (H, ...)
        Half the peak-to-trough range of harmonic n. [K]
    """
    return np.hypot(fit.cos_coef, fit.sin_coef)


def peak_day(fit: HarmonicFit) -> NDArray[np.float64]:
    """Time at which each harmonic peaks, in days since January 1st 00:00.

    Harmonic n, ``a cos(n w t) + b sin(n w t) = A cos(n w t - phi)`` with
    ``phi = atan2(b, a)``, peaks at ``t = phi / (n w)`` modulo its period 365.25 / n.

    Parameters
    ----------
    fit : HarmonicFit
        Harmonic coefficients. [K]

    Returns
    -------
    ndarray, shape (H, ...)
        Peak time of harmonic n in [0, 365.25 / n); 0 when its amplitude is 0. [day]
    """
    h = np.shape(fit.cos_coef)[0]
    n = np.arange(1, h + 1, dtype=np.float64).reshape((h,) + (1,) * (np.ndim(fit.cos_coef) - 1))
    period = YEAR_DAYS / n
    t = np.mod(np.arctan2(fit.sin_coef, fit.cos_coef), 2.0 * np.pi) / (n * OMEGA_RAD_DAY)
    # np.mod may round a tiny negative angle up to exactly 2 pi
    return np.where(t >= period, t - period, t)


def monthly_means_of_sinusoid(
    mean: ArrayLike, amplitude: ArrayLike, peak_day: ArrayLike, harmonic: int = 1
) -> NDArray[np.float64]:
    """Exact calendar-month averages of ``mean + amplitude cos(n w (t - peak_day))``.

    For tests and demo data. Months are those of :data:`MONTH_EDGES_DAYS`.

    Parameters
    ----------
    mean : array_like
        Annual mean. [degC]
    amplitude : array_like
        Amplitude of the sinusoid. [K]
    peak_day : array_like
        Time of the peak, days since January 1st 00:00. [day]
    harmonic : int, default 1
        Harmonic number n (period 365.25 / n days). [1]

    Returns
    -------
    ndarray, shape (12, ...)
        Monthly means, inputs broadcast together on the trailing axes. [degC]
    """
    if isinstance(harmonic, bool) or int(harmonic) != harmonic or harmonic < 1:
        raise ValueError(f"harmonic must be a positive integer, got {harmonic!r}")
    mean_, amp_, peak_ = np.broadcast_arrays(
        np.asarray(mean, dtype=np.float64),
        np.asarray(amplitude, dtype=np.float64),
        np.asarray(peak_day, dtype=np.float64),
    )
    shape = (12,) + (1,) * mean_.ndim
    t0 = MONTH_EDGES_DAYS[:-1].reshape(shape)
    t1 = MONTH_EDGES_DAYS[1:].reshape(shape)
    nw = int(harmonic) * OMEGA_RAD_DAY
    avg_cos = (np.sin(nw * (t1 - peak_)) - np.sin(nw * (t0 - peak_))) / (nw * (t1 - t0))
    return mean_ + amp_ * avg_cos
