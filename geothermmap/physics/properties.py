"""Soil thermal properties from texture, bulk density, organic matter and water content.

Volumetric heat capacity follows de Vries (1963) as a volume-weighted sum over the soil
constituents. Thermal conductivity follows the normalised-conductivity (Kersten number)
approach of Johansen (1975),

    lambda = lambda_dry + Ke(Sr) * (lambda_sat - lambda_dry),

with three published choices of ``Ke`` and ``lambda_dry``: Johansen (1975), Cote & Konrad
(2005) and Lu et al. (2007). The saturated conductivity is the geometric mean of solids
and pore filling (water or ice) in all three.

Canonical units (see the project brief): sand, clay, quartz and organic matter as
fractions [1]; organic matter is a *mass* fraction of the solids, quartz a fraction of the
*mineral* solids; water content [m3 m-3]; bulk density [kg m-3]; conductivity
[W m-1 K-1]; volumetric heat capacity [J m-3 K-1]; diffusivity [m2 s-1].

Containers
----------
Every function is built from numpy ufuncs (``np.maximum``, ``np.log10``, arithmetic, ...)
only, so the same code serves Python scalars, numpy arrays, dask arrays and xarray
objects, and the container type of the result follows the inputs (dask stays lazy,
xarray keeps its coordinates). Conditional choices use :func:`_choose`, an
arithmetic equivalent of ``np.where`` (``np.where`` would turn an xarray object into a
bare numpy array). A NaN in any input gives NaN in the output. Float32 inputs give
float32 results (NumPy >= 2 promotion rules: the Python-float constants are "weak").

Coarse/fine texture rule
------------------------
One rule serves every model (:func:`is_coarse`): a soil is coarse-textured when its sand
fraction exceeds 0.40, the split Lu et al. (2007, Fig. 2) used for their two ``alpha``
values. The same split chooses Johansen's coarse/fine Kersten function and the
Cote & Konrad soil class (see :func:`cote_konrad_soil_class`).

References
----------
de Vries, D. A. (1963). Thermal properties of soils. In W. R. van Wijk (Ed.), Physics of
Plant Environment (pp. 210-235). Amsterdam: North-Holland.

Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Norwegian Institute of
Technology, Trondheim. English translation: US Army CRREL Draft Translation 637 (1977).

Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1. Hanover, NH:
US Army Cold Regions Research and Engineering Laboratory.

Peters-Lidard, C. D., Blackburn, E., Liang, X., & Wood, E. F. (1998). The effect of soil
thermal conductivity parameterization on surface energy fluxes and temperatures.
Journal of the Atmospheric Sciences, 55(7), 1209-1224.
doi:10.1175/1520-0469(1998)055<1209:TEOSTC>2.0.CO;2

Cote, J., & Konrad, J.-M. (2005). A generalized thermal conductivity model for soils and
construction materials. Canadian Geotechnical Journal, 42(2), 443-458.
doi:10.1139/t04-106

Lu, S., Ren, T., Gong, Y., & Horton, R. (2007). An improved model for predicting soil
thermal conductivity from water content at room temperature. Soil Science Society of
America Journal, 71(1), 8-14. doi:10.2136/sssaj2006.0041
"""

from __future__ import annotations

import math
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "CONDUCTIVITY_MODELS",
    "COTE_KONRAD_CLASSES",
    "COTE_KONRAD_DRY",
    "COTE_KONRAD_KAPPA",
    "LU2007_ALPHA",
    "REFERENCES",
    "conductivity_cote_konrad",
    "conductivity_johansen",
    "conductivity_lu2007",
    "cote_konrad_soil_class",
    "diffusivity",
    "dry_conductivity_cote_konrad",
    "dry_conductivity_johansen",
    "dry_conductivity_lu2007",
    "heat_capacity_de_vries",
    "is_coarse",
    "kersten_number_cote_konrad",
    "kersten_number_johansen",
    "kersten_number_lu2007",
    "organic_volume_fraction_of_solids",
    "particle_density",
    "porosity",
    "quartz_from_sand",
    "saturated_conductivity",
    "soil_thermal_properties",
    "solid_volume_fractions",
    "solids_conductivity",
    "thermal_conductivity",
    "volumetric_latent_heat",
]

#: Result type: a float scalar or array of the same container type as the inputs
#: (numpy, dask or xarray).
Array = Any

# --------------------------------------------------------------------------------------
# Constituent properties. Keys in brackets refer to REFERENCES. Values marked
# "from memory" were recalled, not checked against the printed source.
# --------------------------------------------------------------------------------------

# Thermal conductivity of constituents [W m-1 K-1]
K_QUARTZ_W_MK = 7.7  # [johansen1975] via [peterslidard1998], from memory
K_OTHER_MINERALS_W_MK = 2.0  # other minerals, quartz fraction > 0.2 [johansen1975], from memory
K_OTHER_MINERALS_LOW_QUARTZ_W_MK = 3.0  # quartz fraction <= 0.2 [peterslidard1998], from memory
QUARTZ_LOW_THRESHOLD = 0.2  # switch between the two values above [peterslidard1998]
#: Fractions within this of a class limit count as on the limit (the lower class). Inputs
#: come as float32, whose rounding is ~6e-8 relative: 40 % read as a fraction is
#: 0.40000001, as percent / 100 it is 0.39999998. A soil's class must not depend on how
#: its texture was spelled, so the limits are compared with this margin. [1]
CLASS_LIMIT_TOLERANCE = 1e-6
K_ORGANIC_W_MK = 0.25  # organic matter [farouki1981], [devries1963], from memory
K_WATER_W_MK = 0.57  # liquid water near 10 degC [devries1963], [farouki1981], from memory
K_ICE_W_MK = 2.2  # ice near 0 degC [devries1963], [farouki1981], from memory (C&K: 2.24)
K_AIR_W_MK = 0.025  # dry air [devries1963], from memory

# Particle densities [kg m-3]
RHO_MINERAL_KG_M3 = 2650.0  # mineral solids, common practice (quartz 2660, clays ~2650)
RHO_ORGANIC_KG_M3 = 1300.0  # organic matter [devries1963] (1.3 g cm-3), from memory
RHO_WATER_KG_M3 = 1000.0  # liquid water, common practice
RHO_ICE_KG_M3 = 917.0  # ice at 0 degC, common practice (documents the volume assumption)

