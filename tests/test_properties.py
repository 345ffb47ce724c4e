"""Tests for geothermmap.physics.properties against published values and hand arithmetic.

Sources are named beside each check. "from memory" marks published numbers recalled but
not checked against the printed source here.
"""

from __future__ import annotations

import math

import dask.array as da
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from geothermmap.physics import properties as sp

MODELS = sp.CONDUCTIVITY_MODELS
KEYS = ("porosity", "saturation", "conductivity_w_mk", "heat_capacity_j_m3k", "diffusivity_m2_s")
EXACT = 1e-12  # relative tolerance for checks of the same formula in another spelling


# --------------------------------------------------------------------------------------
# Oke (1987) Table 2.1, "Boundary Layer Climates", 2nd ed., Routledge
# (ISBN 0-415-04319-0). Values from memory; they agree with the figures in our brief.
# Both soils: 40 % pore space, dry bulk density 1.60e3 kg m-3.
#   (conductivity W m-1 K-1, heat capacity J m-3 K-1, diffusivity m2 s-1)
# --------------------------------------------------------------------------------------
OKE_1987 = {
    ("sand", "dry"): (0.30, 1.28e6, 0.24e-6),
    ("sand", "saturated"): (2.20, 2.96e6, 0.74e-6),
    ("clay", "dry"): (0.25, 1.42e6, 0.18e-6),
    ("clay", "saturated"): (1.58, 3.10e6, 0.51e-6),
}
# Oke gives no texture or quartz content. We use USDA class centroids (common practice):
# sand 92 % sand, 4 % clay; clay 20 % sand, 60 % clay; quartz = sand (Lu et al., 2007).
OKE_TEXTURE = {"sand": (0.92, 0.04), "clay": (0.20, 0.60)}
# Bulk density giving exactly Oke's 40 % pore space with 2650 kg m-3 solids
# (Oke's 1600 kg m-3 would give n = 0.396).
OKE_BULK_DENSITY = 0.6 * sp.RHO_MINERAL_KG_M3

# Conductivity: 30 %. Johansen (1975) quotes +-20 % for his dry formula (Farouki, 1981);
# Oke's soils have no stated quartz content, and +-0.1 in quartz moves lambda_sat by
# about +-9 % at n = 0.4. Observed: worst case -22 % (dry sand, Johansen).
TOL_K = 0.30
# Heat capacity: de Vries (1963) uses one mineral value, 1.92e6 J m-3 K-1. Oke's dry
# sand implies 1.28e6 / 0.6 = 2.13e6 for its solids (10 % higher) and his dry clay
# 1.42e6 / 0.6 = 2.37e6 (19 % higher). Tolerances: 12 % sand, 20 % clay.
TOL_C = {"sand": 0.12, "clay": 0.20}


def _oke_soil(soil: str, state: str, model: str) -> dict:
    sand, clay = OKE_TEXTURE[soil]
    water = 0.0 if state == "dry" else 0.4
    return sp.soil_thermal_properties(sand, clay, water, OKE_BULK_DENSITY, 0.0, model=model)


def test_oke_table_is_self_consistent():
    # Checks our transcription of Oke (1987) Table 2.1: diffusivity column = k / C within
    # the table's two-significant-figure rounding (+-0.005e-6 of ~0.2e-6: 3 %).
    for (_soil, _state), (k, c, d) in OKE_1987.items():
        assert k / c == pytest.approx(d, rel=0.03)
    # Saturating 40 % pore space adds 0.4 x 4.2e6 J m-3 K-1 of water in both soils.
    for soil in ("sand", "clay"):
        added = OKE_1987[(soil, "saturated")][1] - OKE_1987[(soil, "dry")][1]
        assert added == pytest.approx(0.4 * 4.2e6, rel=0.01)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("soil,state", list(OKE_1987))
def test_oke_1987_table_2_1(model, soil, state):
    k_ref, c_ref, d_ref = OKE_1987[(soil, state)]
    out = _oke_soil(soil, state, model)
    assert out["porosity"] == pytest.approx(0.40, rel=EXACT)
    assert out["conductivity_w_mk"] == pytest.approx(k_ref, rel=TOL_K)
    assert out["heat_capacity_j_m3k"] == pytest.approx(c_ref, rel=TOL_C[soil])
    # Diffusivity carries both errors: (1 + tol_k) / (1 - tol_c) - 1 (48 % sand, 62 %
    # clay). The exact identity D = k / C is checked in test_diffusivity_identity.
    tol_d = (1 + TOL_K) / (1 - TOL_C[soil]) - 1
    assert out["diffusivity_m2_s"] == pytest.approx(d_ref, rel=tol_d)


