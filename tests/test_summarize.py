"""Zonal statistics against a brute-force per-zone computation (independent: shapely
point-in-polygon tests of the cell centres, then numpy on each zone's masked values)."""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
import shapely
from click.testing import CliRunner
from rasterio.transform import from_origin
from scipy.integrate import quad

import geothermmap.summarize as mod
from geothermmap import run_recipe
from geothermmap.cli import main
from geothermmap.errors import UserError
from geothermmap.outputs import OUTPUTS
from geothermmap.summarize import summarize
from tests.conftest import RES, UTM, X0, Y0, make_case, write_recipe

PCT = (10.0, 50.0, 90.0)


def _random_polygon(rng, cx, cy, r, n=9):
    ang = np.sort(rng.uniform(0, 2 * np.pi, n))
    rad = r * rng.uniform(0.5, 1.0, n)
    return shapely.Polygon(np.column_stack([cx + rad * np.cos(ang), cy + rad * np.sin(ang)]))


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("run")
    files = make_case(tmp)
    return run_recipe(write_recipe(tmp, files), tmp / "out").output_dir


def _zones(tmp: Path, rng) -> tuple[Path, gpd.GeoDataFrame]:
    """Invented zones: random polygons (overlapping), a two-part zone, one partly outside
    the grid and one smaller than a cell."""
    w, h = 90 * RES, 70 * RES
    geoms, names = [], []
    for i in range(12):
        cx, cy = X0 + rng.uniform(0, w), Y0 - rng.uniform(0, h)
        geoms.append(_random_polygon(rng, cx, cy, rng.uniform(300, 2500)))
        names.append(f"z{i:02d}")
    names[5] = names[2]  # a zone of two features
    geoms.append(_random_polygon(rng, X0 - 100, Y0 - 2000, 1500))  # partly outside
    names.append("edge")
    geoms.append(shapely.box(X0 + 4010, Y0 - 4090, X0 + 4030, Y0 - 4070))  # no cell centre
    names.append("tiny")
    gdf = gpd.GeoDataFrame({"district": names, "other": np.arange(len(names))},
                           geometry=geoms, crs=UTM)
    path = tmp / "zones.gpkg"
    gdf.to_file(path)
    return path, gdf


def _brute_force_labels(gdf: gpd.GeoDataFrame, shape) -> tuple[np.ndarray, list[str]]:
    """Zone of every cell by point-in-polygon of its centre; later features win."""
    names = list(dict.fromkeys(gdf["district"]))
    rows, cols = np.mgrid[0:shape[0], 0:shape[1]]
    x = X0 + (cols + 0.5) * RES
    y = Y0 - (rows + 0.5) * RES
    lab = np.zeros(shape, np.int64)
    # later features win, except that features sharing a name form one zone (dissolved):
    # burn each zone's union in the order of the zone's first feature
    for i, name in enumerate(names):
        union = shapely.union_all(gdf.geometry[gdf["district"] == name].values)
        lab[shapely.contains_xy(union, x, y)] = i + 1
    return lab, names


