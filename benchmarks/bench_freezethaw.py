"""Throughput of the freeze-thaw solver (physics.freezethaw) in cell-years per second.

Cases (1e5 cells by default, one year of daily steps, the default 41-node grid
to 20 m, default freezing range -1..0 degC, latent heat of 0.1-0.4 m3 m-3 water):

1. all cells freezing, 1 simulated year per cell (initial profile given, no
   spin-up): single-threaded, then 2 workers (cells split into chunks run on a
   ThreadPoolExecutor; the numba kernel releases the GIL);
2. the same cells with the default spin-up (analytic start, tolerance 0.01 K):
   simulated cell-years per second and result cells per second;
3. a mixed map, half of the cells never freezing: those are skipped with
   ``needs_freeze_thaw`` (their periodic analytic solution is not timed here),
   figure per map cell.

Run: ``.venv/bin/python benchmarks/bench_freezethaw.py [--cells N] [--workers W]``.
Wall-clock figures depend on what else runs on the machine; the load average
is printed with them.
"""

from __future__ import annotations

import argparse
import os
import resource
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from geothermmap.physics import freezethaw as ft

DT = 365.25 / 365  # d, one year in 365 steps


def make_cells(n: int, rng: np.random.Generator, warm_fraction: float = 0.0) -> dict:
    """Synthetic cells: annual mean and amplitude of the surface temperature, soil properties."""
    mean = rng.uniform(-3.0, 6.0, n)
    amp = rng.uniform(10.0, 16.0, n)  # mean - amp < -1: every cell freezes
    warm = rng.random(n) < warm_fraction
    mean[warm] = rng.uniform(9.0, 15.0, warm.sum())
    amp[warm] = rng.uniform(3.0, 8.0, warm.sum())  # minimum > 0: never freezes
    ku = rng.uniform(0.8, 2.0, n)
    return {
        "mean": mean,
        "amp": amp,
        "ku": ku,
        "kf": ku * rng.uniform(1.1, 1.6, n),
        "cu": rng.uniform(2.0e6, 3.0e6, n),
        "cf": rng.uniform(1.6e6, 2.2e6, n),
        "water": rng.uniform(0.1, 0.4, n),
    }


def forcing(c: dict) -> np.ndarray:
    n = c["mean"].size
    return ft.daily_forcing_from_harmonics(c["mean"], -c["amp"][None, :], np.zeros((1, n)))


def solve(ts, c, sel, init=None, max_spin=0):
    return ft.solve_freeze_thaw(
        ts[:, sel],
        c["ku"][sel],
        c["kf"][sel],
        c["cu"][sel],
        c["cf"][sel],
        c["water"][sel],
        [0.5, 1.0, 2.0],
        dt_days=DT,
        bottom_heat_flux_w_m2=0.06,
        initial_profile_degC=None if init is None else init[:, sel],
        max_spinup_years=max_spin,
    )


def run_chunks(ts, c, idx, workers, init=None, max_spin=0, chunk=4096):
    """Solve cells idx in chunks on a thread pool; returns list of results."""
    chunks = [idx[i : i + chunk] for i in range(0, idx.size, chunk)]
    if workers == 1:
        return [solve(ts, c, s, init, max_spin) for s in chunks]
    with ThreadPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(lambda s: solve(ts, c, s, init, max_spin), chunks))


def timed(fn):
    t0 = time.perf_counter()
    c0 = time.process_time()
    out = fn()
    return out, time.perf_counter() - t0, time.process_time() - c0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cells", type=int, default=100_000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--spinup-cells", type=int, default=20_000)
    args = ap.parse_args()
    n = args.cells
    rng = np.random.default_rng(42)
    z = ft.depth_grid()
    print(f"grid: {z.size} nodes to {z[-1]:g} m, first layer {z[1]:g} m; 365 steps of {DT:.6f} d")
    print(f"load average before: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")

    c = make_cells(n, rng)
    ts = forcing(c)
    d1 = np.sqrt(2.0 * c["ku"] / c["cu"] / (2 * np.pi / (365.25 * 86400)))
    init = np.ascontiguousarray(
        ft.periodic_initial_profile(c["mean"], -c["amp"][None, :], np.zeros((1, n)), d1, z)
    )
    assert ft.needs_freeze_thaw(ts).all()
    idx = np.arange(n)
    _, t_compile, _ = timed(lambda: solve(ts, c, idx[:64], init))  # compile or load cache
    print(f"first call (numba compile or cache load): {t_compile:.1f} s")

    res, wall, cpu = timed(lambda: run_chunks(ts, c, idx, 1, init))
    iters = np.concatenate([r.iterations for r in res]).mean() / 365
    print(
        f"[1] all freezing, 1 year, 1 worker : {n / wall:9.0f} cell-years/s "
        f"(wall {wall:.1f} s, cpu {cpu:.1f} s = {n / cpu:.0f} per cpu-second, "
        f"{iters:.2f} iterations/step)"
    )
    _, wall2, cpu2 = timed(lambda: run_chunks(ts, c, idx, args.workers, init))
    print(
        f"[1] all freezing, 1 year, {args.workers} workers: {n / wall2:9.0f} cell-years/s "
        f"(wall {wall2:.1f} s, cpu {cpu2:.1f} s = {n / cpu2:.0f} per cpu-second, "
        f"speed-up {wall / wall2:.2f})"
    )

    m = min(args.spinup_cells, n)
    sub = idx[:m]
    res, wall3, _ = timed(lambda: run_chunks(ts, c, sub, args.workers, None, 30))
    spin = np.concatenate([r.spinup_years for r in res])
    ok = np.concatenate([r.spinup_converged for r in res])
    sim_years = np.sum(spin + 1)  # plus a part-year from the warm-season start
    print(
        f"[2] with spin-up ({m} cells, {args.workers} workers): {m / wall3:9.0f} result cells/s, "
        f"{sim_years / wall3:9.0f} simulated cell-years/s (full years only); spin-up years "
        f"mean {spin.mean():.1f}, max {spin.max()}, converged {ok.mean():.1%}"
    )

    cm = make_cells(n, rng, warm_fraction=0.5)
    tsm = forcing(cm)
    d1m = np.sqrt(2.0 * cm["ku"] / cm["cu"] / (2 * np.pi / (365.25 * 86400)))
    initm = np.ascontiguousarray(
        ft.periodic_initial_profile(cm["mean"], -cm["amp"][None, :], np.zeros((1, n)), d1m, z)
    )

    def mixed():
        need = np.flatnonzero(ft.needs_freeze_thaw(tsm))
        return need, run_chunks(tsm, cm, need, args.workers, initm)

    (need, _), wall4, _ = timed(mixed)
    print(
        f"[3] mixed map, {need.size / n:.0%} freezing, never-freezing skipped, {args.workers} "
        f"workers: {n / wall4:9.0f} map cell-years/s (wall {wall4:.1f} s)"
    )
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak RSS {rss:.0f} MiB; load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