def test_oke_1987_water_heat_capacity_added():
    # The part of the heat capacity that de Vries and Oke must share: saturating 40 %
    # pore space adds 1.68e6 J m-3 K-1 in Oke (1987) Table 2.1 for both soils; de Vries'
    # 4.18e6 x 0.4 = 1.672e6. 2 %: the table's 3-figure rounding of two values (+-0.6 %)
    # and 4.18 vs 4.2 MJ m-3 K-1 (0.5 %).
    for soil in ("sand", "clay"):
        wet = _oke_soil(soil, "saturated", "johansen")["heat_capacity_j_m3k"]
        dry = _oke_soil(soil, "dry", "johansen")["heat_capacity_j_m3k"]
        oke = OKE_1987[(soil, "saturated")][1] - OKE_1987[(soil, "dry")][1]
        assert wet - dry == pytest.approx(oke, rel=0.02)


# --------------------------------------------------------------------------------------
# Constants and tables as published
# --------------------------------------------------------------------------------------


def test_constants_match_sources():
    # Johansen (1975) via Peters-Lidard et al. (1998), from memory.
    assert sp.K_QUARTZ_W_MK == 7.7
    assert sp.K_OTHER_MINERALS_W_MK == 2.0
    assert sp.K_OTHER_MINERALS_LOW_QUARTZ_W_MK == 3.0
    # de Vries (1963), Farouki (1981), from memory.
    assert sp.K_WATER_W_MK == 0.57
    assert sp.K_ICE_W_MK == 2.2
    assert sp.K_ORGANIC_W_MK == 0.25
    # de Vries (1963): 0.46, 0.60, 1.00, 0.45 cal cm-3 K-1 (from memory); thermochemical
    # calorie 4.184 J.
    for value, cal in [
        (sp.C_MINERAL_J_M3K, 0.46),
        (sp.C_ORGANIC_J_M3K, 0.60),
        (sp.C_WATER_J_M3K, 1.00),
        (sp.C_ICE_J_M3K, 0.45),
    ]:
        # 0.3 %: half a unit in the 3rd significant figure of 1.88 is 0.27 %.
        assert value == pytest.approx(cal * 4.184e6, rel=3e-3)
    assert sp.L_FUSION_J_KG == pytest.approx(3.336e5, rel=2e-3)  # physical tables
    assert sp.RHO_MINERAL_KG_M3 == 2650.0
    assert sp.RHO_ORGANIC_KG_M3 == 1300.0


def test_cote_konrad_tables():
    # Cote & Konrad (2005), Can. Geotech. J. 42: 443-458, from memory.
    assert dict(sp.COTE_KONRAD_KAPPA) == {
        "gravel_coarse_sand": (4.60, 1.70),
        "medium_fine_sand": (3.55, 0.95),
        "silt_clay": (1.90, 0.85),
        "organic_fibrous": (0.60, 0.25),
    }
    assert dict(sp.COTE_KONRAD_DRY) == {
        "crushed_rock": (1.70, 1.80),
        "natural_mineral": (0.75, 1.20),
        "organic_fibrous": (0.30, 0.87),
    }
    assert sp.COTE_KONRAD_CLASSES == tuple(sp.COTE_KONRAD_KAPPA)


# --------------------------------------------------------------------------------------
# Composition
# --------------------------------------------------------------------------------------