def test_matches_brute_force(run_dir, tmp_path):
    rng = np.random.default_rng(7)
    zpath, gdf = _zones(tmp_path, rng)
    result = summarize(run_dir, zpath, "district", out=tmp_path / "s.gpkg", percentiles=PCT)
    rec = json.loads((run_dir / "run_record.json").read_text())
    some = next(iter(rec["outputs"].values()))
    with rasterio.open(run_dir / some["file"]) as ds:
        shape = ds.shape
    lab, names = _brute_force_labels(gdf, shape)
    table = result.table.set_index(["district", "output", "band"])
    checked = 0
    for name, entry in rec["outputs"].items():
        with rasterio.open(run_dir / entry["file"]) as ds:
            data = ds.read().astype(np.float64)
        for b in range(data.shape[0]):
            for i, zone in enumerate(names):
                row = table.loc[(zone, name, b + 1)]
                assert row["zone_cells"] == np.count_nonzero(lab == i + 1)
                v = data[b][lab == i + 1]
                v = v[np.isfinite(v)]
                for code, code_name in OUTPUTS[name].codes:  # codes are counted apart
                    assert row[f"{code_name}_cells"] == np.count_nonzero(v == code)
                    v = v[v != code]
                assert row["valid_cells"] == v.size
                if v.size == 0:
                    assert np.isnan(row["mean"]) and np.isnan(row["p50"])
                    continue
                # sums in another order: rounding of float64 only
                np.testing.assert_allclose(row["mean"], v.mean(), rtol=1e-12)
                np.testing.assert_allclose(row["std"], v.std(), rtol=1e-9, atol=1e-12 * abs(
                    v.mean()))
                assert row["min"] == v.min() and row["max"] == v.max()
                # exact order statistics; numpy's interpolation formula differs in the
                # last bit
                np.testing.assert_allclose([row[f"p{q:g}"] for q in PCT],
                                           np.percentile(v, PCT), rtol=1e-13)
                checked += 1
    assert checked > 100
    tiny = result.table[result.table["district"] == "tiny"]
    assert (tiny["zone_cells"] == 0).all()
    assert any("no cell centre" in n for n in result.notes)
    assert any("more than one zone" in n for n in result.notes)


def test_files_and_wide_layer(run_dir, tmp_path):
    zpath, gdf = _zones(tmp_path, np.random.default_rng(3))
    result = summarize(run_dir, zpath, "district", out=tmp_path / "sub" / "summary.gpkg")
    assert result.gpkg_path.exists() and result.csv_path == tmp_path / "sub" / "summary.csv"
    layer = gpd.read_file(result.gpkg_path, layer="summary")
    assert len(layer) == gdf["district"].nunique()
    assert layer.crs == gdf.crs and layer.geometry.notna().all()
    for col in ("zone_cells", "zone_area_km2", "t_mean_0.1m_mean", "t_min_2m_p90",
                "frost_depth_p50", "conductivity_count"):
        assert col in layer.columns, col
    csv = pd.read_csv(result.csv_path)
    assert {"district", "output", "band", "units", "mean", "p10", "p50", "p90"} <= set(csv)
    assert set(csv.loc[csv.output == "t_mean", "units"]) == {"degC"}
    # the wide layer and the long table hold the same numbers
    z = layer.set_index("district").loc["z03"]
    row = csv[(csv.district == "z03") & (csv.output == "t_max") & (csv.band == 2)].iloc[0]
    np.testing.assert_allclose(z["t_max_0.5m_mean"], row["mean"], rtol=1e-6)  # CSV: 7 digits


def test_block_size_does_not_change_results(run_dir, tmp_path, monkeypatch):
    """Chunked equals unchunked: blocks of 16 cells give the same numbers as one block."""
    zpath, _ = _zones(tmp_path, np.random.default_rng(11))
    a = summarize(run_dir, zpath, "district", write=False)
    monkeypatch.setattr(mod, "BLOCK", 16)
    b = summarize(run_dir, zpath, "district", write=False)
    cols = ["zone_cells", "valid_cells", "min", "max", "p10", "p50", "p90"]
    pd.testing.assert_frame_equal(a.table[cols], b.table[cols])
    # sums in another order: float64 rounding only
    np.testing.assert_allclose(a.table["mean"], b.table["mean"], rtol=1e-12)
    np.testing.assert_allclose(a.table["std"], b.table["std"], rtol=1e-9, atol=1e-15)


def test_zones_in_another_crs_are_reprojected(run_dir, tmp_path):
    box = shapely.box(X0 + 1000, Y0 - 5000, X0 + 6000, Y0 - 1000)  # 50 x 40 cells
    gpd.GeoDataFrame({"name": ["a"]}, geometry=[box], crs=UTM).to_crs("EPSG:4326").to_file(
        tmp_path / "z.geojson")
    result = summarize(run_dir, tmp_path / "z.geojson", "name", write=False)
    cells = int(result.zones["zone_cells"].iloc[0])
    # the box's edges are straight in lon/lat after the round trip: a few cells differ
    assert abs(cells - 2000) <= 40


