"""Time the two compiled kernels of geothermmap.physics.periodic on realistic cells.

Builds 512 x 512 = 262,144 cells of a plausible two-harmonic climate (mean 2..12 degC,
annual amplitude 8..14 K, semi-annual 0.5..2.5 K, random phases, damping depth 1.5..3 m),
warms numba up on a small slice, then times ``depth_statistics`` at depths
(0.1, 0.5, 1, 2) m and ``frost_depth_conduction`` (median over ``--repeat`` rounds of
the best of 2 runs, one core: the kernels are serial). Prints seconds and cells per second.

    .venv/bin/python benchmarks/bench_kernels.py [--side 512] [--repeat 5] [--harmonics 2]
        [--ref OLD_PERIODIC.py]

``--ref`` also times (interleaved rounds in alternating order, medians; same inputs)
another copy of the module, e.g. an
older version written out with ``git show REV:geothermmap/physics/periodic.py > FILE``,
and prints the largest differences of its results from the current ones.
"""

from __future__ import annotations

import argparse
import importlib.util
import sys
import time
from pathlib import Path

import numpy as np

from geothermmap.physics import periodic
from geothermmap.physics.harmonics import HarmonicFit

DEPTHS = (0.1, 0.5, 1.0, 2.0)


def make_cells(n: int, n_harmonics: int = 2, seed: int = 0):
    rng = np.random.default_rng(seed)
    mean = rng.uniform(2.0, 12.0, n)
    amps = [rng.uniform(8.0, 14.0, n), rng.uniform(0.5, 2.5, n), rng.uniform(0.2, 1.0, n)]
    amps = np.vstack(amps[:n_harmonics])
    phase = rng.uniform(0.0, 2.0 * np.pi, (n_harmonics, n))
    fit = HarmonicFit(mean, amps * np.cos(phase), amps * np.sin(phase))
    d = rng.uniform(1.5, 3.0, n)
    return fit, d


def best_time(fn, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def load_module(path: str):
    path = Path(path).resolve()
    sys.path.insert(0, str(path.parent))  # a plain import, so that numba can cache it
    spec = importlib.util.spec_from_file_location(path.stem, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[path.stem] = module
    spec.loader.exec_module(module)
    return module


def time_module(module, fit, d, repeat):
    small = HarmonicFit(fit.mean[:100], fit.cos_coef[:, :100], fit.sin_coef[:, :100])
    module.depth_statistics(small, d[:100], DEPTHS)  # compile / load the numba cache
    module.frost_depth_conduction(small, d[:100])
    t_stats = best_time(lambda: module.depth_statistics(fit, d, DEPTHS), repeat)
    t_frost = best_time(lambda: module.frost_depth_conduction(fit, d), repeat)
    return t_stats, t_frost


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--side", type=int, default=512)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--harmonics", type=int, default=2)
    parser.add_argument("--ref", help="another copy of periodic.py to time and compare")
    args = parser.parse_args()
    n = args.side * args.side
    fit, d = make_cells(n, args.harmonics)
    rows = [("current", periodic)]
    if args.ref:
        rows.append(("ref", load_module(args.ref)))
    print(f"cells {n:,}, harmonics {args.harmonics}, depths {DEPTHS}")
    # Rounds alternate the order of the modules (A B, B A, ...) and the median of the
    # rounds is reported: whichever module is timed second in a process tends to look
    # ~10 % faster on this machine, so a one-sided order would fake a difference.
    times: dict[str, list[tuple[float, float]]] = {name: [] for name, _ in rows}
    for rnd in range(max(1, args.repeat)):
        for name, module in rows if rnd % 2 == 0 else rows[::-1]:
            times[name].append(time_module(module, fit, d, 2))
    for name, _ in rows:
        t_stats, t_frost = np.median(np.array(times[name]), axis=0)
        for what, sec in (("depth_statistics", t_stats), ("frost_depth_conduction", t_frost)):
            print(f"{name:8s} {what:22s} {sec:7.3f} s  {n / sec / 1e6:7.2f} Mcells/s")
    if args.ref:
        ref = rows[1][1]
        cur = periodic.depth_statistics(fit, d, DEPTHS)
        old = ref.depth_statistics(fit, d, DEPTHS)
        for key in ("t_min", "t_max"):
            print(f"max |{key} - ref| = {np.nanmax(np.abs(cur[key] - old[key])):.2e} K")
        for key in ("doy_min", "doy_max"):
            diff = (cur[key] - old[key] + 0.5 * 365.25) % 365.25 - 0.5 * 365.25
            print(f"max |{key} - ref| = {np.nanmax(np.abs(diff)):.2e} day")
        zf = periodic.frost_depth_conduction(fit, d)
        zf_ref = ref.frost_depth_conduction(fit, d)
        same_codes = np.array_equal(zf <= 0, zf_ref <= 0)
        err = np.nanmax(np.abs(zf - zf_ref))
        print(f"max |frost - ref| = {err:.2e} m, same codes: {same_codes}")


if __name__ == "__main__":
    main()