# Volumetric heat capacities [J m-3 K-1]; de Vries (1963) gives 0.46, 0.60, 1.00 and
# 0.45 cal cm-3 K-1, usually quoted as C = 1.92 x_m + 2.51 x_o + 4.18 x_w [MJ m-3 K-1].
C_MINERAL_J_M3K = 1.92e6  # [devries1963], from memory (some authors use 2.0e6)
C_ORGANIC_J_M3K = 2.51e6  # [devries1963], from memory
C_WATER_J_M3K = 4.18e6  # [devries1963]; 1.00 cal cm-3 K-1 = 4.184e6 J m-3 K-1
C_ICE_J_M3K = 1.88e6  # [devries1963] (0.45 cal cm-3 K-1), from memory
C_AIR_J_M3K = 1.25e3  # [devries1963] (0.0003 cal cm-3 K-1); neglected in the sum

# Latent heat of fusion of water at 0 degC [J kg-1]
L_FUSION_J_KG = 3.34e5  # common practice (333.6 kJ kg-1 in physical tables)

# --------------------------------------------------------------------------------------
# Model parameter tables
# --------------------------------------------------------------------------------------

#: Sand fraction above which a soil counts as coarse-textured [1]. Lu et al. (2007),
#: Fig. 2: "coarse-textured soils with sand fraction >0.40" (checked against the caption).
COARSE_SAND_FRACTION = 0.40

#: Organic-matter mass fraction of solids at and above which Cote & Konrad's "organic
#: fibrous soils (peat)" class is used [1]. Our rule, not the paper's: USDA Soil Taxonomy
#: calls soil material organic at 12-18 % organic carbon (clay dependent), i.e. about
#: 20-31 % organic matter with the conventional factor 1.724; we take the upper end.
ORGANIC_SOIL_FRACTION = 0.30

#: Johansen (1975) dry conductivity of mineral soils, Farouki (1981) form:
#: lambda_dry = (a rho_b + b) / (c - d rho_b), rho_b in kg m-3; quoted accuracy +-20 %.
JOHANSEN_DRY = MappingProxyType({"a": 0.135, "b": 64.7, "c": 2700.0, "d": 0.947})

#: Johansen (1975) unfrozen Kersten number: Ke = slope * log10(Sr) + 1, valid for
#: Sr > 0.05 (coarse) and Sr > 0.1 (fine); frozen: Ke = Sr. Farouki (1981).
JOHANSEN_KE_SLOPE = MappingProxyType({"coarse": 0.7, "fine": 1.0})

#: Lu et al. (2007) Kersten number Ke = exp(alpha (1 - Sr**(alpha - beta))).
LU2007_ALPHA = MappingProxyType({"coarse": 0.96, "fine": 0.27})
LU2007_BETA = 1.33
#: Lu et al. (2007) dry conductivity lambda_dry = slope * n + intercept [W m-1 K-1].
LU2007_DRY = MappingProxyType({"slope": -0.56, "intercept": 0.51})

#: Cote & Konrad (2005) soil classes, in the order of their integer codes 0..3.
COTE_KONRAD_CLASSES = ("gravel_coarse_sand", "medium_fine_sand", "silt_clay", "organic_fibrous")

#: Cote & Konrad (2005) kappa of Ke = kappa Sr / (1 + (kappa - 1) Sr), (unfrozen, frozen).
#: From memory (table number not checked).
COTE_KONRAD_KAPPA = MappingProxyType(
    {
        "gravel_coarse_sand": (4.60, 1.70),
        "medium_fine_sand": (3.55, 0.95),
        "silt_clay": (1.90, 0.85),
        "organic_fibrous": (0.60, 0.25),
    }
)

#: Cote & Konrad (2005) dry conductivity lambda_dry = chi 10**(-eta n): (chi [W m-1 K-1],
#: eta [1]) by material. From memory (table number not checked).
COTE_KONRAD_DRY = MappingProxyType(
    {
        "crushed_rock": (1.70, 1.80),
        "natural_mineral": (0.75, 1.20),
        "organic_fibrous": (0.30, 0.87),
    }
)

#: Conductivity model names accepted by :func:`thermal_conductivity`.
CONDUCTIVITY_MODELS = ("johansen", "cote-konrad", "lu2007")

REFERENCES = MappingProxyType(
    {
        "devries1963": "de Vries, D. A. (1963). Thermal properties of soils. In W. R. van "
        "Wijk (Ed.), Physics of Plant Environment (pp. 210-235). North-Holland.",
        "johansen1975": "Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, "
        "Norwegian Institute of Technology, Trondheim. CRREL Draft Translation 637 (1977).",
        "farouki1981": "Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph "
        "81-1. US Army Cold Regions Research and Engineering Laboratory.",
        "peterslidard1998": "Peters-Lidard, C. D., Blackburn, E., Liang, X., & Wood, E. F. "
        "(1998). The effect of soil thermal conductivity parameterization on surface energy "
        "fluxes and temperatures. J. Atmos. Sci., 55(7), 1209-1224. "
        "doi:10.1175/1520-0469(1998)055<1209:TEOSTC>2.0.CO;2",
        "cotekonrad2005": "Cote, J., & Konrad, J.-M. (2005). A generalized thermal "
        "conductivity model for soils and construction materials. Can. Geotech. J., 42(2), "
        "443-458. doi:10.1139/t04-106",
        "lu2007": "Lu, S., Ren, T., Gong, Y., & Horton, R. (2007). An improved model for "
        "predicting soil thermal conductivity from water content at room temperature. Soil "
        "Sci. Soc. Am. J., 71(1), 8-14. doi:10.2136/sssaj2006.0041",
    }
)

_SR_FLOOR = 1e-12  # keeps log10 and negative powers finite at Sr = 0; Ke is 0 there anyway


# --------------------------------------------------------------------------------------
# Container-neutral helpers (ufuncs only)
# --------------------------------------------------------------------------------------