def test_particle_density_and_volume_fractions():
    assert sp.particle_density(0.0) == pytest.approx(2650.0, rel=EXACT)
    assert sp.particle_density(1.0) == pytest.approx(1300.0, rel=EXACT)
    # Hand arithmetic: 1 / (0.9 / 2650 + 0.1 / 1300)
    assert sp.particle_density(0.1) == pytest.approx(1.0 / (0.9 / 2650 + 0.1 / 1300), rel=EXACT)
    rho_b, f = 1300.0, 0.05
    mineral, organic = sp.solid_volume_fractions(rho_b, f)
    assert mineral == pytest.approx(1300 * 0.95 / 2650, rel=EXACT)
    assert organic == pytest.approx(0.05, rel=EXACT)
    n = sp.porosity(rho_b, sp.particle_density(f))
    assert mineral + organic == pytest.approx(1.0 - n, rel=EXACT)
    v = sp.organic_volume_fraction_of_solids(f)
    assert v == pytest.approx(organic / (mineral + organic), rel=EXACT)


def test_quartz_from_sand():
    # Lu et al. (2007, Fig. 5): "Quartz content is taken as the fraction of sand."
    sand = np.array([0.0, 0.35, 0.92, 1.0])
    np.testing.assert_array_equal(sp.quartz_from_sand(sand), sand)
    np.testing.assert_array_equal(sp.quartz_from_sand(np.array([-0.1, 1.2])), [0.0, 1.0])


def test_coarse_rule():
    # Lu et al. (2007, Fig. 2): coarse-textured soils have sand fraction > 0.40.
    np.testing.assert_array_equal(sp.is_coarse(np.array([0.2, 0.4, 0.41, 0.9])), [0, 0, 1, 1])


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("percent", [20.0, 30.0, 40.0])
def test_class_limits_do_not_depend_on_how_texture_is_spelled(model, percent):
    # The same soil stored as a float32 fraction (0.4 -> 0.40000001) or as float32
    # percent scaled by 0.01 as the input reader does (-> 0.39999998) must land in the
    # same class on both sides of the limits of Lu et al. (2007, Fig. 2: sand > 0.40),
    # the quartz > 0.2 switch (Peters-Lidard et al., 1998) and the organic-soil limit.
    as_fraction = float(np.float32(percent / 100.0))
    as_percent = float(np.float32(percent) * np.float32(0.01))
    assert as_fraction != as_percent or percent == 20.0
    props = [sp.soil_thermal_properties(v, 0.2, 0.25, 1400.0, v, model=model)
             for v in (as_fraction, as_percent)]
    for key in KEYS:
        assert props[0][key] == pytest.approx(props[1][key], rel=1e-6)


# --------------------------------------------------------------------------------------
# Heat capacity (de Vries, 1963)
# --------------------------------------------------------------------------------------


def test_heat_capacity_de_vries_hand_arithmetic():
    # de Vries (1963): C = 1.92 x_m + 2.51 x_o + 4.18 x_w (+ 1.88 x_i) [MJ m-3 K-1]
    c = sp.heat_capacity_de_vries(0.5, 0.05, 0.2, 0.1)
    assert c == pytest.approx(1.92e6 * 0.5 + 2.51e6 * 0.05 + 4.18e6 * 0.2 + 1.88e6 * 0.1, rel=EXACT)
    assert c == pytest.approx(2.1095e6, rel=EXACT)


def test_facade_heat_capacity_hand_arithmetic():
    # Constructed soil: rho_b = 1300 kg m-3, 5 % organic matter, 0.30 m3 m-3 water.
    out = sp.soil_thermal_properties(0.5, 0.2, 0.30, 1300.0, 0.05)
    x_m = 1300 * 0.95 / 2650
    x_o = 1300 * 0.05 / 1300
    assert out["heat_capacity_j_m3k"] == pytest.approx(
        1.92e6 * x_m + 2.51e6 * x_o + 4.18e6 * 0.30, rel=EXACT
    )
    # Frozen with 0.05 m3 m-3 unfrozen water: ice volume = water volume frozen (0.25).
    frozen = sp.soil_thermal_properties(
        0.5, 0.2, 0.30, 1300.0, 0.05, frozen=True, unfrozen_water_m3m3=0.05
    )
    assert frozen["heat_capacity_j_m3k"] == pytest.approx(
        1.92e6 * x_m + 2.51e6 * x_o + 4.18e6 * 0.05 + 1.88e6 * 0.25, rel=EXACT
    )
    assert frozen["saturation"] == pytest.approx(out["saturation"], rel=EXACT)


