"""Tests of the probe command: point equals map cell, clear errors.

Reference: the maps written by ``run_recipe`` for the same recipe (the map is the product
the probe must agree with), read back at the probed cell with rasterio.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np
import pytest
import rasterio
from click.testing import CliRunner
from rasterio.warp import transform as warp_transform

from geothermmap import run_recipe
from geothermmap.cli import main
from geothermmap.probe import TABLE_OUTPUTS, probe_point
from tests.conftest import RES, UTM, X0, Y0, make_case, write_recipe


def _map_values(path: Path, row: int, col: int) -> np.ndarray:
    with rasterio.open(path) as src:
        return src.read()[:, row, col].astype(np.float64)


@pytest.fixture
def case(tmp_path: Path):
    files = make_case(tmp_path, width=70, height=50)
    recipe = write_recipe(tmp_path, files, outputs=["all"])
    result = run_recipe(recipe, tmp_path / "out")
    return recipe, result


def test_probe_csv_equals_map_cell(case) -> None:
    recipe, result = case
    row, col = 33, 47
    x, y = X0 + (col + 0.5) * RES, Y0 - (row + 0.5) * RES  # cell centre in the grid CRS
    # ask in geographic coordinates: exercises the CRS transform (a few mm of round trip)
    lon, lat = warp_transform(UTM, "EPSG:4326", [x], [y])
    out = CliRunner().invoke(main, ["probe", str(recipe), "--at", str(lon[0]), str(lat[0]),
                                    "--csv"])
    assert out.exit_code == 0, out.output
    rows = list(csv.DictReader(io.StringIO(out.output)))
    assert [float(r["depth_m"]) for r in rows] == [0.1, 0.5, 1.0, 2.0]
    for key in TABLE_OUTPUTS:
        ref = _map_values(result.outputs[key], row, col)
        got = np.array([float(r[key]) for r in rows])
        # maps are float32: relative 1e-6 (float32 epsilon 1.2e-7, printed to 9 digits)
        np.testing.assert_allclose(got, ref, rtol=1e-6, atol=1e-6)


def test_probe_point_equals_every_map(case) -> None:
    recipe, result = case
    row, col = 5, 60
    x, y = X0 + (col + 0.3) * RES, Y0 - (row + 0.8) * RES  # anywhere inside the cell
    res = probe_point(recipe, x, y, UTM)
    assert (res.row, res.col) == (row, col)
    for name, path in result.outputs.items():
        ref = _map_values(path, row, col)
        np.testing.assert_allclose(res.outputs[name].astype(np.float32), ref, rtol=0, atol=0)


def test_probe_text_plot_and_frost_caution(case, tmp_path: Path) -> None:
    recipe, _ = case
    png = tmp_path / "p.png"
    out = CliRunner().invoke(main, ["probe", str(recipe), "--at", str(X0 + 1500),
                                    str(Y0 - 2500), "--crs", UTM, "--plot", str(png)])
    assert out.exit_code == 0, out.output
    assert "damping_depth" in out.output and "depth table" in out.output
    lines = out.output.splitlines()
    i = next(k for k, s in enumerate(lines) if s.strip().startswith("frost_depth"))
    assert "CAUTION" in lines[i + 1]
    assert png.stat().st_size > 10_000
    with open(png, "rb") as f:
        assert f.read(8) == b"\x89PNG\r\n\x1a\n"


def test_probe_outside_grid_and_nodata_are_user_errors(case) -> None:
    recipe, _ = case
    runner = CliRunner()
    out = runner.invoke(main, ["probe", str(recipe), "--at", "0", "0"])
    assert out.exit_code == 1
    assert "outside the output grid" in out.output
    # the nodata hole of make_case: rows 10..13, cols 20..24
    out = runner.invoke(main, ["probe", str(recipe), "--at", str(X0 + 22.5 * RES),
                               str(Y0 - 11.5 * RES), "--crs", UTM])
    assert out.exit_code == 1
    assert "nodata in input(s) surface_temperature" in out.output
    out = runner.invoke(main, ["probe", str(recipe), "--at", "1", "2", "--crs", "EPSG:bogus"])
    assert out.exit_code == 1 and "not a CRS" in out.output
    out = runner.invoke(main, ["probe", str(recipe), "--at", "1", "2", "--crs", "EPSG:99999"])
    assert out.exit_code == 1 and "not a CRS" in out.output and "ERROR 1" not in out.output


def test_probe_unwritable_plot_and_closed_pipe_are_not_internal_errors(case, tmp_path) -> None:
    recipe, _ = case
    runner = CliRunner()
    at = ["--at", str(X0 + 1500), str(Y0 - 2500), "--crs", UTM]
    out = runner.invoke(main, ["probe", str(recipe), *at, "--plot", str(tmp_path / "p.xyz")])
    assert out.exit_code == 1 and "unsupported picture type '.xyz'" in out.output
    blocker = tmp_path / "a_file"
    blocker.write_text("")
    out = runner.invoke(main, ["probe", str(recipe), *at, "--plot",
                               str(blocker / "p.png")])
    assert out.exit_code == 1 and "cannot write the plot" in out.output
    assert "internal error" not in out.output
    # the reader of a pipe leaving early (`| head -1`) ends quietly, without a traceback
    import subprocess
    import sys

    proc = subprocess.Popen([sys.executable, "-m", "geothermmap.cli", "probe", str(recipe),
                             *at], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()  # before the first line: every write of the probe meets EPIPE
    err = proc.stderr.read().decode()
    proc.wait(timeout=60)
    assert "internal error" not in err and "Traceback" not in err, err


def test_probe_json_holds_every_output_band_as_in_the_maps(case) -> None:
    import json

    recipe, result = case
    row, col = 33, 47
    x, y = X0 + (col + 0.5) * RES, Y0 - (row + 0.5) * RES
    out = CliRunner().invoke(main, ["probe", str(recipe), "--at", str(x), str(y), "--crs",
                                    UTM, "--json"])
    assert out.exit_code == 0, out.output
    rec = json.loads(out.output)
    assert (rec["point"]["row"], rec["point"]["col"]) == (row, col)
    assert set(rec["outputs"]) == set(result.outputs)
    for name, path in result.outputs.items():
        got = np.array([np.nan if b["value"] is None else b["value"]
                        for b in rec["outputs"][name]["bands"]])
        np.testing.assert_allclose(got, _map_values(path, row, col), rtol=1e-6, atol=1e-6,
                                   err_msg=name)
    assert "Screening" in rec["caution"]
    assert len(rec["inputs"]["surface_temperature"]["values"]) == 12
