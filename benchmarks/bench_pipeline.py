"""Pipeline throughput and memory against the raw I/O floor, on synthetic grids.

For each grid size this script generates the synthetic scenario once (cached in
benchmarks/_data), then runs, each in its own fresh process:

* floor: a plain rasterio windowed read (512 x 512 windows, all bands) of the same
  inputs and a windowed write of the same output files and band counts (tiled 512,
  the same compression and predictor, GDAL_NUM_THREADS=ALL_CPUS, GDAL_CACHEMAX=64);
* pipeline: ``geothermmap run`` of the same inputs with 8 output variables at 4 depths
  (4 per-cell + 4 per-depth = 20 bands), default settings.

It prints one table: grid, cells, floor s, pipeline s, ratio, Mcells/s, s per Mcell,
peak RSS of each child (MiB). Not a timed test: CI does not run it.

    python benchmarks/bench_pipeline.py                  # 2048 4096 8192
    python benchmarks/bench_pipeline.py --sizes 1024 2048
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
DATA = HERE / "_data"
RUNS = HERE / "_runs"
OUTPUTS = ["damping_depth", "conductivity", "diffusivity", "frost_depth",
           "t_mean", "t_min", "t_max", "amplitude"]
PER_DEPTH = {"t_mean", "t_min", "t_max", "amplitude"}
DEPTHS = [0.1, 0.5, 1.0, 2.0]
INPUTS = ["surface_temperature", "sand", "clay", "water_content"]


def ensure_data(size: int) -> Path:
    folder = DATA / f"grid{size}"
    if not (folder / "water_content.tif").exists():
        from geothermmap.sampledata import generate_synthetic

        t0 = time.perf_counter()
        generate_synthetic(folder, size, size)
        print(f"generated {size}^2 synthetic grid in {time.perf_counter() - t0:.1f} s",
              file=sys.stderr)
    return folder


def write_recipe(data: Path, path: Path) -> Path:
    import yaml

    recipe = {
        "name": f"bench-{data.name}",
        "inputs": {
            "surface_temperature": {"path": str(data / "surface_temperature.tif"),
                                    "units": "degC"},
            "sand": {"path": str(data / "sand.tif"), "units": "percent"},
            "clay": {"path": str(data / "clay.tif"), "units": "percent"},
            "water_content": {"path": str(data / "water_content.tif"), "units": "m3 m-3"},
        },
        "depths": DEPTHS,
        "harmonics": 2,
        "outputs": OUTPUTS,
    }
    path.write_text(yaml.safe_dump(recipe))
    return path


def child_floor(data: Path, out: Path) -> None:
    """Plain windowed read of every input and write of the same output bands."""
    os.environ["GDAL_NUM_THREADS"] = "ALL_CPUS"
    os.environ["GDAL_CACHEMAX"] = "64"
    import numpy as np
    import rasterio
    from rasterio.windows import Window

    from geothermmap.raster.writer import COMPRESSION_OPTIONS

    out.mkdir(parents=True, exist_ok=True)
    srcs = [rasterio.open(data / f"{n}.tif") for n in INPUTS]
    profile = srcs[0].profile
    opts = dict(COMPRESSION_OPTIONS["deflate"])
    dsts = {}
    for name in OUTPUTS:
        count = len(DEPTHS) if name in PER_DEPTH else 1
        dsts[name] = rasterio.open(
            out / f"{name}.tif", "w", driver="GTiff", width=profile["width"],
            height=profile["height"], count=count, dtype="float32", crs=profile["crs"],
            transform=profile["transform"], nodata=float("nan"), tiled=True,
            blockxsize=512, blockysize=512, BIGTIFF="IF_SAFER", compress=opts["COMPRESS"],
            predictor=3, zlevel=int(opts["LEVEL"]))
    h, w = profile["height"], profile["width"]
    for row in range(0, h, 512):
        for col in range(0, w, 512):
            win = Window(col, row, min(512, w - col), min(512, h - row))
            arrays = [s.read(window=win, out_dtype="float32") for s in srcs]
            base = arrays[0]
            for dst in dsts.values():
                dst.write(base[:dst.count] + np.float32(0.5), window=win)
    for d in dsts.values():
        d.close()
    for s in srcs:
        s.close()


def child_pipeline(recipe: Path, out: Path) -> None:
    from geothermmap import run_recipe

    run_recipe(recipe, out, overwrite=True)


def run_child(kind: str, *args: str) -> tuple[float, float]:
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, __file__, "--child", kind, *args],
                          capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"{kind} failed:\n{proc.stderr[-3000:]}")
    rss_mib = json.loads(proc.stdout.strip().splitlines()[-1])["maxrss_kib"] / 1024
    return wall, rss_mib


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[2048, 4096, 8192])
    parser.add_argument("--child", nargs="+", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        kind, *rest = args.child
        if kind == "floor":
            child_floor(Path(rest[0]), Path(rest[1]))
        else:
            child_pipeline(Path(rest[0]), Path(rest[1]))
        print(json.dumps({"maxrss_kib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}))
        return

    rows = []
    for size in args.sizes:
        data = ensure_data(size)
        run_dir = RUNS / f"grid{size}"
        shutil.rmtree(run_dir, ignore_errors=True)
        run_dir.mkdir(parents=True)
        recipe = write_recipe(data, run_dir / "recipe.yaml")
        floor_s, floor_rss = run_child("floor", str(data), str(run_dir / "floor"))
        pipe_s, pipe_rss = run_child("pipeline", str(recipe), str(run_dir / "pipeline"))
        cells = size * size
        rows.append((f"{size}x{size}", cells, floor_s, pipe_s, pipe_s / floor_s,
                     cells / pipe_s / 1e6, pipe_s / (cells / 1e6), floor_rss, pipe_rss))
        shutil.rmtree(run_dir, ignore_errors=True)

    print(f"{'grid':>11} {'cells':>11} {'floor s':>8} {'pipeline s':>10} {'ratio':>6} "
          f"{'Mcells/s':>8} {'s/Mcell':>8} {'floor RSS MiB':>13} {'peak RSS MiB':>12}")
    for r in rows:
        print(f"{r[0]:>11} {r[1]:>11} {r[2]:>8.1f} {r[3]:>10.1f} {r[4]:>6.2f} {r[5]:>8.2f} "
              f"{r[6]:>8.2f} {r[7]:>13.0f} {r[8]:>12.0f}")


if __name__ == "__main__":
    main()
