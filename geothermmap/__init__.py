"""geothermmap: depth-resolved ground-temperature and frost maps.

Physics lives in :mod:`geothermmap.physics` (numpy in, numpy out), raster I/O and alignment
in :mod:`geothermmap.raster`, orchestration in :mod:`geothermmap.pipeline` and the CLI.

Frost outputs are screening estimates: design burial and foundation depths follow local
codes and licensed engineers.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

__all__ = ["run_recipe", "plan_run", "load_recipe", "RunResult", "__version__"]

try:
    from importlib.metadata import version as _version

    __version__ = _version("geothermmap")
except Exception:  # noqa: BLE001 - running from a source tree without metadata
    __version__ = "0+unknown"

if TYPE_CHECKING:
    from geothermmap.pipeline import RunResult, plan_run, run_recipe
    from geothermmap.recipe import load_recipe


def __getattr__(name: str) -> Any:
    # lazy imports keep `import geothermmap.physics` light (no GDAL) for array users
    if name in {"run_recipe", "plan_run", "RunResult"}:
        from geothermmap import pipeline

        return getattr(pipeline, name)
    if name == "load_recipe":
        from geothermmap.recipe import load_recipe

        return load_recipe
    raise AttributeError(name)