def test_volumetric_latent_heat_and_diffusivity_identity():
    # rho_w L theta: 1000 kg m-3 x 3.34e5 J kg-1 x 0.3
    assert sp.volumetric_latent_heat(0.3) == pytest.approx(1.002e8, rel=EXACT)
    assert sp.diffusivity(1.5, 2.5e6) == pytest.approx(6e-7, rel=EXACT)


def test_diffusivity_identity():
    out = sp.soil_thermal_properties(0.6, 0.1, 0.2, 1450.0, 0.02, model="lu2007")
    assert out["diffusivity_m2_s"] == pytest.approx(
        out["conductivity_w_mk"] / out["heat_capacity_j_m3k"], rel=EXACT
    )


# --------------------------------------------------------------------------------------
# Conductivity building blocks: exact arithmetic of the published formulas
# --------------------------------------------------------------------------------------


def test_dry_conductivity_johansen_arithmetic():
    # Johansen (1975) / Farouki (1981): (0.135 rho_b + 64.7) / (2700 - 0.947 rho_b)
    assert sp.dry_conductivity_johansen(1600.0) == pytest.approx(280.7 / 1184.8, rel=EXACT)
    assert sp.dry_conductivity_johansen(1600.0) == pytest.approx(0.236918, rel=1e-5)


def test_solids_conductivity_geometric_mean():
    # Johansen (1975) as in Peters-Lidard et al. (1998): 7.7**q * (2.0 | 3.0)**(1 - q)
    assert sp.solids_conductivity(0.5) == pytest.approx(7.7**0.5 * 2.0**0.5, rel=EXACT)
    assert sp.solids_conductivity(0.1) == pytest.approx(7.7**0.1 * 3.0**0.9, rel=EXACT)
    # Organic matter in the same geometric mean (our extension, 0.25 W m-1 K-1).
    expected = (7.7**0.5 * 2.0**0.5) ** 0.8 * 0.25**0.2
    assert sp.solids_conductivity(0.5, 0.2) == pytest.approx(expected, rel=EXACT)


def test_saturated_conductivity_geometric_mean():
    # Johansen (1975): lambda_s**(1-n) lambda_w**n; frozen with theta_u of liquid water.
    assert sp.saturated_conductivity(3.0, 0.4) == pytest.approx(3.0**0.6 * 0.57**0.4, rel=EXACT)
    frozen = sp.saturated_conductivity(3.0, 0.4, frozen=True, unfrozen_water_m3m3=0.05)
    assert frozen == pytest.approx(3.0**0.6 * 2.2**0.35 * 0.57**0.05, rel=EXACT)
    # Unfrozen water is clipped to the pore space.
    assert sp.saturated_conductivity(
        3.0, 0.4, frozen=True, unfrozen_water_m3m3=0.9
    ) == pytest.approx(sp.saturated_conductivity(3.0, 0.4), rel=EXACT)


def test_kersten_number_johansen():
    # Johansen (1975): 0.7 log10 Sr + 1 (coarse), log10 Sr + 1 (fine), Sr (frozen)
    sr = np.array([0.0, 0.02, 0.05, 0.1, 0.5, 1.0])
    coarse = sp.kersten_number_johansen(sr, True)
    fine = sp.kersten_number_johansen(sr, False)
    np.testing.assert_allclose(coarse[2:], 0.7 * np.log10(sr[2:]) + 1, rtol=EXACT)
    np.testing.assert_allclose(fine[3:], np.log10(sr[3:]) + 1, rtol=EXACT, atol=1e-15)
    assert coarse[0] == 0.0 and coarse[1] == 0.0  # clipped: 0.7 log10(0.02) + 1 < 0
    assert fine[0] == 0.0 and fine[2] == 0.0
    np.testing.assert_array_equal(sp.kersten_number_johansen(sr, True, frozen=True), sr)