# ------------------------------------------------------------ a hand-made output folder


def _fake_run(tmp: Path, maps: dict[str, tuple[np.ndarray, str]], crs=UTM, transform=None,
              tags=None) -> Path:
    out = tmp / "fake"
    out.mkdir(exist_ok=True)
    transform = transform or from_origin(X0, Y0, RES, RES)
    entries = {}
    for name, (data, units) in maps.items():
        data = data if data.ndim == 3 else data[None]
        dtype = "uint8" if data.dtype == np.uint8 else "float32"
        nodata = 0 if dtype == "uint8" else float("nan")
        with rasterio.open(out / f"{name}.tif", "w", driver="GTiff", width=data.shape[2],
                           height=data.shape[1], count=data.shape[0], dtype=dtype, crs=crs,
                           transform=transform, nodata=nodata) as dst:
            dst.write(data.astype(dtype))
            dst.update_tags(units=units, **(tags or {}).get(name, {}))
        entries[name] = {"file": f"{name}.tif", "units": units,
                         "bands": [{"description": "band"}] * data.shape[0]}
    (out / "run_record.json").write_text(json.dumps({"outputs": entries}))
    return out


def _one_zone(tmp: Path, geom, crs=UTM) -> Path:
    path = tmp / "one.gpkg"
    gpd.GeoDataFrame({"name": ["all"]}, geometry=[geom], crs=crs).to_file(path)
    return path


def test_spikes_and_crowded_bins(tmp_path, monkeypatch):
    """Percentiles stay exact at spikes and within one bin width in the fallback path."""
    rng = np.random.default_rng(5)
    v = rng.normal(0.8, 0.3, (60, 80))
    v[:, :30] = 0.0  # a spike at the zone minimum (e.g. frost depth 0 = no frost)
    v[:10] = -1.0  # a spike at the minimum
    v[50:, 60:] = 2.0  # a spike at the maximum
    v[20:30, 40:50] = 0.7  # a spike inside the range
    out = _fake_run(tmp_path, {"t_min": (v, "degC")})
    zones = _one_zone(tmp_path, shapely.box(X0, Y0 - 60 * RES, X0 + 80 * RES, Y0))
    pct = (1, 5, 25, 40, 50, 60, 75, 95, 99.5)
    expected = np.percentile(v.astype(np.float32).astype(np.float64), pct)
    exact = summarize(out, zones, "name", percentiles=pct, write=False).table
    np.testing.assert_allclose(exact[[f"p{q:g}" for q in pct]].iloc[0], expected, rtol=1e-13)

    monkeypatch.setattr(mod, "COLLECT_CAP_PER_BIN", 0)  # force bracketing of every bin
    approx = summarize(out, zones, "name", percentiles=pct, write=False)
    got = approx.table[[f"p{q:g}" for q in pct]].iloc[0].to_numpy()
    n = v.size
    width = (v.max() - v.min()) / min(mod.MAX_BINS, np.ceil(n / mod.CELLS_PER_BIN))
    assert np.all(np.abs(got - expected) <= width)  # the documented bound
    spikes = np.isin(expected, [-1.0, 2.0])  # the zone's minimum and maximum
    assert spikes.sum() >= 2
    np.testing.assert_array_equal(got[spikes], expected[spikes])  # exact at the extremes
    assert any("interpolated" in note for note in approx.notes)