def _float_type(*inputs: ArrayLike) -> type:
    """Float scalar type for constants combined with ``inputs``: their promoted float
    type (at least float32; integers promote as NumPy does), float64 without arrays.

    Reads only ``.dtype``, so dask arrays are not computed.
    """
    dtypes = [x.dtype for x in inputs if hasattr(x, "dtype")]
    if not dtypes:
        return np.float64
    return np.result_type(np.float32, *dtypes).type


def _choose(
    condition: ArrayLike, if_true: ArrayLike, if_false: ArrayLike, like: ArrayLike | None = None
) -> Array:
    """``np.where`` built from ufuncs, so xarray and dask inputs keep their type.

    Exact for finite branches (``a * 1 + b * 0 == a``). Unlike ``np.where`` a NaN in
    either branch gives NaN, which is what the callers want (NaN in, NaN out); branches
    must not be infinite. With ``like``, Python-number branches take the float type of
    ``like`` (float32 stays float32 when choosing between two constants).
    """
    if like is not None:
        ftype = _float_type(like)
        if isinstance(if_true, int | float):
            if_true = ftype(if_true)
        if isinstance(if_false, int | float):
            if_false = ftype(if_false)
    return if_true * condition + if_false * np.logical_not(condition)


def _clip(x: ArrayLike, lower: ArrayLike, upper: ArrayLike) -> Array:
    """``np.clip`` from ufuncs (NaN propagates).

    A Python-number ``x`` takes the float type of array bounds, so that a float default
    such as ``unfrozen_water_m3m3=0.0`` does not turn float32 results into float64.
    """
    if isinstance(x, int | float):
        x = _float_type(lower, upper)(x)
    return np.minimum(np.maximum(x, lower), upper)


def _with_nan_of(value: ArrayLike, *inputs: ArrayLike) -> Array:
    """Return ``value``, NaN wherever any of ``inputs`` is NaN.

    For inputs that only enter comparisons (e.g. the sand fraction in the coarse/fine
    rule), where NaN would otherwise silently select one branch.
    """
    for x in inputs:
        value = value + 0.0 * x
    return value


# --------------------------------------------------------------------------------------
# Composition
# --------------------------------------------------------------------------------------


def particle_density(organic_fraction: ArrayLike) -> Array:
    """Density of the soil solids, mass-weighted harmonic mix of mineral and organic.

    ``1 / rho_s = (1 - f) / rho_mineral + f / rho_organic``.

    Parameters
    ----------
    organic_fraction : array_like
        Organic-matter mass fraction of the solids. [1]

    Returns
    -------
    Particle density. [kg m-3]

    References
    ----------
    de Vries (1963) for the organic-matter density (1300 kg m-3); the mineral density
    2650 kg m-3 is common practice.
    """
    return 1.0 / (
        (1.0 - organic_fraction) / RHO_MINERAL_KG_M3 + organic_fraction / RHO_ORGANIC_KG_M3
    )


def porosity(bulk_density_kg_m3: ArrayLike, particle_density_kg_m3: ArrayLike) -> Array:
    """Total porosity ``n = 1 - rho_b / rho_s``.

    Parameters
    ----------
    bulk_density_kg_m3 : array_like
        Dry bulk density. [kg m-3]
    particle_density_kg_m3 : array_like
        Density of the solids, see :func:`particle_density`. [kg m-3]

    Returns
    -------
    Porosity. [m3 m-3]
    """
    return 1.0 - bulk_density_kg_m3 / particle_density_kg_m3


def solid_volume_fractions(
    bulk_density_kg_m3: ArrayLike, organic_fraction: ArrayLike
) -> tuple[Array, Array]:
    """Volume fractions of mineral and organic solids in the bulk soil.

    ``x_m = rho_b (1 - f) / rho_mineral``, ``x_o = rho_b f / rho_organic``; their sum is
    ``1 - n`` with n from :func:`porosity` and :func:`particle_density`.

    Parameters
    ----------
    bulk_density_kg_m3 : array_like
        Dry bulk density. [kg m-3]
    organic_fraction : array_like
        Organic-matter mass fraction of the solids. [1]

    Returns
    -------
    (mineral, organic) volume fractions. [m3 m-3]
    """
    mineral = bulk_density_kg_m3 * (1.0 - organic_fraction) / RHO_MINERAL_KG_M3
    organic = bulk_density_kg_m3 * organic_fraction / RHO_ORGANIC_KG_M3
    return mineral, organic


def organic_volume_fraction_of_solids(organic_fraction: ArrayLike) -> Array:
    """Volume fraction of organic matter within the solids, from its mass fraction.

    ``v = (f / rho_organic) / ((1 - f) / rho_mineral + f / rho_organic)``.

    Parameters
    ----------
    organic_fraction : array_like
        Organic-matter mass fraction of the solids. [1]

    Returns
    -------
    Organic volume fraction of the solids. [m3 m-3]
    """
    return (organic_fraction / RHO_ORGANIC_KG_M3) * particle_density(organic_fraction)


def quartz_from_sand(sand_fraction: ArrayLike) -> Array:
    """Quartz fraction of the mineral solids, taken equal to the sand fraction.

    Lu et al. (2007, Fig. 5) take the quartz content as the sand fraction; the quartz
    contents Peters-Lidard et al. (1998, table of texture classes) recommend are close to
    the sand contents of the classes (from memory). Gives 0..1 (clipped).

    Parameters
    ----------
    sand_fraction : array_like
        Sand mass fraction of the mineral fine earth. [1]

    Returns
    -------
    Quartz fraction of the mineral solids. [1]

    References
    ----------
    Peters-Lidard, C. D., Blackburn, E., Liang, X., & Wood, E. F. (1998). J. Atmos. Sci.,
    55(7), 1209-1224. doi:10.1175/1520-0469(1998)055<1209:TEOSTC>2.0.CO;2

    Lu, S., Ren, T., Gong, Y., & Horton, R. (2007). Soil Sci. Soc. Am. J., 71(1), 8-14.
    doi:10.2136/sssaj2006.0041
    """
    return _clip(sand_fraction, 0.0, 1.0)