def test_lu2007_alpha_and_kersten_number():
    # Lu et al. (2007): Ke = exp(alpha (1 - Sr**(alpha - 1.33))), alpha 0.96 / 0.27
    assert dict(sp.LU2007_ALPHA) == {"coarse": 0.96, "fine": 0.27}
    assert sp.LU2007_BETA == 1.33
    coarse = sp.kersten_number_lu2007(0.5, sp.is_coarse(0.6))
    fine = sp.kersten_number_lu2007(0.5, sp.is_coarse(0.3))
    assert coarse == pytest.approx(math.exp(0.96 * (1 - 0.5 ** (0.96 - 1.33))), rel=EXACT)
    assert fine == pytest.approx(math.exp(0.27 * (1 - 0.5 ** (0.27 - 1.33))), rel=EXACT)
    # Behaviour: 0 at Sr = 0, 1 at Sr = 1, monotonic in between; coarse soils reach high
    # Ke at lower saturation (Lu et al., 2007, Fig. 2).
    sr = np.linspace(0.0, 1.0, 101)
    for is_coarse in (True, False):
        ke = sp.kersten_number_lu2007(sr, is_coarse)
        assert ke[0] == 0.0 and ke[-1] == 1.0
        assert np.all(np.diff(ke) > 0)
    assert sp.kersten_number_lu2007(0.1, True) > 4 * sp.kersten_number_lu2007(0.1, False)
    # Frozen: Johansen's Ke = Sr (our extension).
    np.testing.assert_array_equal(sp.kersten_number_lu2007(sr, True, frozen=True), sr)


def test_lu2007_dry_conductivity():
    # Lu et al. (2007): lambda_dry = -0.56 n + 0.51
    assert sp.dry_conductivity_lu2007(0.4) == pytest.approx(-0.56 * 0.4 + 0.51, rel=EXACT)
    # Floor at the conductivity of air for peat-like porosity (our choice, documented).
    assert sp.dry_conductivity_lu2007(0.95) == sp.K_AIR_W_MK


def test_cote_konrad_kappa_and_dry():
    # Cote & Konrad (2005): Ke = kappa Sr / (1 + (kappa - 1) Sr); at Sr = 0.5 this is
    # kappa / (1 + kappa).
    for kappa in (4.60, 3.55, 1.90, 0.60, 1.70, 0.95, 0.85, 0.25):
        assert sp.kersten_number_cote_konrad(0.5, kappa) == pytest.approx(
            kappa / (1 + kappa), rel=EXACT
        )
    # lambda_dry = chi 10**(-eta n); natural mineral soils chi 0.75, eta 1.20.
    assert sp.dry_conductivity_cote_konrad(0.4) == pytest.approx(0.75 * 10 ** (-0.48), rel=EXACT)
    assert sp.dry_conductivity_cote_konrad(0.8, 0.30, 0.87) == pytest.approx(
        0.30 * 10 ** (-0.87 * 0.8), rel=EXACT
    )


def test_cote_konrad_soil_class_rule():
    sand = np.array([0.6, 0.3, 0.6, 0.3])
    organic = np.array([0.02, 0.02, 0.35, 0.30])
    np.testing.assert_array_equal(sp.cote_konrad_soil_class(sand, organic), [1, 2, 3, 3])


@pytest.mark.parametrize("code,name", list(enumerate(sp.COTE_KONRAD_CLASSES)))
@pytest.mark.parametrize("frozen", [False, True])
def test_cote_konrad_uses_table_kappa(code, name, frozen):
    n, sr, q = 0.45, 0.5, 0.6
    kappa = sp.COTE_KONRAD_KAPPA[name][1 if frozen else 0]
    chi, eta = sp.COTE_KONRAD_DRY["organic_fibrous" if code == 3 else "natural_mineral"]
    dry = chi * 10 ** (-eta * n)
    sat = sp.saturated_conductivity(sp.solids_conductivity(q), n, frozen=frozen)
    expected = dry + kappa * sr / (1 + (kappa - 1) * sr) * (sat - dry)
    got = sp.conductivity_cote_konrad(n, sr, q, 0.6, frozen=frozen, soil_class=code)
    assert got == pytest.approx(expected, rel=EXACT)


# --------------------------------------------------------------------------------------
# Limits shared by all models
# --------------------------------------------------------------------------------------


