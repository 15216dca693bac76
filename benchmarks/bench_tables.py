"""Benchmark of population tables: build, cache hit, interpolation throughput, peak memory.

    python benchmarks/bench_tables.py                      # solar mixture, 1e5 and 1e6 states
    python benchmarks/bench_tables.py --sizes 1e5 --compute analytic

``--compute analytic`` uses the closed-form pure-hydrogen compute function of the tests (to time
the machinery alone).  Tables go to a temporary cache directory that is deleted at the end.
Peak memory is resource.getrusage's ru_maxrss of this process and of its (worker) children.
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def _rss_mb(who) -> float:
    return resource.getrusage(who).ru_maxrss / 1024.0  # Linux: kB


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1e5,1e6", help="numbers of states (square grids)")
    ap.add_argument("--compute", default="solver", choices=("solver", "analytic"))
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--fractions", default="all", help="stage fractions to store (default all)")
    ap.add_argument("--points", type=float, default=1e6, help="interpolation points")
    ap.add_argument("--cache-dir", help="keep the tables in this directory (default: a temporary "
                                        "one, deleted at the end)")
    args = ap.parse_args(argv)

    from sahaboltz.tables import cache
    from sahaboltz.tables.interpolate import open_table
    from sahaboltz.tables.spec import spec_from_options

    if args.compute == "analytic":
        sys.path.insert(0, str(ROOT / "tests"))
        from table_helpers import hydrogen_compute as compute
        fractions = "H"
        label = "pure hydrogen, closed form (machinery only)"
    else:
        compute = None
        fractions = args.fractions
        label = "solar mixture (Asplund et al. 2009), equilibrium solver"
    print(f"compute: {label}; workers: {args.workers or os.cpu_count()}")

    with tempfile.TemporaryDirectory(prefix="sahaboltz-bench-") as tmp:
        os.environ[cache.CACHE_ENV] = args.cache_dir or tmp
        for size in (int(float(s)) for s in args.sizes.split(",")):
            n = int(round(size ** 0.5))
            spec = spec_from_options(f"2000:50000:{n}", f"1e-2:1e8:{n}", fractions=fractions)
            t0 = time.perf_counter()
            path = cache.get_table(spec, compute=compute, workers=args.workers, progress=False)
            build = time.perf_counter() - t0
            t0 = time.perf_counter()
            again = cache.get_table(spec, compute=compute, workers=args.workers, progress=False)
            hit = time.perf_counter() - t0
            assert again == path
            tab = open_table(path)
            print(f"\n{n} x {n} = {n * n:.3g} states, {len(tab.quantities)} quantities, "
                  f"file {path.stat().st_size / 1e6:.1f} MB")
            print(f"  build           {build:9.2f} s   ({n * n / build:,.0f} states/s)")
            print(f"  cache hit       {hit * 1e3:9.2f} ms  ({100 * hit / build:.3f} % of build)")

            rng = np.random.default_rng(1)
            m = int(args.points)
            t = np.exp(rng.uniform(np.log(2000), np.log(50000), m))
            p = np.exp(rng.uniform(np.log(1e-2), np.log(1e8), m))
            tab.interpolate("electron_density", t[:10], p[:10])  # load + log the dataset once
            t0 = time.perf_counter()
            tab.interpolate("electron_density", t, p)
            dt = time.perf_counter() - t0
            print(f"  interpolate     {m:.0e} points, 1 quantity: {dt:.3f} s "
                  f"({m / dt / 1e6:.2f} M points/s)")
            names = [q for q in tab.quantities if q.startswith("fraction_")][:20]
            tab.interpolate(names, t[:10], p[:10])
            t0 = time.perf_counter()
            tab.interpolate(names, t, p)
            dt = time.perf_counter() - t0
            print(f"  interpolate     {m:.0e} points, {len(names)} quantities: {dt:.3f} s "
                  f"({m * len(names) / dt / 1e6:.2f} M point-quantities/s)")
            print(f"  peak RSS so far: this process {_rss_mb(resource.RUSAGE_SELF):.0f} MB, "
                  f"largest worker {_rss_mb(resource.RUSAGE_CHILDREN):.0f} MB")
            del tab
    return 0


if __name__ == "__main__":
    sys.exit(main())