def test_code_values_are_counted_not_averaged(tmp_path):
    # frost_depth -1 = frozen at depth (a code, not a depth): left out of mean and
    # percentiles, counted in frozen_at_depth_cells; 0 (no frost) is a depth and stays
    v = np.full((20, 30), 0.8)
    v[:5] = -1.0
    v[5:10] = 0.0
    out = _fake_run(tmp_path, {"frost_depth": (v, "m")})
    zones = _one_zone(tmp_path, shapely.box(X0, Y0 - 20 * RES, X0 + 30 * RES, Y0))
    row = summarize(out, zones, "name", percentiles=(50,), write=False).table.iloc[0]
    measured = v[v != -1.0]
    assert row["frozen_at_depth_cells"] == 150 and row["valid_cells"] == measured.size
    assert row["min"] == 0.0
    np.testing.assert_allclose(row["mean"], measured.mean(), rtol=1e-6)
    np.testing.assert_allclose(row["p50"], np.percentile(measured, 50), rtol=1e-6)


def test_output_codes_match_the_physics_constants():
    from geothermmap.physics import periodic, rootzone

    assert dict(OUTPUTS["frost_depth"].codes) == {periodic.FROST_PERENNIAL: "frozen_at_depth"}
    assert dict(OUTPUTS["warming_doy"].codes) == {rootzone.NEVER_ABOVE: "never_above",
                                                   rootzone.ALWAYS_ABOVE: "always_above"}


def test_frost_class_shares(tmp_path):
    cls = np.zeros((40, 50), np.uint8)
    cls[:, :10] = 1
    cls[:, 10:35] = 2
    cls[:, 35:45] = 4
    # cls[:, 45:] stays 0 = nodata
    t = np.full((40, 50), 3.0)
    legend = json.dumps({"1": "no frost", "2": "shallow", "3": "moderate", "4": "deep"})
    out = _fake_run(tmp_path, {"frost_class": (cls, "class"), "t_mean": (t, "degC")},
                    tags={"frost_class": {"legend": legend}})
    zones = _one_zone(tmp_path, shapely.box(X0, Y0 - 40 * RES, X0 + 50 * RES, Y0))
    res = summarize(out, zones, "name", write=False)
    rows = res.table[res.table.output == "frost_class"].set_index("class")
    np.testing.assert_allclose(rows.loc[[1, 2, 3, 4], "share"], [10 / 45, 25 / 45, 0, 10 / 45],
                               rtol=1e-12)
    assert rows.loc[2, "description"] == "shallow"
    assert res.zones["frost_class_4_share"].iloc[0] == pytest.approx(10 / 45, rel=1e-12)
    assert res.table[res.table.output == "t_mean"]["mean"].iloc[0] == 3.0


def test_geographic_grid_weights_by_area(tmp_path):
    """On a lon/lat grid means are area-weighted and areas are ellipsoidal."""
    lat = np.linspace(69.5, 40.5, 30)  # cell centres, 1 degree cells, north first
    v = np.repeat(lat[:, None], 20, axis=1)  # the value is the latitude
    out = _fake_run(tmp_path, {"t_mean": (v, "degC")}, crs="EPSG:4326",
                    transform=from_origin(0.0, 70.0, 1.0, 1.0))
    zones = _one_zone(tmp_path, shapely.box(0, 40, 20, 70), crs="EPSG:4326")
    res = summarize(out, zones, "name", write=False).table.iloc[0]
    # independent cell areas: numerical integration of the WGS84 area element
    # dA = M N cos(lat) dlat dlon (meridian and prime-vertical radii of curvature,
    # Snyder 1987, Map Projections - A Working Manual, eqs. 4-18 and 4-20)
    a_m, f = 6378137.0, 1 / 298.257223563  # WGS84 (NIMA 2000, TR8350.2)
    e2 = f * (2 - f)

    def element(phi):
        w = 1 - e2 * np.sin(phi) ** 2
        return a_m * (1 - e2) / w**1.5 * a_m / np.sqrt(w) * np.cos(phi)

    areas = np.array([quad(element, np.radians(c - 0.5), np.radians(c + 0.5))[0]
                      for c in lat]) * np.radians(1.0) / 1e6
    # quadrature is accurate to ~1e-12; the remaining difference is float64 rounding
    np.testing.assert_allclose(res["valid_area_km2"], 20 * areas.sum(), rtol=1e-9)
    np.testing.assert_allclose(res["mean"], np.sum(areas * lat) / areas.sum(), rtol=1e-9)
    assert res["mean"] < lat.mean()  # high latitudes weigh less
    np.testing.assert_allclose(res["p50"], np.percentile(lat.repeat(20), 50), rtol=1e-13)


