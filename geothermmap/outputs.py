"""The output catalogue: every map a run can write, with its file name, units and meaning.

This table is the one place that names outputs. The product layer reads it to set units,
descriptions, band names and cautions; it holds no formulas.
"""

from __future__ import annotations

from dataclasses import dataclass

FROST_CAUTION = (
    "Screening estimate only. Design depths for foundations, water mains and other buried "
    "works follow local codes and licensed engineering practice."
)


@dataclass(frozen=True)
class OutputInfo:
    name: str
    units: str
    description: str
    per_depth: bool = False  # one band per recipe depth
    per_threshold: bool = False  # one band per recipe threshold
    per_year: bool = False  # one band per winter of a multi-year input
    dtype: str = "float32"
    group: str = "core"  # core | freeze_thaw | multi_year | root_zone | thresholds
    frost: bool = False  # carries the frost caution
    coded: bool = False  # holds code values among its numbers (overviews: nearest)
    #: code values and their names: not measurements, so summaries count them apart
    codes: tuple[tuple[float, str], ...] = ()

    @property
    def filename(self) -> str:
        return f"{self.name}.tif"


_O = OutputInfo
# the code values of periodic.FROST_PERENNIAL and rootzone.NEVER_ABOVE / ALWAYS_ABOVE
# (tests/test_summarize.py checks that they agree)
FROST_DEPTH_CODES = ((-1.0, "frozen_at_depth"),)
CROSSING_CODES = ((-1.0, "never_above"), (-2.0, "always_above"))

OUTPUTS: dict[str, OutputInfo] = {
    o.name: o
    for o in [
        # --- per cell, periodic (analytic) solution -------------------------------------
        _O("damping_depth", "m", "Annual damping depth sqrt(2 kappa / omega): e-folding depth "
           "of the annual temperature wave"),
        _O("conductivity", "W m-1 K-1", "Thermal conductivity of the unfrozen soil"),
        _O("heat_capacity", "J m-3 K-1", "Volumetric heat capacity of the unfrozen soil "
           "(de Vries)"),
        _O("diffusivity", "m2 s-1", "Thermal diffusivity: conductivity / heat capacity"),
        _O("zero_amplitude_depth", "m", "Depth where the annual amplitude falls to the recipe "
           "tolerance (depth of zero annual amplitude)"),
        _O("surface_heat_flux_amplitude", "W m-2", "Amplitude of the annual harmonic of the "
           "surface soil heat flux (downward positive)"),
        _O("frost_depth", "m", "Conduction-only frost penetration depth of the periodic "
           "solution (no latent heat: overstates frost depth). 0 = the surface minimum stays "
           "above 0 degC; -1 = annual mean at or below 0 degC (frozen at depth, not a depth)",
           frost=True, coded=True, codes=FROST_DEPTH_CODES),
        # --- per depth --------------------------------------------------------------------
        _O("t_mean", "degC", "Annual mean temperature", per_depth=True),
        _O("t_min", "degC", "Minimum temperature of the reconstructed annual cycle",
           per_depth=True),
        _O("t_max", "degC", "Maximum temperature of the reconstructed annual cycle",
           per_depth=True),
        _O("amplitude", "K", "Amplitude of the annual harmonic", per_depth=True),
        _O("phase_lag", "days", "Phase lag of the annual harmonic behind the surface",
           per_depth=True),
        _O("doy_min", "day of year", "Day of year of the minimum (1.0 = January 1st 00:00)",
           per_depth=True),
        _O("doy_max", "day of year", "Day of year of the maximum (1.0 = January 1st 00:00)",
           per_depth=True),
        # --- freeze-thaw (numerical, latent heat) -----------------------------------------
        _O("frost_depth_latent", "m", "Maximum frost penetration depth from the numerical "
           "solver with latent heat", group="freeze_thaw", frost=True),
        _O("thaw_depth", "m", "Maximum thaw depth (active-layer thickness) where the ground "
           "stays frozen at depth; nodata elsewhere", group="freeze_thaw", frost=True),
        _O("frozen_days", "days", "Days per year the depth stays below 0 degC", per_depth=True,
           group="freeze_thaw", frost=True),
        _O("t_min_latent", "degC", "Annual minimum temperature with latent heat",
           per_depth=True, group="freeze_thaw", frost=True),
        _O("t_max_latent", "degC", "Annual maximum temperature with latent heat",
           per_depth=True, group="freeze_thaw", frost=True),
        _O("freezing_index", "degC day", "Freezing index: degree-days below 0 degC of the "
           "ground surface, one band per winter", per_year=True, group="freeze_thaw",
           frost=True),
        _O("frost_depth_stefan", "m", "Frost depth by the Stefan equation",
           group="freeze_thaw", frost=True),
        _O("frost_depth_berggren", "m", "Frost depth by the modified Berggren equation",
           group="freeze_thaw", frost=True),
        _O("frost_class", "class", "Frost class by the recipe burial-depth thresholds "
           "(legend in the tags)", dtype="uint8", group="freeze_thaw", frost=True),
        _O("design_freezing_index", "degC day", "Design freezing index: mean of the 3 coldest "
           "winters of the record", group="multi_year", frost=True),
        _O("frost_depth_winters", "m", "Frost depth of each winter of the record (numerical, "
           "latent heat), one band per winter", per_year=True, group="multi_year", frost=True),
        _O("design_frost_depth", "m", "Frost depth for the design winter (numerical, latent "
           "heat)", group="multi_year", frost=True),
        # --- root zone and thresholds -----------------------------------------------------
        _O("root_zone_t_mean", "degC", "Depth-averaged annual mean temperature of the root "
           "zone", group="root_zone"),
        _O("root_zone_t_min", "degC", "Minimum over the year of the depth-averaged root-zone "
           "temperature", group="root_zone"),
        _O("root_zone_t_max", "degC", "Maximum over the year of the depth-averaged root-zone "
           "temperature", group="root_zone"),
        _O("warming_doy", "day of year", "First day of year the soil warms through each "
           "threshold", per_threshold=True, group="thresholds", coded=True,
           codes=CROSSING_CODES),
        _O("cooling_doy", "day of year", "Last day of year the soil cools through each "
           "threshold", per_threshold=True, group="thresholds", coded=True,
           codes=CROSSING_CODES),
        _O("days_above", "days", "Days per year above each threshold", per_threshold=True,
           group="thresholds"),
        _O("degree_days", "degC day", "Soil degree-days above the base temperature",
           group="thresholds"),
    ]
}

CORE_OUTPUTS = tuple(n for n, o in OUTPUTS.items() if o.group == "core")