def is_coarse(sand_fraction: ArrayLike) -> Array:
    """Coarse-textured soil: sand fraction above 0.40 (Lu et al., 2007, Fig. 2).

    A fraction within :data:`CLASS_LIMIT_TOLERANCE` of 0.40 (float32 rounding of 40 %)
    counts as 0.40, i.e. fine-textured.

    Parameters
    ----------
    sand_fraction : array_like
        Sand mass fraction of the mineral fine earth. [1]

    Returns
    -------
    Boolean (array); NaN sand gives False, callers propagate the NaN separately.
    """
    return np.greater(sand_fraction, COARSE_SAND_FRACTION + CLASS_LIMIT_TOLERANCE)


# --------------------------------------------------------------------------------------
# Heat capacity
# --------------------------------------------------------------------------------------


def heat_capacity_de_vries(
    mineral_m3m3: ArrayLike,
    organic_m3m3: ArrayLike,
    water_m3m3: ArrayLike,
    ice_m3m3: ArrayLike = 0.0,
) -> Array:
    """Volumetric heat capacity as the volume-weighted sum over constituents.

    ``C = 1.92e6 x_m + 2.51e6 x_o + 4.18e6 x_w + 1.88e6 x_i``; air (1.25e3 J m-3 K-1)
    is neglected, as by de Vries.

    Parameters
    ----------
    mineral_m3m3 : array_like
        Volume fraction of mineral solids. [m3 m-3]
    organic_m3m3 : array_like
        Volume fraction of organic solids. [m3 m-3]
    water_m3m3 : array_like
        Volumetric liquid-water content. [m3 m-3]
    ice_m3m3 : array_like, default 0
        Volumetric ice content. [m3 m-3]

    Returns
    -------
    Volumetric heat capacity. [J m-3 K-1]

    References
    ----------
    de Vries, D. A. (1963). Thermal properties of soils. In W. R. van Wijk (Ed.), Physics
    of Plant Environment (pp. 210-235). Amsterdam: North-Holland.
    """
    return (
        C_MINERAL_J_M3K * mineral_m3m3
        + C_ORGANIC_J_M3K * organic_m3m3
        + C_WATER_J_M3K * water_m3m3
        + C_ICE_J_M3K * ice_m3m3
    )


def volumetric_latent_heat(water_m3m3: ArrayLike) -> Array:
    """Latent heat released by freezing the given water content, ``rho_w L theta``.

    Parameters
    ----------
    water_m3m3 : array_like
        Volumetric water content that freezes. [m3 m-3]

    Returns
    -------
    Volumetric latent heat. [J m-3]
    """
    return RHO_WATER_KG_M3 * L_FUSION_J_KG * water_m3m3


def diffusivity(conductivity_w_mk: ArrayLike, heat_capacity_j_m3k: ArrayLike) -> Array:
    """Thermal diffusivity ``kappa = lambda / C``.

    Parameters
    ----------
    conductivity_w_mk : array_like
        Thermal conductivity. [W m-1 K-1]
    heat_capacity_j_m3k : array_like
        Volumetric heat capacity. [J m-3 K-1]

    Returns
    -------
    Thermal diffusivity. [m2 s-1]
    """
    return conductivity_w_mk / heat_capacity_j_m3k


# --------------------------------------------------------------------------------------
# Conductivity building blocks
# --------------------------------------------------------------------------------------


def solids_conductivity(
    quartz_fraction: ArrayLike, organic_volume_fraction_of_solids: ArrayLike = 0.0
) -> Array:
    """Conductivity of the soil solids, geometric mean of their constituents.

    ``lambda_m = 7.7**q * lambda_o**(1 - q)`` with ``lambda_o = 2.0`` for q > 0.2 and
    3.0 otherwise (Johansen, 1975, as given by Peters-Lidard et al., 1998). Organic
    matter, when present, enters the same geometric mean with 0.25 W m-1 K-1 (Farouki,
    1981): ``lambda_s = lambda_m**(1 - v) * 0.25**v``. The organic term is our extension
    of Johansen's mineral form.

    Parameters
    ----------
    quartz_fraction : array_like
        Quartz fraction of the mineral solids. [1]
    organic_volume_fraction_of_solids : array_like, default 0
        Organic volume fraction of the solids, see
        :func:`organic_volume_fraction_of_solids`. [m3 m-3]

    Returns
    -------
    Solids conductivity. [W m-1 K-1]

    References
    ----------
    Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Trondheim. CRREL
    Draft Translation 637 (1977).

    Peters-Lidard et al. (1998). J. Atmos. Sci., 55(7), 1209-1224.

    Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.
    """
    ln_other = _choose(
        np.greater(quartz_fraction, QUARTZ_LOW_THRESHOLD + CLASS_LIMIT_TOLERANCE),
        math.log(K_OTHER_MINERALS_W_MK),
        math.log(K_OTHER_MINERALS_LOW_QUARTZ_W_MK),
        like=quartz_fraction,
    )
    q = quartz_fraction
    v = organic_volume_fraction_of_solids
    # the geometric means as one exp of weighted logs (one transcendental per cell
    # instead of four powers)
    ln_mineral = q * math.log(K_QUARTZ_W_MK) + (1.0 - q) * ln_other
    return np.exp((1.0 - v) * ln_mineral + v * math.log(K_ORGANIC_W_MK))


def saturated_conductivity(
    solids_w_mk: ArrayLike,
    porosity: ArrayLike,
    frozen: ArrayLike = False,
    unfrozen_water_m3m3: ArrayLike = 0.0,
) -> Array:
    """Saturated conductivity, geometric mean of solids and pore filling.

    Unfrozen: ``lambda_s**(1 - n) * lambda_w**n``. Frozen: ``lambda_s**(1 - n) *
    lambda_i**(n - theta_u) * lambda_w**theta_u`` with the unfrozen water content
    ``theta_u`` clipped to [0, n] (Johansen, 1975; Farouki, 1981).

    Parameters
    ----------
    solids_w_mk : array_like
        Conductivity of the solids, see :func:`solids_conductivity`. [W m-1 K-1]
    porosity : array_like
        Porosity. [m3 m-3]
    frozen : bool or array_like of bool, default False
        Pore water frozen (per cell when an array).
    unfrozen_water_m3m3 : array_like, default 0
        Liquid water remaining in frozen soil. [m3 m-3]

    Returns
    -------
    Saturated conductivity. [W m-1 K-1]

    References
    ----------
    Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Trondheim.

    Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.
    """
    n = porosity
    # geometric means as exps of weighted logs; the frozen form only where asked for
    solids_part = (1.0 - n) * np.log(solids_w_mk)
    unfrozen = np.exp(solids_part + n * math.log(K_WATER_W_MK))
    if np.ndim(frozen) == 0 and not frozen:
        return unfrozen
    theta_u = _clip(unfrozen_water_m3m3, 0.0, n)
    frozen_value = np.exp(solids_part + (n - theta_u) * math.log(K_ICE_W_MK)
                          + theta_u * math.log(K_WATER_W_MK))
    return _choose(frozen, frozen_value, unfrozen)


