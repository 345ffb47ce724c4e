"""The run record: a machine-readable account of what a run did, next to its outputs.

It holds the recipe as resolved, package and library versions, input checksums, per-output
summary statistics, counts of clipped/masked cells and timings. It is always written
atomically and lists only outputs that are complete, so it doubles as the resume ledger.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import platform
from importlib import metadata
from pathlib import Path
from typing import TYPE_CHECKING, Any

from geothermmap.outputs import FROST_CAUTION, OUTPUTS

if TYPE_CHECKING:
    from geothermmap.pipeline import RunPlan

RECORD_VERSION = 1
_LIBRARIES = ("numpy", "scipy", "rasterio", "rioxarray", "xarray", "dask", "distributed",
              "numba", "pydantic", "geopandas")


def package_version() -> str:
    try:
        return metadata.version("geothermmap")
    except metadata.PackageNotFoundError:
        return "0+unknown"


def library_versions() -> dict[str, str]:
    versions = {"python": platform.python_version(), "geothermmap": package_version()}
    for lib in _LIBRARIES:
        try:
            versions[lib] = metadata.version(lib)
        except metadata.PackageNotFoundError:
            versions[lib] = "not installed"
    try:
        import rasterio

        versions["gdal"] = rasterio.__gdal_version__
    except ImportError:  # pragma: no cover
        pass
    return versions


def sha256_file(path: str | Path, bufsize: int = 8 * 1024 * 1024) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while chunk := f.read(bufsize):
            h.update(chunk)
    return h.hexdigest()


def input_checksums(plan: RunPlan) -> dict[str, Any]:
    """sha256 of every input file, per input layer (constants are recorded as values)."""
    out: dict[str, Any] = {}
    for name, layer in plan.layers.items():
        if layer.is_constant:
            out[name] = {"value": layer.value}
        else:
            out[name] = {
                "files": [
                    {"path": s.path, "sha256": sha256_file(s.path),
                     "bytes": os.path.getsize(s.path), "resampling": s.resampling,
                     "same_grid": s.same_grid}
                    for s in layer.sources
                ]
            }
    return out


def run_key(plan: RunPlan, checksums: dict[str, Any]) -> dict[str, str]:
    """Keys that say whether earlier results can be reused: ``base`` (recipe + inputs) and
    ``full`` (also the output list and chunking, which fix the block file layout)."""
    sums = {k: [f["sha256"] for f in v.get("files", [])] or v.get("value")
            for k, v in checksums.items()}
    base = hashlib.sha256(json.dumps([plan.recipe.fingerprint(), sums, package_version()],
                                     sort_keys=True).encode()).hexdigest()[:20]
    full = hashlib.sha256(json.dumps([base, list(plan.outputs), plan.chunk]).encode())
    return {"base": base, "full": full.hexdigest()[:20]}


def new_record(plan: RunPlan, out: Path, checksums: dict, key: dict, timings: dict) -> dict:
    return {
        "record_version": RECORD_VERSION,
        "tool": "geothermmap",
        "status": "running",
        "created_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "recipe": plan.recipe.resolved_dict(),
        "run_key_base": key["base"],
        "run_key": key["full"],
        "versions": library_versions(),
        "inputs": checksums,
        "grid": plan.grid.describe(),
        "chunk": plan.chunk,
        "notes": list(plan.notes),
        "caution": FROST_CAUTION,
        "outputs": {},
        "files": [],
        "counts": {},
        "timings": timings,
    }


def output_entry(plan: RunPlan, name: str, path: Path, stats: list[dict]) -> dict:
    info = OUTPUTS[name]
    from geothermmap.pipeline import band_descriptions

    bands = [dict(description=desc, **s) for (desc, _), s in
             zip(band_descriptions(plan, name), stats, strict=True)]
    return {"file": path.name, "units": info.units, "description": info.description,
            "dtype": info.dtype, "bands": bands, "sha256": sha256_file(path)}


def write(path: Path, rec: dict) -> None:
    """Write atomically: a temporary file in the same folder, then rename."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.partial")
    tmp.write_text(json.dumps(rec, indent=2, sort_keys=False, default=str), encoding="utf-8")
    os.replace(tmp, path)


def read(path: Path) -> dict | None:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
