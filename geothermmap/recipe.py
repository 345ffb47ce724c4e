"""Recipe: the YAML file that names a run's inputs, grid, physics options and outputs.

The keys defined here are a contract that users and other tools build on. Validation is
done with pydantic so that every mistake gets one message naming the key and the fix.
Paths are resolved relative to the recipe file. YAML is read with ``yaml.safe_load``
only: a recipe is data, never code.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
from pathlib import Path
from typing import Annotated, Any, Literal

import yaml
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from geothermmap.errors import RecipeError

#: Accepted unit spellings per input kind, mapped to (scale, offset) that convert a value
#: to the canonical unit used by the physics layer: value_canonical = value * scale + offset.
UNIT_CONVERSIONS: dict[str, dict[str, tuple[float, float]]] = {
    # canonical degC
    "temperature": {
        "degC": (1.0, 0.0),
        "deg_C": (1.0, 0.0),
        "celsius": (1.0, 0.0),
        "degree_Celsius": (1.0, 0.0),
        "K": (1.0, -273.15),
        "kelvin": (1.0, -273.15),
        "0.1 degC": (0.1, 0.0),  # packed integers in tenths of a degree, no scale tag
    },
    # canonical fraction [1]
    "fraction": {"percent": (0.01, 0.0), "%": (0.01, 0.0), "1": (1.0, 0.0),
                 "g kg-1": (0.001, 0.0), "g/kg": (0.001, 0.0)},
    # canonical m3 m-3
    "water_content": {
        "m3 m-3": (1.0, 0.0),
        "m3/m3": (1.0, 0.0),
        "1": (1.0, 0.0),
        "percent": (0.01, 0.0),
        "%": (0.01, 0.0),
    },
    # canonical kg m-3
    "density": {
        "g cm-3": (1000.0, 0.0),
        "g/cm3": (1000.0, 0.0),
        "kg m-3": (1.0, 0.0),
        "kg/m3": (1.0, 0.0),
        "Mg m-3": (1000.0, 0.0),
    },
    # canonical W m-2 (geothermal heat flux) and [1] (n-factors)
    "heat_flux": {"W m-2": (1.0, 0.0), "mW m-2": (0.001, 0.0)},
}

#: Input name -> (unit kind, required, default unit)
INPUT_KINDS: dict[str, tuple[str, bool, str]] = {
    "surface_temperature": ("temperature", True, "degC"),
    "sand": ("fraction", True, "percent"),
    "clay": ("fraction", True, "percent"),
    "water_content": ("water_content", True, "m3 m-3"),
    "bulk_density": ("density", False, "g cm-3"),
    "organic_matter": ("fraction", False, "percent"),
    "quartz": ("fraction", False, "1"),
    "n_factor_freezing": ("fraction", False, "1"),
    "n_factor_thawing": ("fraction", False, "1"),
}

#: Defaults for optional soil inputs when the recipe gives none.
DEFAULT_BULK_DENSITY_G_CM3 = 1.40  # common practice: a typical mineral topsoil value
DEFAULT_ORGANIC_MATTER_PERCENT = 0.0  # mineral soil unless the recipe says otherwise

CONDUCTIVITY_MODEL_NAMES = ("johansen", "cote-konrad", "lu2007")


#: Largest output grid a recipe may ask for (a 200,000 x 200,000 cell region): beyond it
#: a resolution is almost surely in the wrong units.
MAX_GRID_CELLS = 4e10


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class InputSpec(_Strict):
    """One input: a raster path (or a list of single-band paths) or a constant value."""

    path: str | list[str] | None = None
    value: float | None = None
    units: str | None = None
    band: int | None = Field(default=None, ge=1, description="1-based band of a multi-band file")
    nodata: float | None = None

    @model_validator(mode="after")
    def _path_or_value(self) -> InputSpec:
        if (self.path is None) == (self.value is None):
            raise ValueError("give exactly one of 'path' or 'value'")
        if self.value is not None and not math.isfinite(self.value):
            raise ValueError("'value' must be a finite number")
        if isinstance(self.path, list) and not self.path:
            raise ValueError("'path' list is empty")
        for p in [self.path] if isinstance(self.path, str) else self.path or []:
            if "://" in p or p.startswith("/vsi"):
                raise ValueError(f"{p!r}: only local files are read (no network access "
                                 "during a run); download the file first")
        return self


class GridSpec(_Strict):
    """An explicit output grid. Default: the surface-temperature grid."""

    crs: str
    resolution: float | tuple[float, float]
    bounds: tuple[float, float, float, float]

    @field_validator("resolution")
    @classmethod
    def _positive(cls, v: float | tuple[float, float]) -> float | tuple[float, float]:
        values = (v,) if isinstance(v, int | float) else v
        if not all(math.isfinite(r) and r > 0 for r in values):
            raise ValueError("resolution must be positive and finite (map units per pixel)")
        return v

    @field_validator("bounds")
    @classmethod
    def _ordered(cls, v: tuple[float, float, float, float]) -> tuple[float, float, float, float]:
        if not all(math.isfinite(b) for b in v):
            raise ValueError("bounds must be finite numbers [xmin, ymin, xmax, ymax]")
        if not (v[0] < v[2] and v[1] < v[3]):
            raise ValueError("bounds must be [xmin, ymin, xmax, ymax] with xmin < xmax and "
                             "ymin < ymax")
        return v


    @model_validator(mode="after")
    def _size(self) -> GridSpec:
        res = self.resolution
        rx, ry = (res, res) if isinstance(res, int | float) else res
        cells = ((self.bounds[2] - self.bounds[0]) / rx) * ((self.bounds[3] - self.bounds[1]) / ry)
        if cells > MAX_GRID_CELLS:
            raise ValueError(f"bounds / resolution give {cells:.3g} cells, more than "
                             f"{MAX_GRID_CELLS:.0e}; check the resolution's units (map units "
                             "of the crs: metres or degrees)")
        return self


class SoilSpec(_Strict):
    conductivity_model: Literal["johansen", "cote-konrad", "lu2007"] = "johansen"


class FreezeThawSpec(_Strict):
    enabled: bool = False
    freezing_range: tuple[float, float] = (-1.0, 0.0)
    bottom_heat_flux: float = 0.06  # W m-2; a typical continental value, common practice
    years: Literal["auto"] | int = "auto"

    @field_validator("years")
    @classmethod
    def _years(cls, v: str | int) -> str | int:
        if isinstance(v, int) and not 0 <= v <= 1000:
            raise ValueError("years must be 'auto' or a number of spin-up years >= 0")
        return v

    @field_validator("bottom_heat_flux")
    @classmethod
    def _flux(cls, v: float) -> float:
        if not -1.0 <= v <= 1.0:  # NaN fails too; continental values are 0.03..0.12
            raise ValueError("bottom_heat_flux is a geothermal heat flux in W m-2 "
                             "(typically 0.03..0.12; at most 1 in magnitude)")
        return v

    @field_validator("freezing_range")
    @classmethod
    def _range(cls, v: tuple[float, float]) -> tuple[float, float]:
        if not (math.isfinite(v[0]) and v[0] < v[1] <= 0.0):
            raise ValueError("freezing_range must be [low, high] with low < high <= 0 degC")
        return v


class SurfaceSpec(_Strict):
    kind: Literal["ground", "air"] = "ground"
    n_factor_freezing: float | str | InputSpec = 0.7
    n_factor_thawing: float | str | InputSpec = 1.4

    @field_validator("n_factor_freezing", "n_factor_thawing")
    @classmethod
    def _n_factor(cls, v: float | str | InputSpec) -> float | str | InputSpec:
        if isinstance(v, str):
            InputSpec(path=v)  # same path rules as the inputs (local files only)
        value = v if isinstance(v, int | float) else getattr(v, "value", None)
        if value is not None and not (0.0 < value < 10.0):  # NaN fails too
            raise ValueError("an n-factor is a positive ratio of surface to air "
                             "degree-days (typically 0.2..2.5)")
        return v

    def n_factor_spec(self, key: str) -> InputSpec:
        """``n_factor_freezing`` or ``n_factor_thawing`` as an input spec."""
        v = getattr(self, key)
        if isinstance(v, InputSpec):
            return v if v.units else v.model_copy(update={"units": "1"})
        if isinstance(v, str):
            return InputSpec(path=v, units="1")
        return InputSpec(value=float(v), units="1")


class RootZoneSpec(_Strict):
    top: float = Field(0.0, ge=0.0, allow_inf_nan=False)
    bottom: float = Field(0.3, gt=0.0, allow_inf_nan=False)

    @model_validator(mode="after")
    def _order(self) -> RootZoneSpec:
        if self.bottom < self.top:
            raise ValueError("root_zone bottom must be at or below top (depth positive downward)")
        return self


class ThresholdSpec(_Strict):
    depth: float = Field(0.1, ge=0.0, allow_inf_nan=False)
    values: list[float] = Field(default_factory=lambda: [5.0, 10.0], min_length=1)
    degree_day_base: float = 5.0

    @field_validator("values")
    @classmethod
    def _values(cls, v: list[float]) -> list[float]:
        if not all(math.isfinite(t) for t in v) or len(set(v)) != len(v):
            raise ValueError("threshold values must be finite and must not repeat (degC)")
        return v

    @field_validator("degree_day_base")
    @classmethod
    def _base(cls, v: float) -> float:
        if not math.isfinite(v):
            raise ValueError("degree_day_base must be a finite temperature (degC)")
        return v


class Recipe(_Strict):
    """A validated recipe. Field names are the YAML keys."""

    name: str = "run"
    inputs: dict[str, InputSpec]
    grid: GridSpec | None = None
    soil: SoilSpec = SoilSpec()
    depths: list[float] = Field(default_factory=lambda: [0.1, 0.5, 1.0, 2.0])
    harmonics: int = 2
    outputs: list[str] = Field(default_factory=lambda: ["all"])
    strict: bool = False
    chunk: int | None = None
    zero_amplitude_tolerance: float = Field(0.1, gt=0.0, allow_inf_nan=False)
    compression: Literal["deflate", "zstd", "lzw"] = "deflate"
    mantissa_bits: int | None = Field(None, ge=1, le=23)
    freeze_thaw: FreezeThawSpec = FreezeThawSpec()
    surface: SurfaceSpec = SurfaceSpec()
    frost_classes: list[float] = Field(default_factory=lambda: [0.5, 1.0, 1.5, 2.0])
    root_zone: RootZoneSpec | None = None
    thresholds: ThresholdSpec | None = None

    # where the recipe file lives; paths are relative to it (not a YAML key)
    base_dir: Annotated[str, Field(exclude=True)] = "."

    @field_validator("inputs")
    @classmethod
    def _known_inputs(cls, v: dict[str, InputSpec]) -> dict[str, InputSpec]:
        for key in v:
            if key not in INPUT_KINDS:
                raise ValueError(f"unknown input '{key}'{_suggest(key, INPUT_KINDS)}")
        missing = [k for k, (_, req, _) in INPUT_KINDS.items() if req and k not in v]
        if missing:
            raise ValueError(f"missing required input(s): {', '.join(missing)}")
        for key, spec in v.items():
            kind, _, _ = INPUT_KINDS[key]
            if spec.units is not None and spec.units not in UNIT_CONVERSIONS[kind]:
                allowed = ", ".join(repr(u) for u in UNIT_CONVERSIONS[kind])
                raise ValueError(f"input '{key}': unknown units {spec.units!r}; "
                                 f"use one of {allowed}")
        return v

    @field_validator("depths")
    @classmethod
    def _depths(cls, v: list[float]) -> list[float]:
        if not v:
            raise ValueError("give at least one depth (metres, positive downward)")
        if not all(math.isfinite(d) for d in v):
            raise ValueError("depths must be finite numbers of metres")
        if any(d <= 0 for d in v):
            raise ValueError("depths must be > 0 m (positive downward; the surface is 0)")
        if len(set(v)) != len(v):
            raise ValueError("depths must not repeat")
        return v

    @field_validator("outputs")
    @classmethod
    def _outputs(cls, v: list[str]) -> list[str]:
        if not v:
            raise ValueError("give at least one output name, or [all]")
        return v

    @field_validator("harmonics")
    @classmethod
    def _harmonics(cls, v: int) -> int:
        if not 1 <= v <= 3:
            raise ValueError(
                "harmonics must be 1, 2 or 3: 12 monthly means cannot resolve shorter periods "
                "reliably (the fit needs 2n+1 of 12 degrees of freedom)"
            )
        return v

    @field_validator("chunk")
    @classmethod
    def _chunk(cls, v: int | None) -> int | None:
        if v is not None and (v < 64 or v % 16):
            raise ValueError("chunk must be a multiple of 16 and at least 64 pixels (e.g. 512)")
        return v

    @field_validator("frost_classes")
    @classmethod
    def _classes(cls, v: list[float]) -> list[float]:
        if not v or not all(math.isfinite(t) for t in v):
            raise ValueError("frost_classes needs at least one finite burial depth in metres")
        if any(b <= a for a, b in zip(v, v[1:], strict=False)) or any(t <= 0 for t in v):
            raise ValueError("frost_classes must be increasing positive depths in metres")
        return v

    def path_of(self, p: str) -> Path:
        """Resolve a recipe path relative to the recipe file."""
        path = Path(p).expanduser()
        return path if path.is_absolute() else (Path(self.base_dir) / path).resolve()

    def resolved_dict(self) -> dict[str, Any]:
        """The recipe as resolved: defaults filled in (units too), paths absolute (for the
        run record)."""
        d = self.model_dump(mode="json")
        for key, spec in d["inputs"].items():
            if spec.get("units") is None and key in INPUT_KINDS:
                spec["units"] = INPUT_KINDS[key][2]  # the unit assumed, said explicitly
            if spec.get("path") is not None:
                paths = spec["path"] if isinstance(spec["path"], list) else [spec["path"]]
                resolved = [str(self.path_of(p)) for p in paths]
                spec["path"] = resolved if isinstance(spec["path"], list) else resolved[0]
        return d

    def fingerprint(self) -> str:
        """A short hash of the resolved recipe (outputs list excluded), used for resume."""
        d = self.resolved_dict()
        d.pop("outputs", None)
        d.pop("name", None)
        blob = json.dumps(d, sort_keys=True).encode()
        return hashlib.sha256(blob).hexdigest()[:16]


def _suggest(key: str, valid: Any) -> str:
    close = difflib.get_close_matches(key, list(valid), n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def _format_validation_error(err: ValidationError, source: str) -> str:
    lines = []
    top_keys = set(Recipe.model_fields) - {"base_dir"}
    for e in err.errors():
        loc = ".".join(str(p) for p in e["loc"])
        if e["type"] == "extra_forbidden":
            key = str(e["loc"][-1])
            parent = e["loc"][:-1]
            pool: Any = top_keys
            if parent and parent[0] in {"soil", "freeze_thaw", "surface", "grid", "root_zone",
                                        "thresholds"}:
                field = Recipe.model_fields[str(parent[0])]
                ann = field.annotation
                sub = getattr(ann, "model_fields", None)
                if sub is None:  # Optional[...] -> first arg
                    args = getattr(ann, "__args__", ())
                    sub = next((a.model_fields for a in args if hasattr(a, "model_fields")), {})
                pool = list(sub)
            elif len(parent) == 2 and parent[0] == "inputs":
                pool = list(InputSpec.model_fields)
            lines.append(f"unknown key '{loc}'{_suggest(key, pool)}")
        else:
            msg = e["msg"].removeprefix("Value error, ")
            lines.append(f"'{loc}': {msg}" if loc else msg)
    return f"{source}: invalid recipe:\n  " + "\n  ".join(lines)


def parse_recipe(data: Any, *, base_dir: str | Path = ".", source: str = "recipe") -> Recipe:
    """Validate a recipe given as a mapping (already parsed YAML)."""
    if not isinstance(data, dict):
        raise RecipeError(f"{source}: a recipe must be a YAML mapping of keys to values")
    try:
        return Recipe(**data, base_dir=str(Path(base_dir).resolve()))
    except ValidationError as err:
        raise RecipeError(_format_validation_error(err, source)) from None
    except TypeError as err:  # e.g. a non-string key
        raise RecipeError(f"{source}: invalid recipe: {err}") from None


def load_recipe(path: str | Path) -> Recipe:
    """Read and validate a recipe file (safe YAML loader; paths relative to the file)."""
    path = Path(path)
    if path.is_dir():
        raise RecipeError(f"{path} is a folder: give the path of a recipe file (.yaml)")
    if not path.is_file():
        raise RecipeError(f"recipe file not found: {path}")
    try:
        text = path.read_text(encoding="utf-8")
        data = yaml.safe_load(text)
    except yaml.YAMLError as err:
        raise RecipeError(f"{path}: not valid YAML: {err}") from None
    except (OSError, UnicodeDecodeError) as err:
        raise RecipeError(f"{path}: cannot read recipe: {err}") from None
    return parse_recipe(data, base_dir=path.parent, source=str(path))