def dry_conductivity_johansen(bulk_density_kg_m3: ArrayLike) -> Array:
    """Johansen's (1975) dry conductivity of natural mineral soils.

    ``lambda_dry = (0.135 rho_b + 64.7) / (2700 - 0.947 rho_b)``, rho_b in kg m-3 (solids
    density 2700 kg m-3 assumed by the fit); quoted accuracy +-20 %.

    Parameters
    ----------
    bulk_density_kg_m3 : array_like
        Dry bulk density. [kg m-3]

    Returns
    -------
    Dry conductivity. [W m-1 K-1]

    References
    ----------
    Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Trondheim.

    Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.
    """
    p = JOHANSEN_DRY
    return (p["a"] * bulk_density_kg_m3 + p["b"]) / (p["c"] - p["d"] * bulk_density_kg_m3)


def kersten_number_johansen(
    saturation: ArrayLike, coarse: ArrayLike, frozen: ArrayLike = False
) -> Array:
    """Johansen's (1975) Kersten number (normalised conductivity).

    Unfrozen: ``Ke = 0.7 log10(Sr) + 1`` (coarse) or ``log10(Sr) + 1`` (fine); frozen:
    ``Ke = Sr``. Clipped to [0, 1], so Ke = 0 below Sr = 0.037 (coarse) and 0.1 (fine);
    Johansen gives the coarse form for Sr > 0.05.

    Parameters
    ----------
    saturation : array_like
        Degree of saturation (water plus ice over porosity), clipped to [0, 1]. [1]
    coarse : bool or array_like of bool
        Coarse-textured soil, see :func:`is_coarse`.
    frozen : bool or array_like of bool, default False
        Pore water frozen.

    Returns
    -------
    Kersten number. [1]

    References
    ----------
    Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Trondheim.

    Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.
    """
    sr = _clip(saturation, 0.0, 1.0)
    log_sr = np.log10(np.maximum(sr, _SR_FLOOR))
    slope = _choose(coarse, JOHANSEN_KE_SLOPE["coarse"], JOHANSEN_KE_SLOPE["fine"], like=sr)
    unfrozen = _clip(slope * log_sr + 1.0, 0.0, 1.0)
    return _choose(frozen, sr, unfrozen)


def dry_conductivity_lu2007(porosity: ArrayLike) -> Array:
    """Lu et al. (2007) dry conductivity ``lambda_dry = -0.56 n + 0.51``.

    The linear fit reaches zero near n = 0.91; we floor it at the conductivity of air
    (0.025 W m-1 K-1), below which no mixture of air and solids can conduct (lower
    Hashin-Shtrikman bound). The floor only acts for n > 0.87 (peat-like porosity,
    outside the fitted mineral soils).

    Parameters
    ----------
    porosity : array_like
        Porosity. [m3 m-3]

    Returns
    -------
    Dry conductivity. [W m-1 K-1]

    References
    ----------
    Lu, S., Ren, T., Gong, Y., & Horton, R. (2007). Soil Sci. Soc. Am. J., 71(1), 8-14.
    doi:10.2136/sssaj2006.0041
    """
    value = LU2007_DRY["slope"] * porosity + LU2007_DRY["intercept"]
    return np.maximum(value, K_AIR_W_MK)


def kersten_number_lu2007(
    saturation: ArrayLike, coarse: ArrayLike, frozen: ArrayLike = False
) -> Array:
    """Lu et al. (2007) Kersten number ``Ke = exp(alpha (1 - Sr**(alpha - 1.33)))``.

    alpha = 0.96 for coarse and 0.27 for fine textures. Ke rises monotonically from 0 at
    Sr = 0 to 1 at Sr = 1.

    Lu et al. fitted unfrozen soils only. For frozen soil we use Johansen's frozen form
    ``Ke = Sr`` (our extension, not part of the paper).

    Parameters
    ----------
    saturation : array_like
        Degree of saturation, clipped to [0, 1]. [1]
    coarse : bool or array_like of bool
        Coarse-textured soil, see :func:`is_coarse`.
    frozen : bool or array_like of bool, default False
        Pore water frozen.

    Returns
    -------
    Kersten number. [1]

    References
    ----------
    Lu, S., Ren, T., Gong, Y., & Horton, R. (2007). Soil Sci. Soc. Am. J., 71(1), 8-14.
    doi:10.2136/sssaj2006.0041
    """
    sr = _clip(saturation, 0.0, 1.0)
    alpha = _choose(coarse, LU2007_ALPHA["coarse"], LU2007_ALPHA["fine"], like=sr)
    # Sr**(alpha - 1.33) has a negative exponent; the floor keeps it finite at Sr = 0,
    # where exp(...) underflows to 0 exactly.
    unfrozen = np.exp(alpha * (1.0 - np.maximum(sr, _SR_FLOOR) ** (alpha - LU2007_BETA)))
    return _choose(frozen, sr, unfrozen)