def _model_parts(model: str, n, q, rho_b, sand, om, frozen=False, theta_u=0.0):
    """Dry and saturated conductivity of each model, built from the public pieces."""
    v = sp.organic_volume_fraction_of_solids(om)
    sat = sp.saturated_conductivity(sp.solids_conductivity(q, v), n, frozen, theta_u)
    if model == "johansen":
        dry = sp.dry_conductivity_johansen(rho_b)
    elif model == "lu2007":
        dry = sp.dry_conductivity_lu2007(n)
    else:
        chi, eta = sp.COTE_KONRAD_DRY["organic_fibrous" if om >= 0.3 else "natural_mineral"]
        dry = sp.dry_conductivity_cote_konrad(n, chi, eta)
    return dry, sat


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("sand", [0.2, 0.7])
@pytest.mark.parametrize("om", [0.0, 0.4])
@pytest.mark.parametrize("frozen,theta_u", [(False, 0.0), (True, 0.0), (True, 0.04)])
def test_limits_dry_and_saturated(model, sand, om, frozen, theta_u):
    rho_b = 1200.0
    n = sp.porosity(rho_b, sp.particle_density(om))
    dry, sat = _model_parts(model, n, sand, rho_b, sand, om, frozen, theta_u)
    args = (n, sand, rho_b, sand, om, frozen, theta_u)

    def k(sr):
        n_, q, rho, s, f, fr, tu = args
        return sp.thermal_conductivity(model, n_, sr, q, rho, s, f, fr, tu)

    assert k(0.0) == pytest.approx(dry, rel=EXACT)
    assert k(1.0) == pytest.approx(sat, rel=EXACT)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("sand", [0.1, 0.5, 0.9])
def test_frozen_saturated_exceeds_unfrozen(model, sand):
    # Ice conducts ~4x better than water (2.2 vs 0.57 W m-1 K-1; de Vries 1963).
    n, rho_b = 0.4, 1590.0
    unfrozen = sp.thermal_conductivity(model, n, 1.0, sand, rho_b, sand)
    for theta_u in (0.0, 0.05):
        frozen = sp.thermal_conductivity(model, n, 1.0, sand, rho_b, sand, 0.0, True, theta_u)
        assert frozen > unfrozen


# --------------------------------------------------------------------------------------
# Dispatcher and facade behaviour
# --------------------------------------------------------------------------------------


def test_dispatcher_matches_model_functions():
    n, sr, q, rho_b, sand, om = 0.42, 0.6, 0.5, 1500.0, 0.5, 0.03
    assert sp.thermal_conductivity("johansen", n, sr, q, rho_b, sand, om) == (
        sp.conductivity_johansen(n, sr, q, rho_b, sand, om)
    )
    assert sp.thermal_conductivity("Cote-Konrad", n, sr, q, rho_b, sand, om) == (
        sp.conductivity_cote_konrad(n, sr, q, sand, om)
    )
    assert sp.thermal_conductivity("lu2007", n, sr, q, rho_b, sand, om) == (
        sp.conductivity_lu2007(n, sr, q, sand, om)
    )


def test_unknown_model_lists_valid_names():
    with pytest.raises(ValueError, match="johansen, cote-konrad, lu2007"):
        sp.thermal_conductivity("kersten", 0.4, 0.5, 0.5, 1500.0, 0.5)
    with pytest.raises(ValueError, match="valid names"):
        sp.soil_thermal_properties(0.5, 0.2, 0.2, 1500.0, 0.0, model="nope")


def test_facade_clips_saturation():
    base = sp.soil_thermal_properties(0.5, 0.2, np.array([-0.1, 0.0, 0.9]), 1590.0, 0.0)
    np.testing.assert_array_equal(base["saturation"], [0.0, 0.0, 1.0])
    at_n = sp.soil_thermal_properties(0.5, 0.2, 0.4, 1590.0, 0.0)
    assert base["heat_capacity_j_m3k"][2] == pytest.approx(at_n["heat_capacity_j_m3k"], rel=EXACT)


def test_facade_quartz_default_is_sand():
    a = sp.soil_thermal_properties(0.7, 0.1, 0.2, 1500.0, 0.01)
    b = sp.soil_thermal_properties(0.7, 0.1, 0.2, 1500.0, 0.01, quartz_fraction=0.7)
    c = sp.soil_thermal_properties(0.7, 0.1, 0.2, 1500.0, 0.01, quartz_fraction=0.3)
    assert a["conductivity_w_mk"] == b["conductivity_w_mk"]
    assert c["conductivity_w_mk"] < a["conductivity_w_mk"]


