"""Time the two compiled kernels of geothermmap.physics.periodic on realistic cells.

Builds 512 x 512 = 262,144 cells of a plausible two-harmonic climate (mean 2..12 degC,
annual amplitude 8..14 K, semi-annual 0.5..2.5 K, random phases, damping depth 1.5..3 m),
warms numba up on a small slice, then times ``depth_statistics`` at depths
(0.1, 0.5, 1, 2) m and ``frost_depth_conduction`` (best of ``--repeat`` runs, one core:
the kernels are serial). Prints seconds and cells per second.

    .venv/bin/python benchmarks/bench_kernels.py [--side 512] [--repeat 5] [--harmonics 2]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from geothermmap.physics.harmonics import HarmonicFit
from geothermmap.physics.periodic import depth_statistics, frost_depth_conduction

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


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--side", type=int, default=512)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--harmonics", type=int, default=2)
    args = parser.parse_args()
    n = args.side * args.side
    fit, d = make_cells(n, args.harmonics)
    small = HarmonicFit(fit.mean[:100], fit.cos_coef[:, :100], fit.sin_coef[:, :100])
    depth_statistics(small, d[:100], DEPTHS)  # compile / load the numba cache
    frost_depth_conduction(small, d[:100])

    t_stats = best_time(lambda: depth_statistics(fit, d, DEPTHS), args.repeat)
    t_frost = best_time(lambda: frost_depth_conduction(fit, d), args.repeat)
    print(f"cells {n:,}, harmonics {args.harmonics}, depths {DEPTHS}")
    print(f"depth_statistics       {t_stats:7.3f} s  {n / t_stats / 1e6:7.2f} Mcells/s")
    print(f"frost_depth_conduction {t_frost:7.3f} s  {n / t_frost / 1e6:7.2f} Mcells/s")


if __name__ == "__main__":
    main()