def cote_konrad_soil_class(sand_fraction: ArrayLike, organic_fraction: ArrayLike) -> Array:
    """Cote & Konrad (2005) soil class code from texture and organic matter.

    Our rule (the paper classifies by material, not by texture fractions):

    * code 3 ``organic_fibrous`` when the organic-matter fraction is >= 0.30
      (:data:`ORGANIC_SOIL_FRACTION`);
    * otherwise code 1 ``medium_fine_sand`` for coarse textures (:func:`is_coarse`): the
      sand of a fine-earth texture map is mostly medium and fine sand;
    * otherwise code 2 ``silt_clay``.

    Code 0 ``gravel_coarse_sand`` cannot be told from fine-earth fractions; pass it
    explicitly as ``soil_class`` to :func:`conductivity_cote_konrad`.

    Parameters
    ----------
    sand_fraction : array_like
        Sand mass fraction of the mineral fine earth. [1]
    organic_fraction : array_like
        Organic-matter mass fraction of the solids. [1]

    Returns
    -------
    Integer-valued class code (float where inputs are NaN: NaN). [1]
    """
    organic = np.greater_equal(organic_fraction, ORGANIC_SOIL_FRACTION - CLASS_LIMIT_TOLERANCE)
    mineral_code = _choose(is_coarse(sand_fraction), 1.0, 2.0, like=sand_fraction)
    return _with_nan_of(
        _choose(organic, 3.0, mineral_code, like=organic_fraction), sand_fraction, organic_fraction
    )


def _cote_konrad_table(soil_class: ArrayLike) -> tuple[Array, Array, Array, Array]:
    """(kappa_unfrozen, kappa_frozen, chi, eta) for class codes (ufunc table lookup).

    Codes are rounded and clipped to 0..3; a NaN code gives NaN parameters.
    """
    code = _clip(np.rint(soil_class), 0.0, float(len(COTE_KONRAD_CLASSES) - 1))
    ftype = _float_type(soil_class)
    kappa_u = kappa_f = chi = eta = 0.0
    for index, name in enumerate(COTE_KONRAD_CLASSES):
        member = np.equal(code, index)
        k_u, k_f = COTE_KONRAD_KAPPA[name]
        dry_row = "organic_fibrous" if name == "organic_fibrous" else "natural_mineral"
        c, e = COTE_KONRAD_DRY[dry_row]
        kappa_u = kappa_u + ftype(k_u) * member
        kappa_f = kappa_f + ftype(k_f) * member
        chi = chi + ftype(c) * member
        eta = eta + ftype(e) * member
    return tuple(_with_nan_of(x, soil_class) for x in (kappa_u, kappa_f, chi, eta))


def dry_conductivity_cote_konrad(
    porosity: ArrayLike, chi_w_mk: ArrayLike = 0.75, eta: ArrayLike = 1.20
) -> Array:
    """Cote & Konrad (2005) dry conductivity ``lambda_dry = chi 10**(-eta n)``.

    Defaults are the natural-mineral-soil values (chi = 0.75 W m-1 K-1, eta = 1.20);
    see :data:`COTE_KONRAD_DRY` for crushed rock and peat.

    Parameters
    ----------
    porosity : array_like
        Porosity. [m3 m-3]
    chi_w_mk : array_like, default 0.75
        Material parameter chi. [W m-1 K-1]
    eta : array_like, default 1.20
        Material parameter eta. [1]

    Returns
    -------
    Dry conductivity. [W m-1 K-1]

    References
    ----------
    Cote, J., & Konrad, J.-M. (2005). Can. Geotech. J., 42(2), 443-458.
    doi:10.1139/t04-106
    """
    return chi_w_mk * 10.0 ** (-eta * porosity)


def kersten_number_cote_konrad(saturation: ArrayLike, kappa: ArrayLike) -> Array:
    """Cote & Konrad (2005) Kersten number ``Ke = kappa Sr / (1 + (kappa - 1) Sr)``.

    Parameters
    ----------
    saturation : array_like
        Degree of saturation, clipped to [0, 1]. [1]
    kappa : array_like
        Soil-class parameter, see :data:`COTE_KONRAD_KAPPA` (unfrozen or frozen). [1]

    Returns
    -------
    Kersten number. [1]

    References
    ----------
    Cote, J., & Konrad, J.-M. (2005). Can. Geotech. J., 42(2), 443-458.
    doi:10.1139/t04-106
    """
    sr = _clip(saturation, 0.0, 1.0)
    return kappa * sr / (1.0 + (kappa - 1.0) * sr)


# --------------------------------------------------------------------------------------
# Conductivity models
# --------------------------------------------------------------------------------------


def _blend(dry: Array, sat: Array, ke: Array) -> Array:
    """``lambda_dry + Ke (lambda_sat - lambda_dry)`` (Johansen, 1975)."""
    return dry + ke * (sat - dry)


def _solids_and_sat(
    porosity: ArrayLike,
    quartz_fraction: ArrayLike,
    organic_fraction: ArrayLike,
    frozen: ArrayLike,
    unfrozen_water_m3m3: ArrayLike,
) -> Array:
    solids = solids_conductivity(
        quartz_fraction, organic_volume_fraction_of_solids(organic_fraction)
    )
    return saturated_conductivity(solids, porosity, frozen, unfrozen_water_m3m3)


def conductivity_johansen(
    porosity: ArrayLike,
    saturation: ArrayLike,
    quartz_fraction: ArrayLike,
    bulk_density_kg_m3: ArrayLike,
    sand_fraction: ArrayLike,
    organic_fraction: ArrayLike = 0.0,
    frozen: ArrayLike = False,
    unfrozen_water_m3m3: ArrayLike = 0.0,
) -> Array:
    """Thermal conductivity after Johansen (1975).

    ``lambda = lambda_dry + Ke (lambda_sat - lambda_dry)`` with
    :func:`dry_conductivity_johansen`, :func:`saturated_conductivity` of
    :func:`solids_conductivity`, and :func:`kersten_number_johansen`; coarse/fine by
    :func:`is_coarse`.

    Parameters
    ----------
    porosity : array_like
        Porosity. [m3 m-3]
    saturation : array_like
        Degree of saturation (water plus ice over porosity), clipped to [0, 1]. [1]
    quartz_fraction : array_like
        Quartz fraction of the mineral solids. [1]
    bulk_density_kg_m3 : array_like
        Dry bulk density. [kg m-3]
    sand_fraction : array_like
        Sand mass fraction of the mineral fine earth (texture class). [1]
    organic_fraction : array_like, default 0
        Organic-matter mass fraction of the solids. [1]
    frozen : bool or array_like of bool, default False
        Pore water frozen.
    unfrozen_water_m3m3 : array_like, default 0
        Liquid water remaining in frozen soil. [m3 m-3]

    Returns
    -------
    Thermal conductivity. [W m-1 K-1]

    References
    ----------
    Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Norwegian Institute
    of Technology, Trondheim. CRREL Draft Translation 637 (1977).

    Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.
    """
    sat = _solids_and_sat(porosity, quartz_fraction, organic_fraction, frozen, unfrozen_water_m3m3)
    dry = dry_conductivity_johansen(bulk_density_kg_m3)
    ke = kersten_number_johansen(saturation, is_coarse(sand_fraction), frozen)
    return _with_nan_of(_blend(dry, sat, ke), sand_fraction)


