"""The target grid of a run and its division into blocks.

One canonical grid per run: every input is aligned to it, every output is written on it.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass

from affine import Affine
from rasterio.crs import CRS
from rasterio.errors import CRSError
from rasterio.windows import Window
from rasterio.windows import bounds as window_bounds


def crs_from_user_input(text: str) -> CRS:
    """A CRS from what a user typed (``EPSG:32633``, WKT, PROJ string).

    Parsed by pyproj first: a bad string then raises ``ValueError`` with pyproj's reason,
    without the ``ERROR 1: PROJ ...`` line GDAL would print to the console.
    """
    import pyproj

    try:
        return CRS.from_wkt(pyproj.CRS.from_user_input(text).to_wkt())
    except (pyproj.exceptions.CRSError, CRSError, TypeError) as err:
        raise ValueError(str(err)) from None


@dataclass(frozen=True)
class TargetGrid:
    """CRS, affine transform and shape of the output grid (picklable)."""

    crs_wkt: str
    transform: tuple[float, float, float, float, float, float]  # Affine a, b, c, d, e, f
    width: int
    height: int

    @classmethod
    def from_parts(cls, crs: CRS, transform: Affine, width: int, height: int) -> TargetGrid:
        return cls(crs.to_wkt(), tuple(transform)[:6], int(width), int(height))

    @classmethod
    def from_bounds(
        cls, crs: CRS, bounds: tuple[float, float, float, float], res: tuple[float, float]
    ) -> TargetGrid:
        xmin, ymin, xmax, ymax = bounds
        xres, yres = res
        # round to whole pixels, guarding against floating-point noise in the bounds
        width = max(1, math.ceil((xmax - xmin) / xres - 1e-9))
        height = max(1, math.ceil((ymax - ymin) / yres - 1e-9))
        return cls.from_parts(crs, Affine(xres, 0.0, xmin, 0.0, -yres, ymax), width, height)

    @property
    def crs(self) -> CRS:
        return CRS.from_wkt(self.crs_wkt)

    @property
    def affine(self) -> Affine:
        return Affine(*self.transform)

    @property
    def shape(self) -> tuple[int, int]:
        return (self.height, self.width)

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        return window_bounds(Window(0, 0, self.width, self.height), self.affine)

    @property
    def cells(self) -> int:
        return self.width * self.height

    def window_transform(self, window: Window) -> Affine:
        return self.affine @ Affine.translation(window.col_off, window.row_off)

    def blocks(self, chunk: int) -> Iterator[tuple[int, int, Window]]:
        """Row-major blocks of ``chunk`` x ``chunk`` pixels (smaller at the right/bottom)."""
        for bi, row in enumerate(range(0, self.height, chunk)):
            for bj, col in enumerate(range(0, self.width, chunk)):
                yield bi, bj, Window(col, row, min(chunk, self.width - col),
                                     min(chunk, self.height - row))

    def xy(self, row: int, col: int) -> tuple[float, float]:
        """Map coordinates of a cell centre."""
        x, y = self.affine @ (col + 0.5, row + 0.5)
        return float(x), float(y)

    def describe(self) -> dict:
        return {
            "crs": self.crs.to_string(),
            "transform": list(self.transform),
            "width": self.width,
            "height": self.height,
            "bounds": list(self.bounds),
        }
