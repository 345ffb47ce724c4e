"""Reliability: interruption loses nothing, reruns resume, bad input gets a clear answer."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import rasterio
import yaml
from click.testing import CliRunner
from rasterio.transform import from_origin

from geothermmap import run_recipe
from geothermmap.cli import main
from geothermmap.outputs import OUTPUTS
from tests.conftest import UTM, X0, Y0, make_case, write_recipe, write_tif

FINAL_NAMES = {o.filename for o in OUTPUTS.values()}


def _read_all(out: Path) -> dict[str, np.ndarray]:
    maps = {}
    for p in sorted(out.glob("*.tif")):
        with rasterio.open(p) as src:
            maps[p.name] = src.read()
    return maps


def _start(recipe: Path, out: Path, *extra: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "geothermmap.cli", "run", str(recipe), "-o", str(out), "--quiet",
         *extra],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for_blocks(out: Path, n: int, proc: subprocess.Popen, timeout: float = 120) -> None:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if len(list(out.glob(".geothermmap-work/*/blocks/b*.tiles"))) >= n:
            return
        if proc.poll() is not None:
            pytest.fail(f"run ended before it could be interrupted: {proc.stderr.read()}")
        time.sleep(0.05)
    pytest.fail("no blocks appeared in time")


@pytest.fixture(scope="module")
def long_case(tmp_path_factory):
    """A grid with many small blocks so that a run can be interrupted midway."""
    tmp = tmp_path_factory.mktemp("long")
    files = make_case(tmp, width=512, height=384)
    recipe = write_recipe(tmp, files, chunk=64)
    reference = run_recipe(recipe, tmp / "reference")
    return recipe, _read_all(reference.output_dir), tmp


@pytest.mark.slow
def test_sigkill_then_resume_gives_identical_outputs(long_case, tmp_path):
    recipe, reference, _ = long_case
    out = tmp_path / "out"
    proc = _start(recipe, out)
    _wait_for_blocks(out, 10, proc)
    proc.kill()  # SIGKILL: no cleanup code runs
    proc.wait()
    # nothing under a final name is partial: whatever exists there opens and reads fully
    for p in out.glob("*.tif"):
        assert p.name in FINAL_NAMES
        with rasterio.open(p) as src:
            src.read()
    rec = json.loads((out / "run_record.json").read_text())
    assert rec["status"] == "running"
    for entry in rec["outputs"].values():  # the record lists only complete outputs
        assert (out / entry["file"]).exists()

    result = CliRunner().invoke(main, ["run", str(recipe), "-o", str(out), "--resume",
                                       "--quiet"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    rec = json.loads((out / "run_record.json").read_text())
    assert rec["status"] == "complete"
    assert rec["counts"]["blocks_reused"] >= 10  # blocks done before the kill were kept
    final = _read_all(out)
    assert final.keys() == reference.keys()
    for name, data in reference.items():
        np.testing.assert_array_equal(final[name], data, err_msg=name)
    assert not [p for p in out.rglob("*") if "partial" in p.name]
    assert not (out / ".geothermmap-work").exists()


@pytest.mark.slow
def test_sigint_stops_cleanly_without_temporary_files(long_case, tmp_path):
    recipe, _, _ = long_case
    out = tmp_path / "out"
    proc = _start(recipe, out)
    _wait_for_blocks(out, 5, proc)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "interrupted" in err and "Traceback" not in err
    assert json.loads((out / "run_record.json").read_text())["status"] == "interrupted"
    leftovers = [p for p in out.rglob("*") if "partial" in p.name]
    assert not leftovers
    assert not (out / ".geothermmap-work").exists()
    for p in out.glob("*.tif"):  # only complete maps may remain
        with rasterio.open(p) as src:
            src.read()


def test_resume_skips_complete_outputs_and_changed_input_invalidates(tmp_path):
    files = make_case(tmp_path, width=64, height=48)
    recipe = write_recipe(tmp_path, files)
    out = tmp_path / "out"
    first = run_recipe(recipe, out)
    again = run_recipe(recipe, out, resume=True)
    assert "compute_s" not in again.record["timings"]  # nothing recomputed
    assert again.record["outputs"]["t_mean"]["sha256"] == first.record["outputs"]["t_mean"][
        "sha256"]
    # change an input: the earlier outputs are no longer valid
    with rasterio.open(files["water_content"], "r+") as dst:
        dst.write(dst.read() * 0.5)
    changed = run_recipe(recipe, out, resume=True)
    assert "compute_s" in changed.record["timings"]
    assert changed.record["run_key_base"] != first.record["run_key_base"]
    with rasterio.open(first.outputs["damping_depth"]) as a:
        assert a.read(1)[5, 5] != pytest.approx(
            first.record["outputs"]["damping_depth"]["bands"][0]["mean"], rel=1e-12)


def test_new_run_removes_pictures_and_summaries_of_the_old_maps(tmp_path):
    files = make_case(tmp_path, width=64, height=48)
    out = tmp_path / "out"
    run_recipe(write_recipe(tmp_path, files), out)
    derived = [out / "report.html", out / "summary.gpkg", out / "summary.csv",
               out / "quicklook" / "amplitude.png"]
    for path in derived:  # stand-ins for what report, summarize and --quicklook write
        path.parent.mkdir(exist_ok=True)
        path.write_text("of the earlier maps")
    again = run_recipe(write_recipe(tmp_path, files), out, resume=True)
    assert "compute_s" not in again.record["timings"]  # every map kept: so are they
    assert all(p.exists() for p in derived)
    run_recipe(write_recipe(tmp_path, files, harmonics=1), out)  # maps replaced
    assert not any(p.exists() for p in derived)
    assert not (out / "quicklook").exists()


def test_changed_recipe_invalidates_resume(tmp_path):
    files = make_case(tmp_path, width=64, height=48)
    out = tmp_path / "out"
    run_recipe(write_recipe(tmp_path, files), out)
    changed = run_recipe(write_recipe(tmp_path, files, harmonics=1), out, resume=True)
    assert "compute_s" in changed.record["timings"]
    assert changed.record["recipe"]["harmonics"] == 1


def test_interrupt_while_maps_are_written_then_rerun(tmp_path, monkeypatch):
    # An interrupt between a map's rename into place and its entry in the run record
    # must not make the folder look foreign: the rerun, with or without --resume, works
    # and gives the same maps as an uninterrupted run.
    from geothermmap import pipeline

    files = make_case(tmp_path, width=64, height=48)
    recipe = write_recipe(tmp_path, files)
    clean = run_recipe(recipe, tmp_path / "clean")
    real = pipeline._record_output

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    for resume in (True, False):
        out = tmp_path / f"out{resume}"
        monkeypatch.setattr(pipeline, "_record_output", interrupted)
        with pytest.raises(KeyboardInterrupt):
            run_recipe(recipe, out)
        assert list(out.glob("*.tif"))  # maps on disk that the record does not list
        monkeypatch.setattr(pipeline, "_record_output", real)
        again = run_recipe(recipe, out, resume=resume)
        for name, entry in clean.record["outputs"].items():
            assert again.record["outputs"][name]["sha256"] == entry["sha256"], name
        assert "pending_files" not in again.record


def test_resume_with_fewer_outputs_keeps_the_earlier_maps(tmp_path):
    files = make_case(tmp_path, width=64, height=48)
    out = tmp_path / "out"
    first = run_recipe(write_recipe(tmp_path, files), out)
    fewer = run_recipe(write_recipe(tmp_path, files, outputs=["t_min"]), out, resume=True)
    assert set(fewer.record["outputs"]) == set(first.record["outputs"])  # still valid, listed
    run_recipe(write_recipe(tmp_path, files, outputs=["t_min"]), out)  # no foreign files
    assert sorted(p.name for p in out.glob("*.tif")) == ["t_min.tif"]


def test_resume_recomputes_a_damaged_map(tmp_path):
    files = make_case(tmp_path, width=64, height=48)
    recipe = write_recipe(tmp_path, files)
    out = tmp_path / "out"
    first = run_recipe(recipe, out)
    path = first.outputs["t_min"]
    path.write_bytes(path.read_bytes()[:1000])
    again = run_recipe(recipe, out, resume=True)
    assert again.record["outputs"]["t_min"]["sha256"] == first.record["outputs"]["t_min"][
        "sha256"]


# ----------------------------------------------------------------------------- bad input


def _check(recipe: Path):
    return CliRunner().invoke(main, ["check", str(recipe)], catch_exceptions=False)


def _assert_error(result, *fragments):
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output
    for f in fragments:
        assert f.lower() in result.output.lower(), result.output


def test_truncated_geotiff(tmp_path):
    files = make_case(tmp_path)
    blob = files["surface_temperature"].read_bytes()
    bad = tmp_path / "truncated.tif"
    bad.write_bytes(blob[: len(blob) // 2])
    files["surface_temperature"] = bad
    _assert_error(_check(write_recipe(tmp_path, files)), "truncated.tif")


def test_texture_fraction_declared_percent(tmp_path):
    files = make_case(tmp_path)
    tr = from_origin(X0, Y0, 100, 100)
    files["sand"] = write_tif(tmp_path / "sf.tif", np.full((70, 90), 0.4), UTM, tr)
    _assert_error(_check(write_recipe(tmp_path, files)), "look like fractions", "units: '1'")


def test_texture_in_g_per_kg(tmp_path):
    # SoilGrids-style texture in g/kg declared as percent used to be clipped to 100 %
    files = make_case(tmp_path, width=40, height=30)
    with rasterio.open(files["sand"]) as ds:
        sand, crs, tr = ds.read(1), ds.crs, ds.transform
    files["sand"] = write_tif(tmp_path / "sgkg.tif", sand * 10.0, crs, tr)
    _assert_error(_check(write_recipe(tmp_path, files)), "g kg-1")
    recipe = yaml.safe_load(write_recipe(tmp_path, files, outputs=["conductivity"]).read_text())
    recipe["inputs"]["sand"]["units"] = "g kg-1"
    (tmp_path / "gkg.yaml").write_text(yaml.safe_dump(recipe))
    gkg = run_recipe(tmp_path / "gkg.yaml", tmp_path / "o1")
    files["sand"] = write_tif(tmp_path / "spc.tif", sand, crs, tr)
    pct = run_recipe(write_recipe(tmp_path, files, outputs=["conductivity"]), tmp_path / "o2")
    with rasterio.open(gkg.outputs["conductivity"]) as a, \
            rasterio.open(pct.outputs["conductivity"]) as b:
        np.testing.assert_allclose(a.read(), b.read(), rtol=1e-6)


def test_multi_band_soil_raster_is_refused(tmp_path):
    files = make_case(tmp_path, width=40, height=30)
    with rasterio.open(files["clay"]) as ds:
        clay, crs, tr = ds.read(1), ds.crs, ds.transform
    files["clay"] = write_tif(tmp_path / "c2.tif", np.stack([clay, clay]), crs, tr)
    _assert_error(_check(write_recipe(tmp_path, files)), "clay", "band: N")


def test_texture_percent_declared_fraction(tmp_path):
    files = make_case(tmp_path)
    recipe = write_recipe(tmp_path, files)
    data = yaml.safe_load(recipe.read_text())
    data["inputs"]["clay"]["units"] = "1"
    recipe.write_text(yaml.safe_dump(data))
    _assert_error(_check(recipe), "look like percent")


def test_water_content_above_one(tmp_path):
    files = make_case(tmp_path)
    tr = from_origin(X0, Y0, 100, 100)
    files["water_content"] = write_tif(tmp_path / "w.tif", np.full((70, 90), 25.0), UTM, tr)
    _assert_error(_check(write_recipe(tmp_path, files)), "above 1", "units: percent")


def test_degc_declared_as_kelvin(tmp_path):
    files = make_case(tmp_path)
    recipe = write_recipe(tmp_path, files)
    data = yaml.safe_load(recipe.read_text())
    data["inputs"]["surface_temperature"]["units"] = "K"
    recipe.write_text(yaml.safe_dump(data))
    _assert_error(_check(recipe), "look like degc")


def test_strict_bounds_names_first_cell(tmp_path):
    files = make_case(tmp_path)
    tr = from_origin(X0, Y0, 100, 100)
    sand = np.full((70, 90), 40.0)
    sand[12, 34] = 95.0  # with clay 5..30 % this cell exceeds 100 %
    files["sand"] = write_tif(tmp_path / "s.tif", sand, UTM, tr)
    recipe = write_recipe(tmp_path, files, strict=True)
    result = CliRunner().invoke(main, ["run", str(recipe), "-o", str(tmp_path / "o")],
                                catch_exceptions=False)
    _assert_error(result, "sand + clay above 100 %", "row 12, col 34")
    x, y = X0 + 34.5 * 100, Y0 - 12.5 * 100
    assert f"x={x:.3f}" in result.output and f"y={y:.3f}" in result.output
    # the run record of the failed run says so (it must not stay "running")
    rec = json.loads((tmp_path / "o" / "run_record.json").read_text())
    assert rec["status"] == "failed" and "row 12, col 34" in rec["error"]
    assert rec["outputs"] == {}


def test_strict_reports_the_offender_first_in_raster_order(tmp_path):
    # Offenders in several blocks and of two kinds: whatever order the blocks finish in,
    # the one reported is the first cell in raster order (row by row) of the whole grid.
    files = make_case(tmp_path)
    tr = from_origin(X0, Y0, 100, 100)
    sand = np.full((70, 90), 40.0)
    # blocks of 64: (0, 0) rows 0-63 x cols 0-63, (0, 1) cols 64-89, (1, 0) rows 64-69
    for r, c in ((66, 5), (13, 2), (30, 10), (12, 80)):
        sand[r, c] = 95.0  # with clay 5..30 % these exceed 100 %
    water = np.full((70, 90), 0.25)
    water[12, 70] = 0.9  # above any porosity: the first offender, in the second block
    files["sand"] = write_tif(tmp_path / "s.tif", sand, UTM, tr)
    files["water_content"] = write_tif(tmp_path / "w.tif", water, UTM, tr)
    recipe = write_recipe(tmp_path, files, strict=True, chunk=64)
    for attempt in range(3):
        result = CliRunner().invoke(main, ["run", str(recipe), "-o",
                                           str(tmp_path / f"o{attempt}")])
        _assert_error(result, "water content above porosity", "row 12, col 70")
    # check reads every cell under strict and names the same cell
    _assert_error(_check(recipe), "water content above porosity", "row 12, col 70")


def test_non_strict_bounds_are_clipped_and_counted(tmp_path):
    files = make_case(tmp_path)
    tr = from_origin(X0, Y0, 100, 100)
    sand = np.full((70, 90), 40.0)
    sand[12, 34] = 95.0
    water = np.full((70, 90), 0.3)
    water[0, :3] = 0.9  # above porosity (~0.45 at 1.45 g cm-3)
    files["sand"] = write_tif(tmp_path / "s.tif", sand, UTM, tr)
    files["water_content"] = write_tif(tmp_path / "w.tif", water, UTM, tr)
    result = run_recipe(write_recipe(tmp_path, files), tmp_path / "o")
    assert result.counts["texture_sum_above_100_percent_rescaled"] == 1
    assert result.counts["water_above_porosity_clipped"] == 3
    entry = result.record["outputs"]["conductivity"]["input_corrections"]
    assert entry["water_above_porosity_clipped"] == 3


def test_bulk_density_beyond_mineral_density_is_masked(tmp_path):
    files = make_case(tmp_path)
    recipe = write_recipe(tmp_path, files)
    data = yaml.safe_load(recipe.read_text())
    tr = from_origin(X0, Y0, 100, 100)
    bd = np.full((70, 90), 1.4)
    bd[3, 4] = 2.9  # above the particle density of the solids
    data["inputs"]["bulk_density"] = {
        "path": str(write_tif(tmp_path / "bd.tif", bd, UTM, tr)), "units": "g cm-3"}
    recipe.write_text(yaml.safe_dump(data))
    result = run_recipe(recipe, tmp_path / "o")
    assert result.counts["bulk_density_above_particle_density_masked"] == 1
    with rasterio.open(result.outputs["t_min"]) as src:
        assert np.isnan(src.read(1)[3, 4]) and np.isfinite(src.read(1)[3, 5])


def test_partial_coverage_is_nodata_and_counted(tmp_path):
    files = make_case(tmp_path)
    tr = from_origin(X0, Y0, 100, 100)
    files["clay"] = write_tif(tmp_path / "half.tif", np.full((70, 45), 20.0), UTM, tr)
    result = run_recipe(write_recipe(tmp_path, files), tmp_path / "o")
    with rasterio.open(result.outputs["conductivity"]) as src:
        data = src.read(1)
    assert np.isnan(data[30:40, 50:]).all() and np.isfinite(data[30:40, :40]).all()
    assert result.counts["uncovered_input_fraction"]["clay"] == pytest.approx(0.5, abs=0.01)
    # and in cells, per input: the map's nodata is the uncovered clay cells plus the
    # temperature input's 4 x 5 hole (make_case)
    n_nodata = int(np.count_nonzero(np.isnan(data)))
    assert result.counts["nodata_cells_in_surface_temperature"] == 20
    assert n_nodata - 20 <= result.counts["nodata_cells_in_clay"] <= n_nodata
    assert any("covers about 50%" in n for n in result.record["notes"])


def test_yaml_is_never_executed(tmp_path):
    recipe = tmp_path / "evil.yaml"
    recipe.write_text("name: !!python/object/apply:os.system ['echo hacked']\n")
    _assert_error(_check(recipe), "not valid yaml")


def test_network_paths_are_refused(tmp_path):
    files = make_case(tmp_path)
    recipe = write_recipe(tmp_path, files)
    data = yaml.safe_load(recipe.read_text())
    data["inputs"]["sand"]["path"] = "https://example.invalid/sand.tif"
    recipe.write_text(yaml.safe_dump(data))
    _assert_error(_check(recipe), "only local files")


def test_wrong_type_in_recipe(tmp_path):
    files = make_case(tmp_path)
    _assert_error(_check(write_recipe(tmp_path, files, depths="deep")), "depths")
    _assert_error(_check(write_recipe(tmp_path, files, chunk="big")), "chunk")


@pytest.mark.parametrize("overrides, key", [
    ({"depths": [float("nan"), 1.0]}, "depths"),
    ({"depths": [float("inf")]}, "depths"),
    ({"outputs": []}, "outputs"),
    ({"frost_classes": []}, "frost_classes"),
    ({"freeze_thaw": {"enabled": True, "years": -3}}, "years"),
    ({"freeze_thaw": {"enabled": True, "bottom_heat_flux": float("nan")}}, "bottom_heat_flux"),
    ({"surface": {"kind": "air", "n_factor_freezing": -0.5}}, "n_factor_freezing"),
    ({"thresholds": {"values": [5.0, 5.0]}}, "thresholds"),
])
def test_impossible_values_are_refused_by_check(tmp_path, overrides, key):
    # each of these used to pass `check` and then fail or give empty maps in `run`
    files = make_case(tmp_path, width=40, height=30)
    _assert_error(_check(write_recipe(tmp_path, files, **overrides)), key)


def test_recipe_cannot_write_outside_output_folder(tmp_path):
    files = make_case(tmp_path, width=40, height=30)
    out = tmp_path / "o"
    recipe = write_recipe(tmp_path, files, name="../../escape")
    before = set(tmp_path.rglob("*"))
    run_recipe(recipe, out)
    after = set(tmp_path.rglob("*"))
    new = {p for p in after - before if out not in p.parents and p != out}
    assert not new, new


# ------------------------------------------------------------------ input encodings


def _base_and(tmp_path, **replace_files):
    files = make_case(tmp_path, width=40, height=30, nodata_hole=False)
    base = run_recipe(write_recipe(tmp_path, files, outputs=["t_mean", "conductivity"]),
                      tmp_path / "base")
    return files, base


def _max_diff(a, b, name):
    with rasterio.open(a.outputs[name]) as x, rasterio.open(b.outputs[name]) as y:
        return float(np.nanmax(np.abs(x.read() - y.read())))


def test_packed_integers_use_the_band_scale(tmp_path):
    # GDAL's scale/offset metadata (value = raw * scale + offset): int16 tenths of a degree
    # must give the float file's maps (to the 0.05 K rounding of the packing)
    files, base = _base_and(tmp_path)
    with rasterio.open(files["surface_temperature"]) as ds:
        t, crs, tr = ds.read(), ds.crs, ds.transform
    path = tmp_path / "t16.tif"
    with rasterio.open(path, "w", driver="GTiff", width=40, height=30, count=12, dtype="int16",
                       crs=crs, transform=tr, nodata=-32768) as dst:
        dst.write(np.round(t * 10).astype("int16"))
        dst.scales = [0.1] * 12
        dst.offsets = [0.0] * 12
    files["surface_temperature"] = path
    packed = run_recipe(write_recipe(tmp_path, files, outputs=["t_mean", "conductivity"]),
                        tmp_path / "packed")
    assert _max_diff(base, packed, "t_mean") < 0.05


def test_bottom_up_rasters_give_the_same_maps(tmp_path):
    files, base = _base_and(tmp_path)
    for name in ("surface_temperature", "sand"):
        with rasterio.open(files[name]) as ds:
            data, crs, tr = ds.read(), ds.crs, ds.transform
        up = rasterio.Affine(tr.a, 0.0, tr.c, 0.0, -tr.e, tr.f + tr.e * data.shape[1])
        path = tmp_path / f"{name}_bottom_up.tif"
        with rasterio.open(path, "w", driver="GTiff", width=data.shape[2], height=data.shape[1],
                           count=data.shape[0], dtype="float32", crs=crs, transform=up) as dst:
            dst.write(data[:, ::-1, :])
        files[name] = path
    flipped = run_recipe(write_recipe(tmp_path, files, outputs=["t_mean", "conductivity"]),
                         tmp_path / "flipped")
    assert _max_diff(base, flipped, "t_mean") == 0.0
    assert _max_diff(base, flipped, "conductivity") == 0.0


def test_monthly_file_list_with_different_tiling(tmp_path):
    files, base = _base_and(tmp_path)
    with rasterio.open(files["surface_temperature"]) as ds:
        t, crs, tr = ds.read(), ds.crs, ds.transform
    paths = []
    for m in range(12):
        path = tmp_path / f"m{m:02d}.tif"
        extra = {} if m == 0 else {"tiled": True, "blockxsize": 16, "blockysize": 16}
        with rasterio.open(path, "w", driver="GTiff", width=40, height=30, count=1,
                           dtype="float32", crs=crs, transform=tr, **extra) as dst:
            dst.write(t[m][None])
        paths.append(str(path))
    recipe = yaml.safe_load(write_recipe(tmp_path, files, outputs=["t_mean", "conductivity"])
                            .read_text())
    recipe["inputs"]["surface_temperature"]["path"] = paths
    (tmp_path / "list.yaml").write_text(yaml.safe_dump(recipe))
    listed = run_recipe(tmp_path / "list.yaml", tmp_path / "listed")
    assert _max_diff(base, listed, "t_mean") == 0.0


def test_probe_with_map_coordinates_but_no_crs(tmp_path):
    files = make_case(tmp_path, width=40, height=30)
    result = CliRunner().invoke(main, ["probe", str(write_recipe(tmp_path, files)), "--at",
                                       str(X0 + 500), str(Y0 - 500)])
    _assert_error(result, "--crs")


def test_one_pixel_strip_is_a_valid_cog(tmp_path):
    # no overview level can halve a 1-pixel side: the strip gets none (COG readers reject
    # a decimation of 1)
    files = make_case(tmp_path, width=1, height=40, nodata_hole=False)
    res = run_recipe(write_recipe(tmp_path, files, outputs=["t_mean"], chunk=64),
                     tmp_path / "o")
    with rasterio.open(res.outputs["t_mean"]) as ds:
        assert ds.overviews(1) == [] and np.isfinite(ds.read(1)).all()


def test_strict_names_the_first_check_failed_at_a_cell():
    # organic matter 3.0 given as a fraction also makes the particle density too low for
    # the bulk density; the message names the cause (the fraction above 100 %)
    from geothermmap.kernel import CellBoundsError, apply_bounds

    cells = {k: np.array([v]) for k, v in {"sand": 0.4, "clay": 0.2, "water_content": 0.2,
                                           "bulk_density": 1400.0, "organic_matter": 3.0}.items()}
    with pytest.raises(CellBoundsError, match="organic_matter above 100 %"):
        apply_bounds(cells, True, np.array([0]), (1, 1))