@pytest.mark.parametrize("model", MODELS)
def test_frozen_mask_equals_separate_runs(model):
    args = (np.array([0.3, 0.8]), np.array([0.3, 0.05]), np.array([0.3, 0.25]), 1400.0, 0.02)
    mask = np.array([True, False])
    mixed = sp.soil_thermal_properties(*args, model=model, frozen=mask, unfrozen_water_m3m3=0.03)
    frozen = sp.soil_thermal_properties(*args, model=model, frozen=True, unfrozen_water_m3m3=0.03)
    thawed = sp.soil_thermal_properties(*args, model=model, frozen=False)
    for key in KEYS:
        np.testing.assert_allclose(mixed[key], [frozen[key][0], thawed[key][1]], rtol=EXACT)


# --------------------------------------------------------------------------------------
# Containers: scalar, ndarray, dask, xarray; NaN; float32
# --------------------------------------------------------------------------------------

GRID = {
    "sand_fraction": np.array([0.05, 0.25, 0.45, 0.65, 0.92, 0.40, 0.30]),
    "clay_fraction": np.array([0.55, 0.35, 0.20, 0.10, 0.04, 0.20, 0.30]),
    "water_m3m3": np.array([0.00, 0.10, 0.20, 0.30, 0.35, 0.45, 0.05]),
    "bulk_density_kg_m3": np.array([1100.0, 1250.0, 1400.0, 1550.0, 1650.0, 1300.0, 700.0]),
    "organic_fraction": np.array([0.01, 0.02, 0.03, 0.00, 0.00, 0.10, 0.50]),
}


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("frozen", [False, True])
def test_scalar_ndarray_dask_xarray_agree(model, frozen):
    kw = dict(model=model, frozen=frozen, unfrozen_water_m3m3=0.02)
    ref = sp.soil_thermal_properties(**GRID, **kw)
    lazy = sp.soil_thermal_properties(
        **{k: da.from_array(v, chunks=3) for k, v in GRID.items()}, **kw
    )
    labelled = sp.soil_thermal_properties(
        **{k: xr.DataArray(v, dims="cell", coords={"cell": np.arange(7)}) for k, v in GRID.items()},
        **kw,
    )
    for key in KEYS:
        assert isinstance(lazy[key], da.Array)  # stays lazy
        assert isinstance(labelled[key], xr.DataArray)
        np.testing.assert_allclose(lazy[key].compute(), ref[key], rtol=EXACT)
        np.testing.assert_allclose(labelled[key].values, ref[key], rtol=EXACT)
        assert np.all(np.isfinite(ref[key]))
    for i in range(7):
        point = sp.soil_thermal_properties(**{k: float(v[i]) for k, v in GRID.items()}, **kw)
        for key in KEYS:
            assert float(point[key]) == pytest.approx(ref[key][i], rel=EXACT)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("name", list(GRID) + ["quartz_fraction", "unfrozen_water_m3m3"])
@pytest.mark.parametrize("frozen", [False, True])
def test_nan_in_any_input_gives_nan(model, name, frozen):
    inputs = {k: v.copy() for k, v in GRID.items()}
    inputs["quartz_fraction"] = GRID["sand_fraction"].copy()
    inputs["unfrozen_water_m3m3"] = np.full(7, 0.02)
    inputs[name][2] = np.nan
    out = sp.soil_thermal_properties(**inputs, model=model, frozen=frozen)
    for key in KEYS:
        assert np.isnan(out[key][2]), (key, name)
        assert np.all(np.isfinite(np.delete(out[key], 2))), (key, name)


@pytest.mark.parametrize("model", MODELS)
def test_float32_stays_float32(model):
    grid32 = {k: v.astype(np.float32) for k, v in GRID.items()}
    # Move the cell on the coarse/fine threshold (sand = 0.40) off it: float32(0.4)
    # compares equal to the threshold in float32 but exceeds 0.4 once widened to float64.
    grid32["sand_fraction"][5] = np.float32(0.41)
    mask = np.arange(7) % 2 == 0
    out32 = sp.soil_thermal_properties(**grid32, model=model, frozen=mask)
    ref = sp.soil_thermal_properties(
        **{k: v.astype(np.float64) for k, v in grid32.items()}, model=model, frozen=mask
    )
    for key in KEYS:
        assert out32[key].dtype == np.float32, key
        # float32 carries ~7 digits; a few dozen operations: 1e-5 relative.
        np.testing.assert_allclose(out32[key], ref[key], rtol=1e-5)