def conductivity_cote_konrad(
    porosity: ArrayLike,
    saturation: ArrayLike,
    quartz_fraction: ArrayLike,
    sand_fraction: ArrayLike,
    organic_fraction: ArrayLike = 0.0,
    frozen: ArrayLike = False,
    unfrozen_water_m3m3: ArrayLike = 0.0,
    soil_class: ArrayLike | None = None,
) -> Array:
    """Thermal conductivity after Cote & Konrad (2005).

    ``Ke = kappa Sr / (1 + (kappa - 1) Sr)`` with kappa of the soil class (unfrozen or
    frozen value), ``lambda_dry = chi 10**(-eta n)`` (natural mineral soils: chi = 0.75,
    eta = 1.20; peat: 0.30, 0.87), and the geometric-mean saturated conductivity.

    Parameters
    ----------
    porosity : array_like
        Porosity. [m3 m-3]
    saturation : array_like
        Degree of saturation (water plus ice over porosity), clipped to [0, 1]. [1]
    quartz_fraction : array_like
        Quartz fraction of the mineral solids. [1]
    sand_fraction : array_like
        Sand mass fraction of the mineral fine earth (soil class). [1]
    organic_fraction : array_like, default 0
        Organic-matter mass fraction of the solids. [1]
    frozen : bool or array_like of bool, default False
        Pore water frozen.
    unfrozen_water_m3m3 : array_like, default 0
        Liquid water remaining in frozen soil. [m3 m-3]
    soil_class : array_like, optional
        Class codes 0..3 in the order of :data:`COTE_KONRAD_CLASSES`; by default from
        :func:`cote_konrad_soil_class`.

    Returns
    -------
    Thermal conductivity. [W m-1 K-1]

    References
    ----------
    Cote, J., & Konrad, J.-M. (2005). A generalized thermal conductivity model for soils
    and construction materials. Canadian Geotechnical Journal, 42(2), 443-458.
    doi:10.1139/t04-106
    """
    if soil_class is None:
        soil_class = cote_konrad_soil_class(sand_fraction, organic_fraction)
    kappa_u, kappa_f, chi, eta = _cote_konrad_table(soil_class)
    sat = _solids_and_sat(porosity, quartz_fraction, organic_fraction, frozen, unfrozen_water_m3m3)
    dry = dry_conductivity_cote_konrad(porosity, chi, eta)
    ke = kersten_number_cote_konrad(saturation, _choose(frozen, kappa_f, kappa_u))
    return _with_nan_of(_blend(dry, sat, ke), sand_fraction)


def conductivity_lu2007(
    porosity: ArrayLike,
    saturation: ArrayLike,
    quartz_fraction: ArrayLike,
    sand_fraction: ArrayLike,
    organic_fraction: ArrayLike = 0.0,
    frozen: ArrayLike = False,
    unfrozen_water_m3m3: ArrayLike = 0.0,
) -> Array:
    """Thermal conductivity after Lu et al. (2007).

    ``Ke = exp(alpha (1 - Sr**(alpha - 1.33)))`` (alpha 0.96 coarse, 0.27 fine),
    ``lambda_dry = -0.56 n + 0.51`` and the geometric-mean saturated conductivity with
    Johansen's solids conductivity, as in the paper.

    Frozen soil is our extension (Lu et al. fitted unfrozen soils): ice in the saturated
    geometric mean and Johansen's frozen ``Ke = Sr``; the dry value is unchanged.

    Parameters
    ----------
    porosity : array_like
        Porosity. [m3 m-3]
    saturation : array_like
        Degree of saturation (water plus ice over porosity), clipped to [0, 1]. [1]
    quartz_fraction : array_like
        Quartz fraction of the mineral solids. [1]
    sand_fraction : array_like
        Sand mass fraction of the mineral fine earth (coarse/fine alpha). [1]
    organic_fraction : array_like, default 0
        Organic-matter mass fraction of the solids. [1]
    frozen : bool or array_like of bool, default False
        Pore water frozen.
    unfrozen_water_m3m3 : array_like, default 0
        Liquid water remaining in frozen soil. [m3 m-3]

    Returns
    -------
    Thermal conductivity. [W m-1 K-1]

    References
    ----------
    Lu, S., Ren, T., Gong, Y., & Horton, R. (2007). An improved model for predicting soil
    thermal conductivity from water content at room temperature. Soil Science Society of
    America Journal, 71(1), 8-14. doi:10.2136/sssaj2006.0041
    """
    sat = _solids_and_sat(porosity, quartz_fraction, organic_fraction, frozen, unfrozen_water_m3m3)
    dry = dry_conductivity_lu2007(porosity)
    ke = kersten_number_lu2007(saturation, is_coarse(sand_fraction), frozen)
    return _with_nan_of(_blend(dry, sat, ke), sand_fraction)


def _model_name(model: str) -> str:
    name = str(model).strip().lower()
    if name not in CONDUCTIVITY_MODELS:
        raise ValueError(
            f"unknown conductivity model {model!r}; valid names: {', '.join(CONDUCTIVITY_MODELS)}"
        )
    return name


