"""Locate the bundled demo recipe and sample tiles (source checkout or installed wheel)."""

from __future__ import annotations

from pathlib import Path

from geothermmap.errors import UserError

_PACKAGE_DIR = Path(__file__).resolve().parent


def bundled_dir(name: str) -> Path:
    """``recipes`` or ``sample_tiles``: inside the wheel, else at the checkout root."""
    for candidate in (_PACKAGE_DIR / "_bundled" / name, _PACKAGE_DIR.parent / name):
        if candidate.is_dir():
            return candidate
    raise UserError(f"the bundled '{name}' folder is missing from this installation; "
                    "reinstall geothermmap or run `python -m geothermmap.sampledata`")


def demo_recipe_path() -> Path:
    return bundled_dir("recipes") / "demo.yaml"