# --------------------------------------------------------------------------------------
# Property-based tests (hypothesis)
# --------------------------------------------------------------------------------------


@st.composite
def soils(draw):
    sand = draw(st.floats(0.0, 1.0))
    clay = draw(st.floats(0.0, 1.0)) * (1.0 - sand)
    om = draw(st.floats(0.0, 0.6))
    n = draw(st.floats(0.2, 0.8))
    rho_b = (1.0 - n) * float(sp.particle_density(om))
    quartz = draw(st.one_of(st.none(), st.floats(0.0, 1.0)))
    theta_u = draw(st.floats(0.0, 0.1))
    return dict(sand=sand, clay=clay, om=om, rho_b=rho_b, quartz=quartz, theta_u=theta_u)


PROPERTY_SETTINGS = settings(max_examples=150, deadline=None)


@PROPERTY_SETTINGS
@given(soil=soils(), sr=st.floats(0.0, 1.0), sr2=st.floats(0.0, 1.0), frozen=st.booleans())
def test_conductivity_between_dry_and_saturated(soil, sr, sr2, frozen):
    n = sp.porosity(soil["rho_b"], sp.particle_density(soil["om"]))
    q = soil["sand"] if soil["quartz"] is None else soil["quartz"]
    args = (q, soil["rho_b"], soil["sand"], soil["om"], frozen, soil["theta_u"])
    for model in MODELS:
        dry = sp.thermal_conductivity(model, n, 0.0, *args)
        sat = sp.thermal_conductivity(model, n, 1.0, *args)
        lo, hi = min(dry, sat), max(dry, sat)
        k = sp.thermal_conductivity(model, n, sr, *args)
        slack = 1e-12 * hi  # floating-point rounding of the blend
        assert lo - slack <= k <= hi + slack, model
        # Ke rises with saturation, so conductivity moves monotonically towards sat.
        k2 = sp.thermal_conductivity(model, n, sr2, *args)
        if sr2 >= sr:
            assert (k2 - k) * (sat - dry) >= -slack, model


@PROPERTY_SETTINGS
@given(soil=soils(), w1=st.floats(0.0, 1.0), w2=st.floats(0.0, 1.0), frozen=st.booleans())
def test_heat_capacity_increases_with_water(soil, w1, w2, frozen):
    n = float(sp.porosity(soil["rho_b"], sp.particle_density(soil["om"])))
    lo, hi = sorted((w1 * n, w2 * n))

    def c(water):
        return sp.soil_thermal_properties(
            soil["sand"],
            soil["clay"],
            water,
            soil["rho_b"],
            soil["om"],
            soil["quartz"],
            frozen=frozen,
            unfrozen_water_m3m3=soil["theta_u"],
        )["heat_capacity_j_m3k"]

    if hi - lo > 1e-9:
        assert c(hi) > c(lo)
    else:
        assert c(hi) == pytest.approx(c(lo), rel=1e-6)


@PROPERTY_SETTINGS
@given(soil=soils(), wet=st.floats(0.0, 1.0), frozen=st.booleans())
def test_valid_inputs_give_finite_physical_outputs(soil, wet, frozen):
    n = float(sp.porosity(soil["rho_b"], sp.particle_density(soil["om"])))
    for model in MODELS:
        out = sp.soil_thermal_properties(
            soil["sand"],
            soil["clay"],
            wet * n,
            soil["rho_b"],
            soil["om"],
            soil["quartz"],
            model=model,
            frozen=frozen,
            unfrozen_water_m3m3=soil["theta_u"],
        )
        assert all(np.isfinite(out[key]) for key in KEYS), (model, out)
        assert 0.0 < out["porosity"] < 1.0
        assert 0.0 <= out["saturation"] <= 1.0
        # Physical range: above air (0.025), below quartz (7.7) [W m-1 K-1].
        assert sp.K_AIR_W_MK <= out["conductivity_w_mk"] <= sp.K_QUARTZ_W_MK
        assert out["heat_capacity_j_m3k"] > 0.0
        assert out["diffusivity_m2_s"] > 0.0