def thermal_conductivity(
    model: str,
    porosity: ArrayLike,
    saturation: ArrayLike,
    quartz_fraction: ArrayLike,
    bulk_density_kg_m3: ArrayLike,
    sand_fraction: ArrayLike,
    organic_fraction: ArrayLike = 0.0,
    frozen: ArrayLike = False,
    unfrozen_water_m3m3: ArrayLike = 0.0,
) -> Array:
    """Thermal conductivity by the named model.

    Parameters
    ----------
    model : {"johansen", "cote-konrad", "lu2007"}
        Conductivity model (case-insensitive); see :data:`CONDUCTIVITY_MODELS`.
    porosity, saturation, quartz_fraction, sand_fraction, organic_fraction, frozen, \
unfrozen_water_m3m3
        As in :func:`conductivity_johansen`.
    bulk_density_kg_m3 : array_like
        Dry bulk density, used by "johansen" only. [kg m-3]

    Returns
    -------
    Thermal conductivity. [W m-1 K-1]

    Raises
    ------
    ValueError
        For an unknown model name; the message lists the valid names.
    """
    name = _model_name(model)
    common = dict(
        organic_fraction=organic_fraction,
        frozen=frozen,
        unfrozen_water_m3m3=unfrozen_water_m3m3,
    )
    if name == "johansen":
        return conductivity_johansen(
            porosity, saturation, quartz_fraction, bulk_density_kg_m3, sand_fraction, **common
        )
    if name == "cote-konrad":
        return conductivity_cote_konrad(
            porosity, saturation, quartz_fraction, sand_fraction, **common
        )
    return conductivity_lu2007(porosity, saturation, quartz_fraction, sand_fraction, **common)


# --------------------------------------------------------------------------------------
# Facade for the pipeline kernel
# --------------------------------------------------------------------------------------


def soil_thermal_properties(
    sand_fraction: ArrayLike,
    clay_fraction: ArrayLike,
    water_m3m3: ArrayLike,
    bulk_density_kg_m3: ArrayLike,
    organic_fraction: ArrayLike,
    quartz_fraction: ArrayLike | None = None,
    model: str = "johansen",
    frozen: ArrayLike = False,
    unfrozen_water_m3m3: ArrayLike = 0.0,
) -> dict[str, Array]:
    """Porosity, saturation, conductivity, heat capacity and diffusivity of a soil.

    Steps: particle density from organic matter (:func:`particle_density`), porosity,
    solid volume fractions; water content clipped to [0, n] so that saturation lies in
    [0, 1] and heat capacity and conductivity describe the same state; conductivity by
    ``model`` (:func:`thermal_conductivity`); heat capacity after de Vries (1963);
    diffusivity = conductivity / heat capacity.

    Frozen soil (``frozen`` true): all pore water except ``unfrozen_water_m3m3`` (clipped
    to [0, water]) is ice, and the ice *volume equals the water volume it replaces*. This
    keeps saturation and the pore space unchanged, but understates the ice mass by the
    density ratio (917/1000, i.e. about 9 % of the ice term of the heat capacity); the
    real 9 % expansion could not fit a saturated pore space. Heat capacity uses 1.88e6
    J m-3 K-1 for the ice volume. Latent heat is not included (an apparent heat capacity
    belongs to the freeze-thaw solver; see :func:`volumetric_latent_heat`).

    Parameters
    ----------
    sand_fraction : array_like
        Sand mass fraction of the mineral fine earth. [1]
    clay_fraction : array_like
        Clay mass fraction of the mineral fine earth. [1] No model here uses it beyond
        NaN propagation (the coarse/fine rule is sand-based, see :func:`is_coarse`); it
        is part of the signature so that callers need not change when a model uses it.
    water_m3m3 : array_like
        Volumetric water content (liquid plus frozen). [m3 m-3]
    bulk_density_kg_m3 : array_like
        Dry bulk density. [kg m-3]
    organic_fraction : array_like
        Organic-matter mass fraction of the solids. [1]
    quartz_fraction : array_like, optional
        Quartz fraction of the mineral solids. [1] Default :func:`quartz_from_sand`.
    model : {"johansen", "cote-konrad", "lu2007"}, default "johansen"
        Conductivity model.
    frozen : bool or array_like of bool, default False
        Pore water frozen (per cell when an array).
    unfrozen_water_m3m3 : array_like, default 0
        Liquid water remaining in frozen soil. [m3 m-3]

    Returns
    -------
    dict of float arrays (container of the inputs):
        ``"porosity"`` [m3 m-3], ``"saturation"`` [1], ``"conductivity_w_mk"``
        [W m-1 K-1], ``"heat_capacity_j_m3k"`` [J m-3 K-1], ``"diffusivity_m2_s"``
        [m2 s-1]. NaN in any input gives NaN in every output.

    Raises
    ------
    ValueError
        For an unknown model name.

    References
    ----------
    See the module docstring and the model functions.
    """
    _model_name(model)  # fail before any work
    if quartz_fraction is None:
        quartz_fraction = quartz_from_sand(sand_fraction)

    rho_s = particle_density(organic_fraction)
    n = porosity(bulk_density_kg_m3, rho_s)
    mineral, organic = solid_volume_fractions(bulk_density_kg_m3, organic_fraction)
    water = _clip(water_m3m3, 0.0, n)
    sr = water / n

    liquid_if_frozen = _clip(unfrozen_water_m3m3, 0.0, water)
    liquid = _choose(frozen, liquid_if_frozen, water)
    ice = water - liquid

    conductivity = thermal_conductivity(
        model,
        n,
        sr,
        quartz_fraction,
        bulk_density_kg_m3,
        sand_fraction,
        organic_fraction=organic_fraction,
        frozen=frozen,
        unfrozen_water_m3m3=liquid_if_frozen,
    )
    heat_capacity = heat_capacity_de_vries(mineral, organic, liquid, ice)

    def guard(x: Array) -> Array:
        return _with_nan_of(
            x,
            sand_fraction,
            clay_fraction,
            water_m3m3,
            bulk_density_kg_m3,
            organic_fraction,
            quartz_fraction,
            unfrozen_water_m3m3,
        )

    conductivity = guard(conductivity)
    heat_capacity = guard(heat_capacity)
    return {
        "porosity": guard(n),
        "saturation": guard(sr),
        "conductivity_w_mk": conductivity,
        "heat_capacity_j_m3k": heat_capacity,
        "diffusivity_m2_s": diffusivity(conductivity, heat_capacity),
    }