# ------------------------------------------------------------------------ CLI and errors


def test_cli_summarize(run_dir, tmp_path):
    zpath, _ = _zones(tmp_path, np.random.default_rng(1))
    out = tmp_path / "r" / "x.gpkg"
    result = CliRunner().invoke(main, ["summarize", str(run_dir), "--zones", str(zpath),
                                       "--by", "district", "--out", str(out),
                                       "--percentiles", "5,50,95"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert out.exists() and out.with_suffix(".csv").exists()
    assert "p95" in pd.read_csv(out.with_suffix(".csv")).columns
    assert "zones" in result.output and "x.csv" in result.output
    # a destination that cannot be written is the user's to fix: message and exit 1
    blocker = tmp_path / "a_file"
    blocker.write_text("")
    for bad in (blocker / "s.gpkg", Path("/proc/s.gpkg")):
        result = CliRunner().invoke(main, ["summarize", str(run_dir), "--zones", str(zpath),
                                           "--by", "district", "--out", str(bad)])
        assert result.exit_code == 1, result.output
        assert "cannot write the summary" in result.output


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({"by": "distrct"}, "did you mean 'district'"),
        ({"percentiles": "10,fifty"}, "not a comma-separated list"),
        ({"percentiles": "10,150"}, "between 0 and 100"),
        ({"outputs": ["t_meen"]}, "not in"),
        ({"out": "summary.csv"}, "ending in .gpkg"),
    ],
)
def test_user_errors(run_dir, tmp_path, kwargs, fragment):
    zpath, _ = _zones(tmp_path, np.random.default_rng(2))
    kwargs = {"by": "district", **kwargs}
    if "out" in kwargs:
        kwargs["out"] = tmp_path / kwargs["out"]
    with pytest.raises(UserError, match=fragment):
        summarize(run_dir, zpath, write=False, **kwargs)


def test_zone_file_errors(run_dir, tmp_path):
    far = gpd.GeoDataFrame({"n": [1]}, geometry=[shapely.box(0, 0, 1, 1)], crs="EPSG:4326")
    far.to_file(tmp_path / "far.gpkg")
    with pytest.raises(UserError, match="do not overlap"):
        summarize(run_dir, tmp_path / "far.gpkg", write=False)
    gpd.GeoDataFrame({"n": [1]}, geometry=[shapely.Point(X0 + 500, Y0 - 500)],
                     crs=UTM).to_file(tmp_path / "pts.gpkg")
    with pytest.raises(UserError, match="no polygons"):
        summarize(run_dir, tmp_path / "pts.gpkg", write=False)
    gpd.GeoDataFrame({"n": [1]}, geometry=[shapely.box(0, 0, 1, 1)]).to_file(
        tmp_path / "nocrs.gpkg")
    with pytest.raises(UserError, match="no CRS"):
        summarize(run_dir, tmp_path / "nocrs.gpkg", write=False)
    with pytest.raises(UserError, match="not found"):
        summarize(run_dir, tmp_path / "missing.gpkg", write=False)
    with pytest.raises(UserError, match="run_record.json"):
        summarize(tmp_path, tmp_path / "far.gpkg", write=False)
    result = CliRunner().invoke(main, ["summarize", str(run_dir), "--zones",
                                       str(tmp_path / "far.gpkg")])
    assert result.exit_code == 1 and "Traceback" not in result.output
